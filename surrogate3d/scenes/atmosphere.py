"""Standard-atmosphere temperature and pressure profiles for scene layers.

The scene generator fills ``air_temperature`` (per layer) and ``air_pressure`` (per
layer edge) from the U.S. Standard Atmosphere 1976, whose lowest 32 km coincide with
the ICAO standard atmosphere: 288.15 K and 101325 Pa at sea level, a lapse rate of
6.5 K km-1 up to the tropopause at 11 km geopotential height, an isothermal layer up
to 20 km and a 1 K km-1 inversion up to 32 km, with hydrostatic pressure throughout.

The standard atmosphere has no water vapour; ``specific_humidity`` follows the
relative-humidity profile of Manabe and Wetherald (1967), ``RH = RH_s (p / p_s - 0.02) /
0.98`` with ``RH_s = 0.77`` at the surface, over liquid water with the saturation vapour
pressure of Bolton (1980).
"""

import numpy as np

from ..core.validation import check_array, check_number
from ..errors import ParameterError

#: Sea-level temperature [K] (U.S. Standard Atmosphere 1976).
SEA_LEVEL_TEMPERATURE = 288.15
#: Sea-level pressure [Pa] (U.S. Standard Atmosphere 1976).
SEA_LEVEL_PRESSURE = 101325.0
#: Standard gravity [m s-2].
STANDARD_GRAVITY = 9.80665
#: Specific gas constant of dry air [J kg-1 K-1]: R* / M0 = 8.31432 / 0.0289644.
DRY_AIR_GAS_CONSTANT = 8.31432 / 0.0289644
#: Effective Earth radius used to convert geometric to geopotential height [m].
EARTH_RADIUS = 6356766.0
#: Geopotential heights [m] of the base of each layer and the lapse rate above it [K m-1].
_LAYER_BASES = np.array([0.0, 11000.0, 20000.0, 32000.0])
_LAPSE_RATES = np.array([-0.0065, 0.0, 0.001])
#: Highest geometric height [m] the profile covers (top of the 20-32 km layer).
MAX_HEIGHT = 32000.0 * EARTH_RADIUS / (EARTH_RADIUS - 32000.0)
#: Relative humidity at the surface [1] of the profile of Manabe and Wetherald (1967).
SURFACE_RELATIVE_HUMIDITY = 0.77
#: Pressure ratio ``p / p_s`` [1] at which that profile reaches zero humidity (Manabe and
#: Wetherald 1967).
_DRY_PRESSURE_RATIO = 0.02
#: Ratio of the molar masses of water and dry air [1] (18.01528 / 28.9644).
MOLAR_MASS_RATIO = 0.01801528 / 0.0289644


def _base_states():
    """Temperature [K] and pressure [Pa] at the base of each standard layer."""
    temps = [SEA_LEVEL_TEMPERATURE]
    press = [SEA_LEVEL_PRESSURE]
    for i, lapse in enumerate(_LAPSE_RATES[:-1]):
        dh = _LAYER_BASES[i + 1] - _LAYER_BASES[i]
        t0, p0 = temps[-1], press[-1]
        t1 = t0 + lapse * dh
        if lapse == 0.0:
            p1 = p0 * np.exp(-STANDARD_GRAVITY * dh / (DRY_AIR_GAS_CONSTANT * t0))
        else:
            p1 = p0 * (t1 / t0) ** (-STANDARD_GRAVITY / (DRY_AIR_GAS_CONSTANT * lapse))
        temps.append(t1)
        press.append(p1)
    return np.array(temps), np.array(press)


_BASE_T, _BASE_P = _base_states()


def _check_heights(height):
    height = np.asarray(height, dtype=np.float64)
    check_array("height", height, 0.0, MAX_HEIGHT)
    return height


def geopotential_height(height):
    """Geopotential height [m] of a geometric height [m] above sea level.

    Parameters
    ----------
    height : array_like
        Geometric height above sea level [m].

    Returns
    -------
    numpy.ndarray
        Geopotential height [m], ``r0 z / (r0 + z)`` with ``r0 = 6356766 m``.

    References
    ----------
    U.S. Standard Atmosphere, 1976. NOAA, NASA and USAF, Washington D.C., eq. 18.
    """
    z = np.asarray(height, dtype=np.float64)
    return EARTH_RADIUS * z / (EARTH_RADIUS + z)


def standard_temperature(height):
    """Air temperature [K] of the U.S. Standard Atmosphere 1976 at a geometric height.

    Parameters
    ----------
    height : array_like
        Geometric height above sea level [m], in [0, about 32 km].

    Returns
    -------
    numpy.ndarray
        Temperature [K].

    References
    ----------
    U.S. Standard Atmosphere, 1976. NOAA, NASA and USAF, Washington D.C. (identical
    to the ICAO standard atmosphere below 32 km).

    Examples
    --------
    >>> float(standard_temperature(0.0))
    288.15
    >>> round(float(standard_temperature(1000.0)), 2)
    281.65
    """
    h = geopotential_height(_check_heights(height))
    i = np.clip(np.searchsorted(_LAYER_BASES, h, side="right") - 1, 0, len(_LAPSE_RATES) - 1)
    return _BASE_T[i] + _LAPSE_RATES[i] * (h - _LAYER_BASES[i])


