"""The longwave host features and their recipe (numpy only).

What a host model can know about one of its columns for the longwave correction: the
cloud geometry and the neighbourhood windows of the shortwave feature library
(:mod:`surrogate3d.pairs.features`), the air temperature at cloud base and top, the
surface temperature and emissivity, and the host's own independent-column longwave
fluxes.  ``docs/features.md``, "Longwave features", defines each.

:func:`longwave_host_features` computes them from host fields (for the pair table and
for the runtime alike); :class:`LongwaveFeatureRecipe` names the columns a longwave
model uses, and :func:`feature_recipe_from_dict` reads either spectrum's recipe from a
model card or a coefficient file.
"""

import json
import math

import numpy as np

from ..baselines.effective_cloud_fraction import effective_cloud_fraction_corrections
from ..core.data_model import LONGWAVE_COLUMN_FLUXES, RECIPE_VERSION
from ..core.validation import check_array, check_number
from ..errors import ParameterError, ValidationError
from . import features as library
from .recipe import DEFAULT_PARAMETERS, FeatureRecipe

#: Targets of the longwave pairs and models: 3D minus independent column of the
#: longwave column fields [W m-2].
LONGWAVE_TARGETS = tuple(LONGWAVE_COLUMN_FLUXES)

#: Neighbourhood radii [m] of the neighbour cloud fraction: the shortwave recipe's defaults.
NEIGHBOUR_RADII = tuple(DEFAULT_PARAMETERS["neighbour_radii"])

#: Host feature name -> (units, meaning), in column order (per-radius ones expanded).
LONGWAVE_FEATURES = {
    "cloud_fraction": ("1", "vertically projected cloud fraction of the host column"),
    "cloud_base_height": ("m", "bottom edge of the lowest cloudy host layer; 0 in clear columns"),
    "cloud_top_height": ("m", "top edge of the highest cloudy host layer; 0 in clear columns"),
    "cloud_base_air_temperature": ("K", "air temperature at cloud_base_height (layer temperatures interpolated "
                                        "linearly in height)"),
    "cloud_top_air_temperature": ("K", "air temperature at cloud_top_height"),
    "cloud_side_area_per_area": ("1", "cloud_edge_length times (cloud_top_height - cloud_base_height): area of "
                                      "cloud sides per unit horizontal area"),
    **{library.column_name("neighbour_mean_cloud_fraction", r): (
        "1", f"mean cloud fraction over the window reaching {r:g} m beyond the column") for r in NEIGHBOUR_RADII},
    "liquid_water_path": ("g m-2", "column liquid water path, host-column mean"),
    **{f"host_{flux}": ("W m-2", f"the host's independent-column {flux.removeprefix('longwave_').replace('_', ' ')}"
                                 " (longwave_two_stream result, host-column mean)") for flux in LONGWAVE_TARGETS},
    "surface_temperature": ("K", "surface (skin) temperature, host-column mean"),
    "surface_longwave_emissivity": ("1", "broadband longwave surface emissivity, host-column mean"),
    "host_longwave_clear_sky_surface_downward_flux": ("W m-2", "the host's clear-sky surface downward longwave flux "
                                                               "(its column solver without cloud water)"),
    "effective_cloud_fraction_prior": ("W m-2", "(N_e - N) (F - F_clear) / N: the surface downward change of the "
                                                "effective cloud fraction of random cylinders (Killen and Ellingson "
                                                "1994) from the host's cover, edge length, cloud depth and fluxes"),
    "host_longwave_clear_sky_toa_upward_flux": ("W m-2", "the host's clear-sky top-of-domain upward longwave flux"),
    "effective_cloud_fraction_toa_prior": ("W m-2", "(N_e - N) (F - F_clear) / N of the top-of-domain upward flux: "
                                                    "the cylinders seen from above"),
    "effective_cloud_fraction_atmosphere_prior": ("W m-2", "minus the top-of-domain prior minus emissivity times the "
                                                           "surface prior: the atmosphere's share of a change that "
                                                           "conserves energy"),
}


