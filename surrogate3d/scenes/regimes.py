"""Named cloud regimes: the parameters from which the scene generator builds a scene.

A regime is one or more cloud layers (:class:`CloudLayer`) plus a default domain
height.  The named regimes in :data:`REGIMES` are our own scenarios, chosen to span
the situations where 3D radiative effects differ (isolated cumuli, broken
stratocumulus, deep towers, a thin layer shading cumuli), two edge cases
(``overcast``, ``clear``), and families whose clouds are arranged differently from
the isotropic power-law field (:mod:`surrogate3d.scenes.structures`): clustered
cumuli, cloud streets, cumuli tilted by wind shear, a deck with cascade-intermittent
water, and open and closed cells.  Any parameter can be changed with
:meth:`Regime.with_overrides` or by building new dataclasses.
"""

from dataclasses import asdict, dataclass, replace

from ..core.validation import check_number, check_option
from ..errors import ParameterError
from .structures import STRUCTURES, CascadeField, CellularField, ClusteredField, StreetField


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
    structure : structure or None
        How clouds are arranged horizontally: one of the classes of
        :mod:`surrogate3d.scenes.structures`, or ``None`` for the isotropic power-law
        field with ``outer_scale``.
    tilt : float
        Horizontal displacement of the cloud per unit height above ``base_height``
        [m m-1], in [0, 5]: the tangent of the tilt from the vertical.  A cloud whose
        updraft rises at ``w`` through a wind that changes by ``dU`` over the cloud depth
        leans by about ``dU / w`` (kinematics of a rising parcel; common practice).
        ``cloud_fraction`` and ``mean_optical_depth`` then describe the untilted cloud:
        its footprint at the base and its optical depth along the tilted axis.
    tilt_direction : float or None
        Direction of the displacement with height [deg], counterclockwise from +x, in
        [0, 360); ``None`` draws it from the seed.
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
    structure: ClusteredField | StreetField | CellularField | CascadeField | None = None
    tilt: float = 0.0
    tilt_direction: float | None = None

    def validate(self, label="cloud layer"):
        """Raise ParameterError naming the first parameter outside its range; return self."""
        p = f"{label}: "
        check_number(p + "cloud_fraction", self.cloud_fraction, 0.0, 1.0)
        check_number(p + "base_height", self.base_height, 0.0, 30000.0)
        check_number(p + "thickness", self.thickness, 0.0, 30000.0, low_open=True)
        check_number(p + "mean_optical_depth", self.mean_optical_depth, 0.0, 10000.0, low_open=True)
        check_number(p + "cloud_top_variability", self.cloud_top_variability, 0.0, 5.0)
        check_number(p + "base_variability", self.base_variability, 0.0, 10000.0)
        if self.outer_scale is not None:
            check_number(p + "outer_scale", self.outer_scale, 0.0, 1e7, low_open=True)
        check_number(p + "edge_taper", self.edge_taper, 0.0, 10.0)
        check_number(p + "droplet_number", self.droplet_number, 0.0, 1e11, low_open=True)
        check_number(p + "droplet_spectrum_k", self.droplet_spectrum_k, 0.0, 1.0, low_open=True)
        if self.effective_radius is not None:
            check_number(p + "effective_radius", self.effective_radius, 1e-7, 1e-4)
        if self.structure is not None:
            if type(self.structure) not in STRUCTURES.values():
                names = ", ".join(c.__name__ for c in STRUCTURES.values())
                raise ParameterError(f"{p}structure must be one of {names} or None; got {self.structure!r}")
            self.structure.validate(f"{p}structure")
        check_number(p + "tilt", self.tilt, 0.0, 5.0)
        if self.tilt_direction is not None:
            check_number(p + "tilt_direction", self.tilt_direction, 0.0, 360.0, high_open=True)
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
        check_number(f"regime {self.name}: top", self.top, 0.0, 32000.0, low_open=True)
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
#: ``cumulus_under_thin_layer``, tau about 2) to thick (``deep_convection``, 80).  The
#: last six arrange their clouds with the structures of
#: :mod:`surrogate3d.scenes.structures` or tilt them.
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
    "clustered_cumulus": Regime(
        "clustered_cumulus", "cumuli gathered in clusters with clear gaps between them",
        (CloudLayer(cloud_fraction=0.12, base_height=700.0, thickness=800.0, mean_optical_depth=15.0,
                    cloud_top_variability=0.4, base_variability=30.0, outer_scale=1500.0, edge_taper=0.8,
                    droplet_number=150e6, droplet_spectrum_k=0.80, structure=ClusteredField()),),
        top=4000.0),
    "cloud_streets": Regime(
        "cloud_streets", "cumuli aligned in streets along boundary-layer rolls",
        (CloudLayer(cloud_fraction=0.30, base_height=800.0, thickness=500.0, mean_optical_depth=10.0,
                    cloud_top_variability=0.3, base_variability=20.0, outer_scale=1500.0, edge_taper=0.6,
                    droplet_number=150e6, droplet_spectrum_k=0.80, structure=StreetField()),),
        top=4000.0),
    "sheared_cumulus": Regime(
        "sheared_cumulus", "cumulus congestus leaning downshear",
        (CloudLayer(cloud_fraction=0.15, base_height=800.0, thickness=1500.0, mean_optical_depth=20.0,
                    cloud_top_variability=0.35, base_variability=30.0, outer_scale=1500.0, edge_taper=0.8,
                    droplet_number=150e6, droplet_spectrum_k=0.80, tilt=0.6),),
        top=4000.0),
    "intermittent_stratocumulus": Regime(
        "intermittent_stratocumulus", "a stratocumulus deck whose water follows a bounded cascade",
        (CloudLayer(cloud_fraction=0.90, base_height=600.0, thickness=350.0, mean_optical_depth=12.0,
                    cloud_top_variability=0.15, base_variability=20.0, outer_scale=3000.0, edge_taper=0.3,
                    droplet_number=100e6, droplet_spectrum_k=0.80, structure=CascadeField()),),
        top=4000.0),
    "open_cells": Regime(
        "open_cells", "open mesoscale cells: cloudy walls around clear cells",
        (CloudLayer(cloud_fraction=0.40, base_height=800.0, thickness=600.0, mean_optical_depth=12.0,
                    cloud_top_variability=0.3, base_variability=20.0, outer_scale=2000.0, edge_taper=0.6,
                    droplet_number=50e6, droplet_spectrum_k=0.80, structure=CellularField("open")),),
        top=4000.0),
    "closed_cells": Regime(
        "closed_cells", "closed mesoscale cells: cloudy cells parted by clear walls",
        (CloudLayer(cloud_fraction=0.85, base_height=600.0, thickness=400.0, mean_optical_depth=15.0,
                    cloud_top_variability=0.2, base_variability=20.0, outer_scale=3000.0, edge_taper=0.5,
                    droplet_number=150e6, droplet_spectrum_k=0.80, structure=CellularField("closed")),),
        top=4000.0),
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
    return REGIMES[check_option("regime", regime, REGIMES)]
