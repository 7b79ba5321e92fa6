"""The scene data model: a labelled xarray Dataset describing a 3D cloudy atmosphere.

A scene is a regular horizontal grid of ``nx`` x ``ny`` cells of size ``dx`` x ``dy``
[m], periodic in both horizontal directions, with ``nz`` layers between strictly
increasing edge heights ``z_edge`` [m] above the surface.  Optical properties are
given per spectral band.  See ``docs/archive-format.md`` for every variable.

Dimensions are named ``band``, ``z``, ``y``, ``x`` and ``z_edge`` (layer edges); arrays
are ordered ``(band, z, y, x)`` so that a column is contiguous per layer plane.
"""

import numpy as np
import xarray as xr

from ..core.data_model import SCENE_FORMAT_VERSION as FORMAT_VERSION
from ..errors import ValidationError
from .validation import validate_scene
from .variables import COORDINATE_SPEC, VARIABLE_SPEC


def _as_band_array(name, value, nband, spatial_shape):
    """Return ``value`` as float64 of shape ``(nband,) + spatial_shape`` (scalars broadcast)."""
    arr = np.asarray(value, dtype=np.float64)
    if arr.ndim == len(spatial_shape):
        arr = arr[np.newaxis]
    if arr.ndim == 0:
        arr = np.full((nband,) + spatial_shape, float(arr))
    elif arr.ndim == 1 and len(spatial_shape) > 0 and arr.shape[0] == nband:
        arr = np.broadcast_to(arr.reshape((nband,) + (1,) * len(spatial_shape)), (nband,) + spatial_shape)
    if arr.shape[0] == 1 and nband > 1:
        arr = np.broadcast_to(arr, (nband,) + arr.shape[1:])
    if arr.shape != (nband,) + spatial_shape:
        raise ValidationError(
            f"{name} has shape {arr.shape}; expected {(nband,) + spatial_shape} "
            f"(band, {', '.join('zyx'[3 - len(spatial_shape):])})")
    return np.ascontiguousarray(arr)


def _as_field(name, value, shape, profile=False):
    """Return ``value`` as float64 of ``shape``: a scalar, a profile of the layers (with
    ``profile``, broadcast to every column) or the full array."""
    arr = np.asarray(value, dtype=np.float64)
    if arr.ndim == 0 or (profile and arr.shape == shape[:1]):
        arr = np.broadcast_to(arr.reshape(arr.shape + (1,) * (len(shape) - arr.ndim)), shape)
    if arr.shape != shape:
        forms = f"({shape[0]},) or {shape}" if profile else str(shape)
        raise ValidationError(f"{name} has shape {arr.shape}; expected a number, {forms}")
    return np.ascontiguousarray(arr)


