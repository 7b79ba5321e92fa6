"""What a thermal (longwave) solver needs from a scene, computed from its physical fields.

Scenes store the state of the air and the surface, not longwave optics: gas absorption
on 299 spectral intervals for every cell would be far bigger than the scene. This module
computes, for one scene,

* the gas absorption coefficient on the spectral intervals of every layer
  (:func:`surrogate3d.scenes.longwave_optics.gas_absorption_coefficient`), from the
  layer-mean state: the horizontal means of ``air_temperature`` and
  ``specific_humidity`` over the layer and its mass-weighted mean pressure
  ``(p_bottom + p_top) / 2`` (:func:`surrogate3d.scenes.atmosphere.layer_mean_pressure`);
* the cloud optics of every cell per longwave band
  (:func:`surrogate3d.scenes.longwave_optics.cloud_optics`) from ``liquid_water_content``
  and ``effective_radius``;
* the temperatures of the cells and of the surface and the surface emissivity, as stored.

A scene written before longwave support lacks some of these fields; it is refused with a
message saying so (it still serves shortwave radiation as before).
"""

from typing import NamedTuple

import numpy as np

from ..errors import ValidationError
from .atmosphere import layer_mean_pressure
from .longwave_optics import (CO2_MOLE_FRACTION, DEFAULT_RESOLUTION, SpectralIntervals, cloud_optics,
                              gas_absorption_coefficient, spectral_intervals)
from .validation import validate_scene
from .variables import missing_longwave_variables


class LongwaveFields(NamedTuple):
    """The arrays a thermal solver needs for one scene (layer index 0 at the bottom).

    Attributes
    ----------
    intervals : SpectralIntervals
        The spectral intervals [m-1] of ``gas_absorption`` and the band of each.
    gas_absorption : numpy.ndarray, shape (ninterval, nz)
        Gas absorption coefficient [m-1] of each interval and layer (no scattering).
    cloud_extinction : numpy.ndarray, shape (nband, nz, ny, nx)
        Cloud extinction coefficient [m-1] per longwave band and cell; 0 in clear cells.
    cloud_single_scattering_albedo : numpy.ndarray, shape (nband, nz, ny, nx)
        [1].
    cloud_asymmetry_parameter : numpy.ndarray, shape (nband, nz, ny, nx)
        [1].
    air_temperature : numpy.ndarray, shape (nz, ny, nx)
        Temperature of every cell [K].
    layer_temperature, layer_pressure, layer_specific_humidity : numpy.ndarray, shape (nz,)
        The layer-mean state the gas absorption is computed from: [K], [Pa], [kg kg-1].
    air_pressure : numpy.ndarray, shape (nz + 1,)
        Pressure at the layer edges [Pa] (for heating rates).
    surface_temperature : numpy.ndarray, shape (ny, nx)
        [K].
    surface_longwave_emissivity : numpy.ndarray, shape (ny, nx)
        [1].
    z_edge : numpy.ndarray, shape (nz + 1,)
        Heights of the layer edges [m].
    dx, dy : float
        Horizontal cell size [m].
    """

    intervals: SpectralIntervals
    gas_absorption: np.ndarray
    cloud_extinction: np.ndarray
    cloud_single_scattering_albedo: np.ndarray
    cloud_asymmetry_parameter: np.ndarray
    air_temperature: np.ndarray
    layer_temperature: np.ndarray
    layer_pressure: np.ndarray
    layer_specific_humidity: np.ndarray
    air_pressure: np.ndarray
    surface_temperature: np.ndarray
    surface_longwave_emissivity: np.ndarray
    z_edge: np.ndarray
    dx: float
    dy: float


