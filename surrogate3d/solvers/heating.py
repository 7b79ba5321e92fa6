"""Shortwave heating rates of layers from absorbed flux and the pressure drop across them."""

import numpy as np

from ..errors import ParameterError
from ..core.validation import check_array, check_finite
from ._array_checks import as_float_array, broadcast_to_shape

#: Standard acceleration of gravity [m s-2] (3rd CGPM 1901; the value of the
#: U.S. Standard Atmosphere 1976).
STANDARD_GRAVITY = 9.80665
#: Specific heat of dry air at constant pressure [J kg-1 K-1]: 7/2 R_d for an ideal
#: diatomic gas with R_d = 287.04 J kg-1 K-1; textbooks give 1004-1005 (Wallace and
#: Hobbs 2006, from memory).
DRY_AIR_SPECIFIC_HEAT = 1004.64
SECONDS_PER_DAY = 86400.0


def heating_rate(absorption, incident_flux, air_pressure_edges):
    """Heating rate of each layer [K day-1] from its absorbed shortwave flux.

    ``dT/dt = g / c_p * F_abs / dp`` with ``F_abs = absorption * incident_flux`` the
    flux absorbed in the layer per unit area [W m-2] and ``dp`` the pressure drop across
    the layer [Pa]: the hydrostatic layer mass per unit area is ``dp / g`` (textbook
    form, for example Liou 2002 and Petty 2006).

    Parameters
    ----------
    absorption : array_like, shape (nz, ...)
        Absorbed fraction of the incident flux per layer [1], layer axis FIRST with
        index 0 the bottom layer: (nz,) for a column, (nz, ny, nx) for a scene (the
        layout of a run result's ``absorption``).
    incident_flux : float or array_like, broadcastable to absorption.shape[1:]
        Incident solar flux on the horizontal at the top, ``S0 cos(theta0)`` [W m-2],
        >= 0.
    air_pressure_edges : array_like, shape (nz + 1,)
        Air pressure at the layer edges [Pa], index 0 at the surface, positive and
        strictly decreasing upward.

    Returns
    -------
    ndarray, shape of ``absorption``
        Heating rate [K day-1].

    References
    ----------
    Liou, K. N., 2002: An Introduction to Atmospheric Radiation, 2nd ed. Academic Press.

    Petty, G. W., 2006: A First Course in Atmospheric Radiation, 2nd ed. Sundog.

    Examples
    --------
    >>> round(float(heating_rate([0.01], 1000.0, [100000.0, 90000.0])[0]), 4)  # 10 W m-2, 100 hPa
    0.8434
    """
    absorption = as_float_array("absorption", absorption)
    check_finite("absorption", absorption)
    if absorption.ndim < 1:
        raise ParameterError("absorption must have the layer axis first, shape (nz, ...); got a scalar")
    flux = as_float_array("incident_flux", incident_flux)
    check_array("incident_flux", flux, 0.0, None)
    flux = broadcast_to_shape("incident_flux", flux, absorption.shape[1:], "absorption's trailing shape")
    pressure = as_float_array("air_pressure_edges", air_pressure_edges)
    nz = absorption.shape[0]
    if pressure.shape != (nz + 1,):
        raise ParameterError(f"air_pressure_edges has shape {pressure.shape}; expected ({nz + 1},) for the "
                             f"{nz} layers of absorption")
    check_array("air_pressure_edges", pressure, 0.0, None, low_open=True)
    dp = pressure[:-1] - pressure[1:]
    if np.any(dp <= 0.0):
        i = int(np.argmax(dp <= 0.0)) + 1
        raise ParameterError(f"air_pressure_edges must decrease strictly upward; at index {i} it is "
                             f"{pressure[i]!r} after {pressure[i - 1]!r}")
    dp = dp.reshape((nz,) + (1,) * (absorption.ndim - 1))
    per_second = STANDARD_GRAVITY / DRY_AIR_SPECIFIC_HEAT * absorption * flux / dp
    return per_second * SECONDS_PER_DAY