def make_scene(extinction, single_scattering_albedo, asymmetry_parameter, z_edge, dx, dy,
               surface_albedo=0.0, solar_weight=None, band=None, liquid_water_content=None,
               effective_radius=None, air_temperature=None, air_pressure=None, specific_humidity=None,
               surface_temperature=None, surface_longwave_emissivity=None, attrs=None, validate=True):
    """Build a scene Dataset from arrays.

    Parameters
    ----------
    extinction : array_like, shape (nband, nz, ny, nx) or (nz, ny, nx)
        Volume extinction coefficient [m-1].
    single_scattering_albedo : array_like or float
        Single-scattering albedo [1], same shape as ``extinction`` or broadcastable per band.
    asymmetry_parameter : array_like or float
        Henyey-Greenstein asymmetry parameter [1], in (-1, 1).
    z_edge : array_like, shape (nz + 1,)
        Heights of the layer edges above the surface [m], strictly increasing from 0.
    dx, dy : float
        Horizontal cell size [m].
    surface_albedo : float, array_like (nband,), (ny, nx) or (nband, ny, nx)
        Lambertian surface albedo [1].
    solar_weight : array_like (nband,), optional
        Fractions of the solar flux in each band; default: equal weights.
    band : sequence of str, optional
        Band names; default ``band0``, ``band1``, ...
    liquid_water_content : array_like (nz, ny, nx), optional
        Cloud liquid water content [kg m-3].
    effective_radius : array_like (nz, ny, nx), optional
        Droplet effective radius [m].
    air_temperature : array_like (nz, ny, nx) or (nz,), optional
        Air temperature of every cell [K], > 0; a profile of the layers is used in every
        column.
    air_pressure : array_like (nz + 1,), optional
        Pressure at the layer edges [Pa], decreasing with height.
    specific_humidity : array_like (nz, ny, nx) or (nz,), optional
        Water vapour per mass of moist air [kg kg-1], in [0, 1).
    surface_temperature : float or array_like (ny, nx), optional
        Radiative (skin) temperature of the surface [K], > 0.
    surface_longwave_emissivity : float or array_like (ny, nx), optional
        Broadband longwave emissivity of the surface [1], in [0, 1].

    With ``air_temperature``, ``air_pressure``, ``specific_humidity``,
    ``surface_temperature``, ``surface_longwave_emissivity``, ``liquid_water_content``
    and ``effective_radius`` the scene can be used for longwave radiation
    (:func:`surrogate3d.scenes.longwave_fields.longwave_fields`).
    attrs : dict, optional
        Extra global attributes (for example ``regime`` and ``seed``).
    validate : bool
        Run :func:`surrogate3d.scenes.validate_scene` on the result.

    Returns
    -------
    xarray.Dataset
        The scene, with units and long names as attributes.

    Examples
    --------
    >>> import numpy as np
    >>> ext = np.full((1, 2, 3, 4), 0.01)
    >>> scene = make_scene(ext, 0.999, 0.85, [0.0, 500.0, 1000.0], 100.0, 100.0)
    >>> {dim: scene.sizes[dim] for dim in ("band", "z", "y", "x", "z_edge")}
    {'band': 1, 'z': 2, 'y': 3, 'x': 4, 'z_edge': 3}
    """
    ext = np.asarray(extinction, dtype=np.float64)
    if ext.ndim == 3:
        ext = ext[np.newaxis]
    if ext.ndim != 4:
        raise ValidationError(f"extinction must have 3 or 4 dimensions (band, z, y, x); got shape {ext.shape}")
    nband, nz, ny, nx = ext.shape
    z_edge = np.asarray(z_edge, dtype=np.float64)
    if z_edge.shape != (nz + 1,):
        raise ValidationError(f"z_edge has shape {z_edge.shape}; expected ({nz + 1},) for {nz} layers")
    if band is None:
        band = [f"band{i}" for i in range(nband)]
    band = [str(b) for b in band]
    if len(band) != nband:
        raise ValidationError(f"band has {len(band)} names for {nband} bands in extinction")
    if solar_weight is None:
        solar_weight = np.full(nband, 1.0 / nband)
    solar_weight = np.asarray(solar_weight, dtype=np.float64).reshape(-1)

    cell = (nz, ny, nx)
    data = {
        "extinction": np.ascontiguousarray(ext),
        "single_scattering_albedo": _as_band_array("single_scattering_albedo", single_scattering_albedo, nband, cell),
        "asymmetry_parameter": _as_band_array("asymmetry_parameter", asymmetry_parameter, nband, cell),
        "surface_albedo": _as_band_array("surface_albedo", surface_albedo, nband, (ny, nx)),
        "solar_weight": solar_weight,
    }
    optional = {"liquid_water_content": liquid_water_content, "effective_radius": effective_radius,
                "air_pressure": air_pressure}
    for name, value in optional.items():
        if value is not None:
            data[name] = np.asarray(value, dtype=np.float64)
    fields = {"air_temperature": (air_temperature, cell, True), "specific_humidity": (specific_humidity, cell, True),
              "surface_temperature": (surface_temperature, (ny, nx), False),
              "surface_longwave_emissivity": (surface_longwave_emissivity, (ny, nx), False)}
    for name, (value, shape, profile) in fields.items():
        if value is not None:
            data[name] = _as_field(name, value, shape, profile)

    coords = {
        "band": ("band", np.array(band, dtype=object)),
        "x": ("x", (np.arange(nx) + 0.5) * float(dx)),
        "y": ("y", (np.arange(ny) + 0.5) * float(dy)),
        "z": ("z", 0.5 * (z_edge[1:] + z_edge[:-1])),
        "z_edge": ("z_edge", z_edge),
    }
    ds = xr.Dataset(coords=coords)
    sizes = {"band": nband, "z": nz, "y": ny, "x": nx, "z_edge": nz + 1}
    for name, value in data.items():
        dims = VARIABLE_SPEC[name][0]
        expected = tuple(sizes[d] for d in dims)
        if np.shape(value) != expected:
            raise ValidationError(f"{name} has shape {np.shape(value)}; expected {expected} for dimensions "
                                  f"{dims} of {nband} band(s) on a {nz} x {ny} x {nx} grid")
        ds[name] = (dims, value)
    ds.attrs.update({
        "Conventions": "CF-1.10",
        "format_version": FORMAT_VERSION,
        "dx_m": float(dx),
        "dy_m": float(dy),
        "horizontal_boundaries": "periodic",
        "source": "surrogate3d",
    })
    if attrs:
        ds.attrs.update(attrs)
    annotate(ds)
    if validate:
        validate_scene(ds)
    return ds