def air_temperature_at(z_edge, layer_temperature, height):
    """Air temperature [K] at ``height``, interpolated linearly in height between layer centres.

    Beyond the lowest and highest layer centre the line through the two nearest centres
    is extended (a lapse rate holds to the surface); one layer gives its own temperature.

    Parameters
    ----------
    z_edge : ndarray (nz + 1,)
        Layer edge heights [m].
    layer_temperature : ndarray (nz, ny, nx)
        Air temperature of each host layer [K].
    height : ndarray (ny, nx)
        Height in each column [m].

    Returns
    -------
    ndarray (ny, nx)

    Examples
    --------
    >>> t = np.array([285.0, 275.0])[:, None, None] * np.ones((2, 1, 1))
    >>> float(air_temperature_at(np.array([0.0, 1000.0, 2000.0]), t, np.array([[0.0]]))[0, 0])
    290.0
    """
    centre = 0.5 * (z_edge[1:] + z_edge[:-1])
    t = np.asarray(layer_temperature, dtype=np.float64)
    if centre.size == 1:
        return np.broadcast_to(t[0], np.shape(height)).copy()
    # Index k of the lower centre of the bracketing pair, clamped so the ends extrapolate.
    k = np.clip(np.searchsorted(centre, height) - 1, 0, centre.size - 2)
    lower = np.take_along_axis(t, k[None], axis=0)[0]
    upper = np.take_along_axis(t, k[None] + 1, axis=0)[0]
    weight = (height - centre[k]) / (centre[k + 1] - centre[k])
    return lower + weight * (upper - lower)


def longwave_host_features(fields, host_fluxes):
    """The longwave features of :data:`LONGWAVE_FEATURES` from host fields.

    Parameters
    ----------
    fields : dict
        :func:`surrogate3d.pairs.longwave_pairs.longwave_host_fields` (a host passes the same keys).
    host_fluxes : dict of str -> ndarray (Ny, Nx)
        The host's independent-column longwave fields [W m-2], keys :data:`LONGWAVE_TARGETS`.

    Returns
    -------
    dict of str -> ndarray (Ny, Nx)
        Keys in the order of :data:`LONGWAVE_FEATURES`.
    """
    missing = [k for k in ("z_edge", "dx", "dy", "layer_cloud_fraction", "total_cloud_fraction", *LONGWAVE_HOST_FIELDS)
               if k not in fields]
    missing += [flux for flux in LONGWAVE_TARGETS if flux not in host_fluxes]
    if missing:
        raise ValidationError(f"longwave host fields lack {missing}")
    check_longwave_host_fields(fields, host_fluxes)
    base = library.cloud_base_height(fields)
    top = library.cloud_top_height(fields)
    z_edge = np.asarray(fields["z_edge"], dtype=np.float64)
    out = {
        "cloud_fraction": library.cloud_fraction(fields),
        "cloud_base_height": base,
        "cloud_top_height": top,
        "cloud_base_air_temperature": air_temperature_at(z_edge, fields["layer_air_temperature"], base),
        "cloud_top_air_temperature": air_temperature_at(z_edge, fields["layer_air_temperature"], top),
        # Edge length per area times the cloud's depth: the sides of a column of cloud
        # (gaps between separate layers count as cloud; the host knows no better).
        "cloud_side_area_per_area": library.cloud_edge_length(fields) * (top - base),
    }
    for radius in NEIGHBOUR_RADII:
        out[library.column_name("neighbour_mean_cloud_fraction", radius)] = \
            library.neighbour_mean_cloud_fraction(fields, float(radius))
    out["liquid_water_path"] = np.asarray(fields["liquid_water_path"], dtype=np.float64)
    out.update({f"host_{flux}": np.asarray(host_fluxes[flux], dtype=np.float64) for flux in LONGWAVE_TARGETS})
    out["surface_temperature"] = np.asarray(fields["surface_temperature"], dtype=np.float64)
    out["surface_longwave_emissivity"] = np.asarray(fields["surface_longwave_emissivity"], dtype=np.float64)
    clear = np.asarray(fields["longwave_clear_sky_surface_downward_flux"], dtype=np.float64)
    out["host_longwave_clear_sky_surface_downward_flux"] = clear
    out["effective_cloud_fraction_prior"] = effective_cloud_fraction_prior(
        out["cloud_fraction"], fields["cloud_edge_length"], top - base,
        out["host_longwave_surface_downward_flux"], clear)
    clear_toa = np.asarray(fields["longwave_clear_sky_toa_upward_flux"], dtype=np.float64)
    out["host_longwave_clear_sky_toa_upward_flux"] = clear_toa
    # Random cylinders hide as much of the ground from space as of the sky from the ground.
    out["effective_cloud_fraction_toa_prior"] = effective_cloud_fraction_prior(
        out["cloud_fraction"], fields["cloud_edge_length"], top - base, out["host_longwave_toa_upward_flux"],
        clear_toa)
    # The domain's net absorption balances what leaves it: atmosphere + surface net = -(TOA upward).
    out["effective_cloud_fraction_atmosphere_prior"] = -(out["effective_cloud_fraction_toa_prior"]
                                                         + out["surface_longwave_emissivity"]
                                                         * out["effective_cloud_fraction_prior"])
    return out


