"""Named cloud regimes: the parameters from which the scene generator builds a scene.

A regime is one or more cloud layers (:class:`CloudLayer`) plus a default domain
height.  The named regimes in :data:`REGIMES` are our own scenarios, chosen to span
the situations where 3D radiative effects differ (isolated cumuli, broken
stratocumulus, deep towers, a thin layer shading cumuli) and two edge cases
(``overcast``, ``clear``).  Any parameter can be changed with
:meth:`Regime.with_overrides` or by building new dataclasses.
"""

import math
from dataclasses import asdict, dataclass, replace

from ..errors import ParameterError


def _check(label, name, value, low, high, low_open=False, high_open=False):
    """Raise ParameterError unless ``low <(=) value <(=) high``."""
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise ParameterError(f"{label}{name} must be a number; got {value!r}") from None
    ok = math.isfinite(v) and (v > low if low_open else v >= low) and (v < high if high_open else v <= high)
    if not ok:
        lo, hi = ("(" if low_open else "["), (")" if high_open else "]")
        raise ParameterError(f"{label}{name} must be in {lo}{low:g}, {high:g}{hi}; got {value!r}")
    return v


@dataclass(frozen=True)
class CloudLayer:
    """One cloud layer of a regime.

    Attributes
    ----------
    cloud_fraction : float
        Fraction of columns [1] that hold cloud of this layer, in [0, 1]; met exactly.
    base_height : float
        Mean cloud-base height above the surface [m].
    thickness : float
        Mean cloud thickness in the cloud interior [m]; thinner near cloud edges when
        ``edge_taper > 0``.
    mean_optical_depth : float
        Mean over the layer's cloudy columns of the layer's cloud optical depth [1];
        met exactly by scaling the liquid water content.
    cloud_top_variability : float
        Coefficient of variation [1] of the thickness (hence of cloud-top height above
        the base), from a lognormal multiplier on a second random field; 0 for flat tops.
    base_variability : float
        Standard deviation of the cloud-base height [m], from a third random field.
    outer_scale : float or None
        Outer scale [m] of the random fields (typical cloud size); ``None`` for a pure
        power law up to the domain size.
    edge_taper : float
        Width, in standard deviations of the cloud-mask field above its threshold, over
        which clouds thicken from their edge to full thickness (as the square root);
        0 gives full thickness up to the edge.
    droplet_number : float
        Cloud droplet number concentration [m-3] for the effective radius.
    droplet_spectrum_k : float
        Ratio of volume-mean to effective radius cubed [1]: about 0.80 maritime and 0.67
        continental (Martin et al. 1994).
    effective_radius : float or None
        A fixed effective radius [m]; when given, ``droplet_number`` is not used.
    """

    cloud_fraction: float
    base_height: float
    thickness: float
    mean_optical_depth: float
    cloud_top_variability: float = 0.3
    base_variability: float = 0.0
    outer_scale: float | None = 2000.0
    edge_taper: float = 0.0
    droplet_number: float = 100e6
    droplet_spectrum_k: float = 0.80
    effective_radius: float | None = None

    def validate(self, label="cloud layer"):
        """Raise ParameterError naming the first parameter outside its range; return self."""
        p = f"{label}: "
        _check(p, "cloud_fraction", self.cloud_fraction, 0.0, 1.0)
        _check(p, "base_height", self.base_height, 0.0, 30000.0)
        _check(p, "thickness", self.thickness, 0.0, 30000.0, low_open=True)
        _check(p, "mean_optical_depth", self.mean_optical_depth, 0.0, 10000.0, low_open=True)
        _check(p, "cloud_top_variability", self.cloud_top_variability, 0.0, 5.0)
        _check(p, "base_variability", self.base_variability, 0.0, 10000.0)
        if self.outer_scale is not None:
            _check(p, "outer_scale", self.outer_scale, 0.0, 1e7, low_open=True)
        _check(p, "edge_taper", self.edge_taper, 0.0, 10.0)
        _check(p, "droplet_number", self.droplet_number, 0.0, 1e11, low_open=True)
        _check(p, "droplet_spectrum_k", self.droplet_spectrum_k, 0.0, 1.0, low_open=True)
        if self.effective_radius is not None:
            _check(p, "effective_radius", self.effective_radius, 1e-7, 1e-4)
        return self


