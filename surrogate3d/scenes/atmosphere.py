"""Standard-atmosphere temperature and pressure profiles for scene layers.

The scene generator fills ``air_temperature`` (per layer) and ``air_pressure`` (per
layer edge) from the U.S. Standard Atmosphere 1976, whose lowest 32 km coincide with
the ICAO standard atmosphere: 288.15 K and 101325 Pa at sea level, a lapse rate of
6.5 K km-1 up to the tropopause at 11 km geopotential height, an isothermal layer up
to 20 km and a 1 K km-1 inversion up to 32 km, with hydrostatic pressure throughout.
"""

import numpy as np

from ..core.validation import check_array, check_number

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
