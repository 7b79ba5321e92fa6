"""Scenes: the labelled data model of a 3D cloudy atmosphere, its validation, optics and generators."""

from .model import (FORMAT_VERSION, annotate, cloud_mask, column_optical_depth, grid_shape,
                    layer_thickness, make_scene, spacing)
from .validation import validate_scene

__all__ = ["FORMAT_VERSION", "annotate", "cloud_mask", "column_optical_depth", "grid_shape",
           "layer_thickness", "make_scene", "spacing", "validate_scene"]
