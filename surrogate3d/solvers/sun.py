"""Sun geometry: validation and the direction of the direct beam."""

import math

from ..errors import ParameterError


def check_sun(solar_zenith_angle, solar_beam_azimuth):
    """Validate a sun geometry; returns ``(zenith, azimuth)`` as floats, azimuth in [0, 360).

    Parameters
    ----------
    solar_zenith_angle : float
        [degree], in [0, 90): the sun must be above the horizon.
    solar_beam_azimuth : float
        Direction in which the direct beam travels [degree], counterclockwise from +x.
    """
    try:
        zenith = float(solar_zenith_angle)
    except (TypeError, ValueError):
        zenith = math.nan
    if not (math.isfinite(zenith) and 0.0 <= zenith < 90.0):
        raise ParameterError(f"solar_zenith_angle must be in [0, 90) degrees (sun above the horizon); "
                             f"got {solar_zenith_angle!r}")
    try:
        azimuth = float(solar_beam_azimuth)
    except (TypeError, ValueError):
        azimuth = math.nan
    if not math.isfinite(azimuth):
        raise ParameterError(f"solar_beam_azimuth must be a finite angle in degrees; got {solar_beam_azimuth!r}")
    return zenith, azimuth % 360.0


def beam_direction(solar_zenith_angle, solar_beam_azimuth):
    """Unit vector (ux, uy, uz) of the direct beam's travel; uz = -cos(zenith) < 0."""
    theta = math.radians(solar_zenith_angle)
    phi = math.radians(solar_beam_azimuth)
    s = math.sin(theta)
    return s * math.cos(phi), s * math.sin(phi), -math.cos(theta)
