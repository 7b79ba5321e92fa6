"""Scenes: the labelled data model of a 3D cloudy atmosphere, its validation, optics and generators."""

from .atmosphere import standard_profile
from .config import load_config
from .generator import generate_scene
from .model import (FORMAT_VERSION, annotate, cloud_mask, column_optical_depth, grid_shape,
                    layer_thickness, make_scene, spacing)
from .optics import (BANDS, cloud_extinction, cloud_single_scattering, mix_optics, rayleigh_optical_depth,
                     solar_weights)
from .random_fields import gaussian_random_field
from .regimes import REGIMES, CloudLayer, Regime, get_regime
from .validation import validate_scene

__all__ = ["BANDS", "FORMAT_VERSION", "REGIMES", "CloudLayer", "Regime", "annotate", "cloud_extinction",
           "cloud_mask", "cloud_single_scattering", "column_optical_depth", "gaussian_random_field",
           "generate_scene", "get_regime", "grid_shape", "layer_thickness", "load_config", "make_scene",
           "mix_optics", "rayleigh_optical_depth", "solar_weights", "spacing", "standard_profile",
           "validate_scene"]


def plot_scene(*args, **kwargs):
    """Draw a scene (see :func:`surrogate3d.scenes.plotting.plot_scene`); imports matplotlib on use."""
    from .plotting import plot_scene as _plot

    return _plot(*args, **kwargs)