def annotate(ds):
    """Set units, long names and standard names on the known variables of ``ds`` in place."""
    for name, (units, long_name, standard_name) in COORDINATE_SPEC.items():
        if name in ds.coords:
            ds[name].attrs.update(units=units, long_name=long_name, standard_name=standard_name)
    if "x" in ds.coords:
        ds["x"].attrs["axis"] = "X"
        ds["y"].attrs["axis"] = "Y"
    for name, (_, units, long_name, standard_name) in VARIABLE_SPEC.items():
        if name in ds.variables:
            ds[name].attrs.update(units=units, long_name=long_name)
            if standard_name:
                ds[name].attrs["standard_name"] = standard_name
    if "band" in ds.coords:
        ds["band"].attrs["long_name"] = "spectral band name"
    return ds


def grid_shape(scene):
    """Return ``(nz, ny, nx)`` of a scene."""
    return scene.sizes["z"], scene.sizes["y"], scene.sizes["x"]


def layer_thickness(scene):
    """Layer thicknesses [m] as a 1D numpy array of length ``nz``."""
    return np.diff(scene["z_edge"].values)


def spacing(scene):
    """Horizontal cell size ``(dx, dy)`` [m]."""
    return float(scene.attrs["dx_m"]), float(scene.attrs["dy_m"])


def column_optical_depth(scene, band=None):
    """Vertical column optical depth [1] per column.

    Parameters
    ----------
    scene : xarray.Dataset
        A scene.
    band : str or int, optional
        Band name or index; by default the solar-weighted mean over bands.

    Returns
    -------
    xarray.DataArray, dims (y, x)
    """
    dz = xr.DataArray(layer_thickness(scene), dims="z")
    tau = (scene["extinction"] * dz).sum("z")
    if band is None:
        tau = (tau * scene["solar_weight"]).sum("band")
    elif isinstance(band, (int, np.integer)):
        tau = tau.isel(band=int(band))
    else:
        tau = tau.sel(band=band)
    tau.attrs.update(units="1", long_name="vertical column optical depth")
    return tau


def cloud_mask(scene, threshold=None):
    """Boolean (z, y, x) mask of cloudy cells.

    Cells are cloudy where the liquid water content is positive when it is given, else
    where the extinction of the first band exceeds ``threshold`` [m-1] (default 1e-4,
    about 100 times clear-air Rayleigh extinction in the visible; common practice).
    """
    if "liquid_water_content" in scene and threshold is None:
        return scene["liquid_water_content"].values > 0.0
    limit = 1e-4 if threshold is None else float(threshold)
    return scene["extinction"].values[0] > limit
