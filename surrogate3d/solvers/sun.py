"""Sun geometry: validation and the direction of the direct beam."""

import math

from ..core.slant_path import check_solar_zenith_angle
from ..core.validation import check_number


def check_sun(solar_zenith_angle, solar_beam_azimuth):
    """Validate a sun geometry; returns ``(zenith, azimuth)`` as floats, azimuth in [0, 360).

    Parameters
    ----------
    solar_zenith_angle : float
        [degree], in [0, 90): the sun must be above the horizon.
    solar_beam_azimuth : float
        Direction in which the direct beam travels [degree], counterclockwise from +x.
    """
    zenith = check_solar_zenith_angle(solar_zenith_angle)
    return zenith, check_number("solar_beam_azimuth", solar_beam_azimuth) % 360.0


def beam_direction(solar_zenith_angle, solar_beam_azimuth):
    """Unit vector (ux, uy, uz) of the direct beam's travel; uz = -cos(zenith) < 0."""
    theta = math.radians(solar_zenith_angle)
    phi = math.radians(solar_beam_azimuth)
    s = math.sin(theta)
    return s * math.cos(phi), s * math.sin(phi), -math.cos(theta)