def check_longwave_scene(scene, label=None):
    """Raise unless ``scene`` holds valid fields for longwave radiation.

    Parameters
    ----------
    scene : xarray.Dataset
        A scene.
    label : str, optional
        How the scene is called in messages (its file name); default its ``title``.

    Raises
    ------
    surrogate3d.errors.ValidationError
        One line: the first missing variable (``scene 'x.nc' has no air_temperature: it
        was written before longwave support; ...``), or the scene's invalid values with
        variable and index (temperatures <= 0 or not finite, emissivity outside [0, 1],
        ...).
    """
    label = str(label if label is not None else scene.attrs.get("title", "(untitled)"))
    missing = missing_longwave_variables(scene)
    if missing:
        raise ValidationError(
            f"scene {label!r} has no {missing[0]}: it was written before longwave support; regenerate it with "
            f"`surrogate3d scenes` (or give make_scene {', '.join(missing)})")
    validate_scene(scene, label=label)


def longwave_fields(scene, label=None, co2_mole_fraction=CO2_MOLE_FRACTION, resolution=DEFAULT_RESOLUTION):
    """Gas and cloud optics, temperatures and surface of a scene for a thermal solver.

    Parameters
    ----------
    scene : xarray.Dataset
        A scene with the longwave fields (:data:`surrogate3d.scenes.variables.LONGWAVE_VARIABLES`),
        as :func:`surrogate3d.scenes.generate_scene` makes them.
    label : str, optional
        How the scene is called in messages (its file name); default its ``title``.
    co2_mole_fraction : float
        CO2 moles per mole of dry air [mol mol-1]; default 400e-6.
    resolution : float
        Widest spectral interval [m-1]; default 10 cm-1 (299 intervals).

    Returns
    -------
    LongwaveFields

    Raises
    ------
    surrogate3d.errors.ValidationError
        As :func:`check_longwave_scene`: a missing field or invalid values, in one line
        naming the variable (and index).

    References
    ----------
    See :mod:`surrogate3d.scenes.longwave_optics` and ``docs/methods/longwave.md`` for the
    sources of the gas and cloud optics.

    Examples
    --------
    >>> from surrogate3d.scenes.generator import generate_scene
    >>> fields = longwave_fields(generate_scene("overcast", 0, nx=4, ny=3, nz=5))
    >>> fields.gas_absorption.shape, fields.cloud_extinction.shape, fields.surface_temperature.shape
    ((299, 5), (6, 5, 3, 4), (3, 4))
    """
    check_longwave_scene(scene, label)
    nz, ny, nx = scene.sizes["z"], scene.sizes["y"], scene.sizes["x"]
    temperature = np.broadcast_to(_cell_values(scene["air_temperature"], nz), (nz, ny, nx)).copy()
    humidity = np.broadcast_to(_cell_values(scene["specific_humidity"], nz), (nz, ny, nx))
    pressure = np.asarray(scene["air_pressure"].values, dtype=np.float64)
    layer_t = temperature.mean(axis=(1, 2))
    layer_q = humidity.mean(axis=(1, 2))
    layer_p = layer_mean_pressure(pressure)
    gas = gas_absorption_coefficient(layer_t, layer_p, layer_q, co2_mole_fraction, resolution)
    extinction, ssa, g = cloud_optics(scene["liquid_water_content"].values, scene["effective_radius"].values)
    return LongwaveFields(
        intervals=spectral_intervals(resolution), gas_absorption=gas, cloud_extinction=extinction,
        cloud_single_scattering_albedo=ssa, cloud_asymmetry_parameter=g, air_temperature=temperature,
        layer_temperature=layer_t, layer_pressure=layer_p, layer_specific_humidity=layer_q, air_pressure=pressure,
        surface_temperature=np.asarray(scene["surface_temperature"].values, dtype=np.float64),
        surface_longwave_emissivity=np.asarray(scene["surface_longwave_emissivity"].values, dtype=np.float64),
        z_edge=np.asarray(scene["z_edge"].values, dtype=np.float64),
        dx=float(scene.attrs["dx_m"]), dy=float(scene.attrs["dy_m"]))


def _cell_values(da, nz):
    """Values of a (z, y, x) field, or of a layer profile (z,) of an older scene, ready to broadcast."""
    values = np.asarray(da.values, dtype=np.float64)
    return values.reshape(nz, 1, 1) if da.dims == ("z",) else values