#: Allowed values of the longwave host fields: name -> (low, high, low open); the host's
#: net absorptions may have either sign.  The generated Fortran checks the same.
LONGWAVE_FIELD_RANGES = {
    "layer_cloud_fraction": (0.0, 1.0, False), "layer_air_temperature": (0.0, None, True),
    "total_cloud_fraction": (0.0, 1.0, False), "cloud_edge_length": (0.0, None, False),
    "liquid_water_path": (0.0, None, False), "surface_temperature": (0.0, None, True),
    "surface_longwave_emissivity": (0.0, 1.0, False),
    "longwave_clear_sky_surface_downward_flux": (0.0, None, False),
    "longwave_clear_sky_toa_upward_flux": (0.0, None, False),
    **{flux: ((None, None, False) if "net_absorption" in flux else (0.0, None, False)) for flux in LONGWAVE_TARGETS},
}


def check_longwave_host_fields(fields, host_fluxes):
    """Raise ValidationError at the first value of a longwave host field that is not finite or not allowed.

    Parameters
    ----------
    fields : dict
        The host fields of :func:`longwave_host_features`.
    host_fluxes : dict of str -> ndarray
        The host's independent-column longwave fields [W m-2].

    Raises
    ------
    surrogate3d.errors.ValidationError
        Naming the field, the index and the allowed interval
        (:data:`LONGWAVE_FIELD_RANGES`); a ``dx`` or ``dy`` that is not a positive number,
        a ``z_edge`` that is not strictly increasing, or a field of the wrong shape.
    """
    for key in ("dx", "dy"):
        check_number(f"host_fields[{key!r}]", fields[key], 0.0, None, low_open=True, error=ValidationError)
    z_edge = np.asarray(fields["z_edge"], dtype=np.float64)
    if z_edge.ndim != 1 or z_edge.size < 2 or not np.all(np.isfinite(z_edge)) or np.any(np.diff(z_edge) <= 0):
        raise ValidationError(f"host_fields['z_edge'] must be strictly increasing layer edge heights [m]; got {z_edge!r}")
    plane = np.shape(fields["total_cloud_fraction"])
    if len(plane) != 2:
        raise ValidationError(f"host_fields['total_cloud_fraction'] must have dimensions (ny, nx); got shape {plane}")
    for name, (low, high, low_open) in LONGWAVE_FIELD_RANGES.items():
        value = host_fluxes[name] if name in host_fluxes else fields[name]
        expected = (z_edge.size - 1, *plane) if name.startswith("layer_") else plane
        if np.shape(value) != expected:
            raise ValidationError(f"host_fields[{name!r}] has shape {np.shape(value)}; expected {expected} "
                                  + ("(nz, ny, nx) for the layers of z_edge" if name.startswith("layer_") else
                                     "(ny, nx), as total_cloud_fraction"))
        check_array(f"host_fields[{name!r}]", value, low, high, low_open=low_open, error=ValidationError)