@dataclass(frozen=True)
class Regime:
    """A named cloud scenario.

    Attributes
    ----------
    name : str
        Regime name (used in file names and the ``regime`` attribute of scenes).
    description : str
        One line for listings.
    layers : tuple of CloudLayer
        Cloud layers from the lowest up; the first is the main layer that
        :meth:`with_overrides` changes.  Empty for clear sky.
    top : float
        Default height of the domain top [m].
    """

    name: str
    description: str
    layers: tuple = ()
    top: float = 4000.0

    def validate(self):
        """Raise ParameterError naming the first bad parameter; return self."""
        if not self.name or not all(c.isalnum() or c in "_-" for c in self.name):
            raise ParameterError(f"regime name must be letters, digits, '_' or '-'; got {self.name!r}")
        _check(f"regime {self.name}: ", "top", self.top, 0.0, 32000.0, low_open=True)
        for i, layer in enumerate(self.layers):
            if not isinstance(layer, CloudLayer):
                raise ParameterError(f"regime {self.name}: layers[{i}] must be a CloudLayer; got {layer!r}")
            layer.validate(f"regime {self.name} layer {i}")
        return self

    def with_overrides(self, cloud_fraction=None, mean_optical_depth=None, cloud_top_variability=None):
        """A copy with the main (lowest) layer's cloud fraction, optical depth or top variability changed.

        Parameters
        ----------
        cloud_fraction : float, optional
            [1], in [0, 1].
        mean_optical_depth : float, optional
            [1], > 0.
        cloud_top_variability : float, optional
            [1], in [0, 5].

        Returns
        -------
        Regime
        """
        changes = {k: v for k, v in (("cloud_fraction", cloud_fraction), ("mean_optical_depth", mean_optical_depth),
                                     ("cloud_top_variability", cloud_top_variability)) if v is not None}
        if not changes:
            return self
        if not self.layers:
            if changes.get("cloud_fraction", 0.0) == 0.0 and set(changes) <= {"cloud_fraction"}:
                return self
            raise ParameterError(f"regime {self.name!r} has no cloud layer; {', '.join(sorted(changes))} "
                                 "cannot be set (choose a cloudy regime)")
        main = replace(self.layers[0], **changes)
        main.validate(f"regime {self.name} layer 0")
        return replace(self, layers=(main,) + tuple(self.layers[1:]))

    def as_dict(self):
        """Plain-dict form (for JSON attributes and listings)."""
        return asdict(self)


#: The named regimes.  Optical depths span thin (the upper layer of
#: ``cumulus_under_thin_layer``, tau about 2) to thick (``deep_convection``, 80).
REGIMES = {
    "scattered_cumulus": Regime(
        "scattered_cumulus", "fair-weather cumuli over 25 % of the sky",
        (CloudLayer(cloud_fraction=0.25, base_height=800.0, thickness=500.0, mean_optical_depth=12.0,
                    cloud_top_variability=0.35, base_variability=30.0, outer_scale=1500.0, edge_taper=0.8,
                    droplet_number=150e6, droplet_spectrum_k=0.80),),
        top=4000.0),
    "broken_stratocumulus": Regime(
        "broken_stratocumulus", "a marine stratocumulus deck with 30 % holes",
        (CloudLayer(cloud_fraction=0.70, base_height=600.0, thickness=350.0, mean_optical_depth=12.0,
                    cloud_top_variability=0.25, base_variability=20.0, outer_scale=3000.0, edge_taper=0.4,
                    droplet_number=100e6, droplet_spectrum_k=0.80),),
        top=4000.0),
    "deep_convection": Regime(
        "deep_convection", "deep continental towers (liquid-water optics throughout)",
        (CloudLayer(cloud_fraction=0.35, base_height=1000.0, thickness=6000.0, mean_optical_depth=80.0,
                    cloud_top_variability=0.35, base_variability=50.0, outer_scale=2500.0, edge_taper=1.0,
                    effective_radius=12e-6),),
        top=12000.0),
    "cumulus_under_thin_layer": Regime(
        "cumulus_under_thin_layer", "cumuli under a thin, nearly overcast mid-level layer",
        (CloudLayer(cloud_fraction=0.20, base_height=700.0, thickness=500.0, mean_optical_depth=10.0,
                    cloud_top_variability=0.35, base_variability=30.0, outer_scale=1500.0, edge_taper=0.8,
                    droplet_number=150e6, droplet_spectrum_k=0.80),
         CloudLayer(cloud_fraction=0.90, base_height=3000.0, thickness=250.0, mean_optical_depth=2.0,
                    cloud_top_variability=0.2, base_variability=40.0, outer_scale=5000.0, edge_taper=0.3,
                    effective_radius=8e-6)),
        top=4000.0),
    "overcast": Regime(
        "overcast", "an unbroken stratus layer (edge case: every column cloudy)",
        (CloudLayer(cloud_fraction=1.0, base_height=500.0, thickness=400.0, mean_optical_depth=20.0,
                    cloud_top_variability=0.15, base_variability=10.0, outer_scale=5000.0, edge_taper=0.0,
                    droplet_number=100e6, droplet_spectrum_k=0.80),),
        top=4000.0),
    "clear": Regime("clear", "no cloud (edge case: Rayleigh scattering and gas absorption only)", (), top=4000.0),
}


def get_regime(regime):
    """Return a validated :class:`Regime` from a name of :data:`REGIMES` or a Regime.

    Raises
    ------
    surrogate3d.errors.ParameterError
        Unknown name or invalid parameters.
    """
    if isinstance(regime, Regime):
        return regime.validate()
    if isinstance(regime, str) and regime in REGIMES:
        return REGIMES[regime]
    raise ParameterError(f"regime must be one of {', '.join(REGIMES)} (or a Regime); got {regime!r}")