def standard_pressure(height, surface_pressure=SEA_LEVEL_PRESSURE):
    """Hydrostatic air pressure [Pa] of the U.S. Standard Atmosphere 1976.

    Parameters
    ----------
    height : array_like
        Geometric height above the surface [m]; the surface is taken at sea level.
    surface_pressure : float
        Surface pressure [Pa]; the standard profile is scaled by
        ``surface_pressure / 101325``, which keeps it hydrostatic for the standard
        temperatures.

    Returns
    -------
    numpy.ndarray
        Pressure [Pa].

    References
    ----------
    U.S. Standard Atmosphere, 1976. NOAA, NASA and USAF, Washington D.C., eqs. 33a and
    33b (pressure in layers with and without a lapse rate).

    Examples
    --------
    >>> round(float(standard_pressure(5000.0)))
    54048
    """
    check_number("surface_pressure", surface_pressure, 10000.0, 120000.0)
    h = geopotential_height(_check_heights(height))
    i = np.clip(np.searchsorted(_LAYER_BASES, h, side="right") - 1, 0, len(_LAPSE_RATES) - 1)
    lapse = _LAPSE_RATES[i]
    t0, p0, dh = _BASE_T[i], _BASE_P[i], h - _LAYER_BASES[i]
    with np.errstate(divide="ignore", invalid="ignore"):
        with_lapse = p0 * ((t0 + lapse * dh) / t0) ** (-STANDARD_GRAVITY / (DRY_AIR_GAS_CONSTANT * lapse))
    isothermal = p0 * np.exp(-STANDARD_GRAVITY * dh / (DRY_AIR_GAS_CONSTANT * t0))
    p = np.where(lapse == 0.0, isothermal, with_lapse)
    return p * (float(surface_pressure) / SEA_LEVEL_PRESSURE)


def standard_profile(z_edge, surface_pressure=SEA_LEVEL_PRESSURE):
    """Layer temperatures and edge pressures of a scene's vertical grid.

    Parameters
    ----------
    z_edge : array_like, shape (nz + 1,)
        Heights of the layer edges above the surface [m], increasing.
    surface_pressure : float
        Surface pressure [Pa].

    Returns
    -------
    air_temperature : numpy.ndarray, shape (nz,)
        Temperature at the layer centres [K].
    air_pressure : numpy.ndarray, shape (nz + 1,)
        Pressure at the layer edges [Pa].

    References
    ----------
    U.S. Standard Atmosphere, 1976. NOAA, NASA and USAF, Washington D.C.
    """
    z_edge = np.asarray(z_edge, dtype=np.float64)
    centres = 0.5 * (z_edge[1:] + z_edge[:-1])
    return standard_temperature(centres), standard_pressure(z_edge, surface_pressure)


def saturation_vapour_pressure(air_temperature):
    """Saturation vapour pressure over liquid water [Pa] (Bolton 1980, eq. 10).

    ``e_s = 611.2 exp(17.67 (T - 273.15) / (T - 29.65))``, within 0.1 % of the exact
    values between -35 and 35 degC (Bolton 1980); colder air is treated as supercooled.

    Parameters
    ----------
    air_temperature : array_like
        Air temperature [K], > 29.65 K.

    Returns
    -------
    numpy.ndarray
        Saturation vapour pressure [Pa].

    References
    ----------
    Bolton, D., 1980: The computation of equivalent potential temperature. Mon. Wea.
    Rev., 108, 1046-1053.

    Examples
    --------
    >>> float(saturation_vapour_pressure(273.15))
    611.2
    """
    t = np.asarray(air_temperature, dtype=np.float64)
    check_array("air_temperature", t, 29.65, None, low_open=True)
    return 611.2 * np.exp(17.67 * (t - 273.15) / (t - 29.65))