def effective_cloud_fraction_prior(cloud_fraction, edge_length, cloud_depth, host_down, clear_down):
    """The effective-cloud-fraction change of the surface downward longwave flux a host can compute [W m-2].

    The host's column flux is the flat-plate mixture ``F = F_clear + N (F_cloudy - F_clear)``, so
    ``F_cloudy - F_clear = (F - F_clear) / N``; with the effective cloud fraction ``N_e`` of
    randomly placed cylinders of the host column's cover, depth and edge length
    (:mod:`surrogate3d.baselines.effective_cloud_fraction`) the change is
    ``(N_e - N) (F - F_clear) / N``; zero in clear and overcast columns.

    Parameters
    ----------
    cloud_fraction : ndarray
        Vertically projected cover [1].
    edge_length : ndarray
        Cloud-edge length per unit area [m-1].
    cloud_depth : ndarray
        Cloud top minus cloud base height [m].
    host_down, clear_down : ndarray
        The host's surface downward longwave flux, all-sky and clear-sky [W m-2].

    Returns
    -------
    ndarray

    References
    ----------
    Killen, R. M., and R. G. Ellingson, 1994: The effect of shape and spatial distribution of
    cumulus clouds on longwave irradiance. J. Atmos. Sci., 51, 2123-2136.

    Examples
    --------
    >>> one = np.ones(1)
    >>> bool(effective_cloud_fraction_prior(0.3 * one, 1e-3 * one, 1000.0 * one, 345.0 * one, 330.0 * one)[0] > 0)
    True
    """
    n = np.asarray(cloud_fraction, dtype=np.float64)
    cloudy_minus_clear = (np.asarray(host_down, dtype=np.float64) - np.asarray(clear_down, dtype=np.float64)) \
        / np.where(n > 0.0, n, 1.0)
    return effective_cloud_fraction_corrections(n, cloudy_minus_clear, np.zeros_like(n), edge_length, cloud_depth,
                                                np.ones_like(n))["longwave_surface_downward_flux"]


#: Host fields :func:`longwave_host_features` reads besides the cloud geometry of
#: :func:`surrogate3d.pairs.coarsen.scene_host_fields`.
LONGWAVE_HOST_FIELDS = ("layer_air_temperature", "liquid_water_path", "surface_temperature",
                        "surface_longwave_emissivity", "cloud_edge_length", "longwave_clear_sky_surface_downward_flux",
                        "longwave_clear_sky_toa_upward_flux")


def longwave_halo_width(recipe, dx, dy):
    """The halo ``(columns along x, columns along y)`` the features of a longwave recipe read.

    Only the neighbour windows reach beyond a column (every other longwave feature is the
    column's own); a window reaching ``r`` beyond the column reads ``ceil(r / dx)`` columns
    along x, as the shortwave windows do (:func:`surrogate3d.runtime.halo.halo_width`).

    Parameters
    ----------
    recipe : LongwaveFeatureRecipe
    dx, dy : float
        Host column size [m].

    Returns
    -------
    (int, int)

    Examples
    --------
    >>> longwave_halo_width(LongwaveFeatureRecipe(), 1000.0, 1000.0)
    (10, 10)
    """
    windows = {library.column_name("neighbour_mean_cloud_fraction", r): r for r in NEIGHBOUR_RADII}
    radius = max((windows[f] for f in recipe.features if f in windows), default=0.0)
    return tuple(int(math.ceil(radius / size - 1e-9)) if radius > 0.0 else 0 for size in (float(dx), float(dy)))