def specific_humidity(air_temperature, air_pressure, relative_humidity):
    """Specific humidity [kg kg-1] of air at a relative humidity over liquid water.

    ``q = eps e / (p - (1 - eps) e)`` with ``e = RH e_s(T)`` (:func:`saturation_vapour_pressure`)
    and ``eps = 0.622`` the ratio of the molar masses of water and dry air.

    Parameters
    ----------
    air_temperature : array_like
        [K].
    air_pressure : array_like
        [Pa], above the vapour pressure.
    relative_humidity : array_like
        [1], in [0, 1].

    Returns
    -------
    numpy.ndarray
        Specific humidity [kg kg-1] (the arguments broadcast together).

    References
    ----------
    Bolton, D., 1980: The computation of equivalent potential temperature. Mon. Wea.
    Rev., 108, 1046-1053.

    Examples
    --------
    >>> round(float(specific_humidity(288.15, 101325.0, 1.0)), 5)
    0.01053
    """
    p = np.asarray(air_pressure, dtype=np.float64)
    rh = np.asarray(relative_humidity, dtype=np.float64)
    check_array("relative_humidity", rh, 0.0, 1.0)
    e = rh * saturation_vapour_pressure(air_temperature)
    if np.any(e >= p):
        raise ParameterError("air_pressure must exceed the vapour pressure; the air would boil")
    return MOLAR_MASS_RATIO * e / (p - (1.0 - MOLAR_MASS_RATIO) * e)


def relative_humidity_profile(air_pressure, surface_pressure=SEA_LEVEL_PRESSURE,
                              surface_relative_humidity=SURFACE_RELATIVE_HUMIDITY):
    """Relative humidity [1] of Manabe and Wetherald (1967) at a pressure.

    ``RH = RH_s (p / p_s - 0.02) / (1 - 0.02)``, 0 above the level where ``p = 0.02 p_s``.

    Parameters
    ----------
    air_pressure : array_like
        [Pa].
    surface_pressure : float
        [Pa].
    surface_relative_humidity : float
        ``RH_s`` [1], in [0, 1]; Manabe and Wetherald used 0.77.

    Returns
    -------
    numpy.ndarray
        [1].

    References
    ----------
    Manabe, S. and R. T. Wetherald, 1967: Thermal equilibrium of the atmosphere with a
    given distribution of relative humidity. J. Atmos. Sci., 24, 241-259.

    Examples
    --------
    >>> float(relative_humidity_profile(101325.0))
    0.77
    """
    check_number("surface_pressure", surface_pressure, 10000.0, 120000.0)
    rh_s = check_number("surface_relative_humidity", surface_relative_humidity, 0.0, 1.0)
    ratio = np.asarray(air_pressure, dtype=np.float64) / float(surface_pressure)
    return rh_s * np.clip((ratio - _DRY_PRESSURE_RATIO) / (1.0 - _DRY_PRESSURE_RATIO), 0.0, 1.0)


def standard_humidity(z_edge, surface_pressure=SEA_LEVEL_PRESSURE,
                      surface_relative_humidity=SURFACE_RELATIVE_HUMIDITY):
    """Specific humidity [kg kg-1] at the layer centres of a scene's vertical grid.

    The relative humidity of Manabe and Wetherald (1967) at the standard-atmosphere
    pressure and temperature of each layer centre (:func:`standard_temperature`,
    :func:`standard_pressure`), turned into specific humidity with the saturation vapour
    pressure of Bolton (1980).

    Parameters
    ----------
    z_edge : array_like, shape (nz + 1,)
        Heights of the layer edges above the surface [m], increasing.
    surface_pressure : float
        Surface pressure [Pa].
    surface_relative_humidity : float
        Relative humidity at the surface [1], in [0, 1] (default 0.77).

    Returns
    -------
    numpy.ndarray, shape (nz,)
        Specific humidity [kg kg-1].

    References
    ----------
    Manabe, S. and R. T. Wetherald, 1967: Thermal equilibrium of the atmosphere with a
    given distribution of relative humidity. J. Atmos. Sci., 24, 241-259.

    Bolton, D., 1980: The computation of equivalent potential temperature. Mon. Wea.
    Rev., 108, 1046-1053.

    Examples
    --------
    >>> q = standard_humidity([0.0, 1000.0, 2000.0])
    >>> bool(q[0] > q[1] > 0.0)
    True
    """
    z_edge = np.asarray(z_edge, dtype=np.float64)
    centres = 0.5 * (z_edge[1:] + z_edge[:-1])
    pressure = standard_pressure(centres, surface_pressure)
    rh = relative_humidity_profile(pressure, surface_pressure, surface_relative_humidity)
    return specific_humidity(standard_temperature(centres), pressure, rh)


def layer_mean_pressure(air_pressure):
    """Mass-weighted mean pressure [Pa] of each layer from the edge pressures.

    The mean of ``p`` over the mass of a layer, ``(1 / dp) int p dp = (p_bottom + p_top) / 2``:
    the pressure at which a coefficient proportional to pressure (pressure-broadened line
    wings) gives the layer's mean absorption per unit mass.

    Parameters
    ----------
    air_pressure : array_like, shape (nz + 1,)
        Pressure at the layer edges [Pa].

    Returns
    -------
    numpy.ndarray, shape (nz,)

    Examples
    --------
    >>> layer_mean_pressure([100000.0, 90000.0]).tolist()
    [95000.0]
    """
    p = np.asarray(air_pressure, dtype=np.float64)
    return 0.5 * (p[1:] + p[:-1])