class LongwaveFeatureRecipe:
    """The longwave feature columns a model uses, in order.

    Parameters
    ----------
    features : sequence of str, optional
        Names from :data:`LONGWAVE_FEATURES` (default: all, in its order).
    name : str
        A label for the recipe.
    version : int
        Recipe version; must be the library's.

    Examples
    --------
    >>> recipe = LongwaveFeatureRecipe(["cloud_fraction", "cloud_base_air_temperature"])
    >>> recipe.column_units()
    ['1', 'K']
    >>> feature_recipe_from_dict(recipe.to_dict()) == recipe
    True
    """

    spectrum = "longwave"

    def __init__(self, features=None, name="longwave", version=RECIPE_VERSION):
        features = list(LONGWAVE_FEATURES) if features is None else features
        if isinstance(features, str) or not all(isinstance(f, str) for f in features):
            raise ParameterError(f"features must be a list of longwave feature names; got {features!r}")
        unknown = [f for f in features if f not in LONGWAVE_FEATURES]
        if unknown:
            raise ParameterError(f"unknown longwave feature name(s) {unknown}; known: {', '.join(LONGWAVE_FEATURES)}")
        if len(set(features)) != len(features):
            raise ParameterError(f"features lists {sorted({f for f in features if features.count(f) > 1})} "
                                 "more than once")
        if version != RECIPE_VERSION:
            raise ParameterError(f"recipe version must be {RECIPE_VERSION}; got {version!r}")
        self.features = tuple(features)
        self.name = str(name)
        self.version = int(version)

    def __eq__(self, other):
        return isinstance(other, LongwaveFeatureRecipe) and self.to_dict() == other.to_dict()

    def __repr__(self):
        return f"LongwaveFeatureRecipe(name={self.name!r}, columns={len(self.features)})"

    def column_names(self):
        """Names of the feature-matrix columns."""
        return list(self.features)

    def column_units(self):
        """Units of each feature-matrix column."""
        return [LONGWAVE_FEATURES[f][0] for f in self.features]

    def to_dict(self):
        """Plain dict (JSON- and TOML-friendly); ``spectrum`` tells it from a shortwave recipe."""
        return {"spectrum": self.spectrum, "name": self.name, "version": self.version, "features": list(self.features)}

    @classmethod
    def from_dict(cls, data):
        """Recipe from :meth:`to_dict` output."""
        unknown = sorted(set(data) - {"spectrum", "name", "version", "features"})
        if unknown:
            raise ParameterError(f"unknown longwave recipe key(s) {unknown}; known keys: spectrum, name, version, "
                                 "features")
        return cls(data.get("features"), name=data.get("name", "longwave"),
                   version=data.get("version", RECIPE_VERSION))

    def to_json(self):
        """The recipe as a JSON string."""
        return json.dumps(self.to_dict())


def feature_recipe_from_dict(data):
    """A shortwave :class:`~surrogate3d.pairs.recipe.FeatureRecipe` or a :class:`LongwaveFeatureRecipe`.

    Parameters
    ----------
    data : dict
        A recipe's ``to_dict()``; ``"spectrum": "longwave"`` marks a longwave one.

    Returns
    -------
    FeatureRecipe or LongwaveFeatureRecipe

    Raises
    ------
    surrogate3d.errors.ParameterError
        Not a valid recipe of either spectrum.
    """
    if not isinstance(data, dict):
        raise ParameterError(f"a feature recipe must be a mapping; got {data!r}")
    if data.get("spectrum", "shortwave") == "longwave":
        return LongwaveFeatureRecipe.from_dict(data)
    if "spectrum" in data:
        if data["spectrum"] != "shortwave":
            raise ParameterError(f"feature recipe spectrum must be 'shortwave' or 'longwave'; got {data['spectrum']!r}")
        data = {k: v for k, v in data.items() if k != "spectrum"}
    return FeatureRecipe.from_dict(data)


def recipe_spectrum(recipe):
    """``"longwave"`` for a :class:`LongwaveFeatureRecipe`, ``"shortwave"`` otherwise."""
    return getattr(recipe, "spectrum", "shortwave")
