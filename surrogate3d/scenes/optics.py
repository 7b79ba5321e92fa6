"""Optical properties of scene cells: cloud droplets, Rayleigh scattering and gas absorption.

Everything here is per spectral band.  The bands are broad shortwave intervals
(:data:`BANDS`); their solar weights and the band-effective wavelengths of Rayleigh
scattering were computed by us from a published extraterrestrial solar spectrum, and
the cloud single-scattering albedo and asymmetry parameter come from the band
coefficients of Slingo (1989).  Cloud extinction is the geometric-optics limit
(extinction efficiency 2) and so the same in every band.

Units are SI throughout: liquid water content in kg m-3, radii and wavelengths in m,
extinction in m-1, pressure in Pa.
"""

from dataclasses import dataclass

import numpy as np

from ..core.validation import check_array, check_number
from ..errors import ParameterError

#: Density of liquid water [kg m-3].
WATER_DENSITY = 1000.0
#: Sea-level pressure of the Rayleigh fit [Pa] (Bodhaine et al. 1999: 1013.25 hPa).
RAYLEIGH_REFERENCE_PRESSURE = 101325.0

#: Slingo (1989) band coefficients for water clouds, four bands.  Columns: lower and
#: upper wavelength [um]; c [1] and d [um-1] of the co-albedo ``1 - omega = c + d r_e``;
#: e [1] and f [um-1] of the asymmetry parameter ``g = e + f r_e`` (r_e in um).
#: These are the four-band averages published by Slingo (1989), as also tabulated in
#: the NCAR community atmosphere model's Slingo cloud optics.
SLINGO_1989_BANDS = np.array([
    # lower  upper   c          d          e      f
    [0.25, 0.69, -5.62e-08, 1.63e-07, 0.829, 2.482e-03],
    [0.69, 1.19, -6.94e-06, 2.35e-05, 0.794, 4.226e-03],
    [1.19, 2.38, 4.64e-04, 1.24e-03, 0.754, 6.560e-03],
    [2.38, 4.00, 2.01e-01, 7.56e-03, 0.826, 4.353e-03],
])
#: Range of effective radius [m] over which Slingo (1989) fitted the coefficients
#: (from memory: 4.2-16.6 um); radii outside are clamped to it when evaluating
#: single-scattering properties.
SLINGO_RADIUS_RANGE = (4.2e-6, 16.6e-6)

#: Fraction of the extraterrestrial solar irradiance in each Slingo (1989) band,
#: 0.28-0.69, 0.69-1.19, 1.19-2.38 and 2.38-4.0 um.  Our trapezoid integration of the
#: extraterrestrial column of the ASTM G173-03 reference tables (itself based on the
#: ASTM E-490 / Gueymard 2004 extraterrestrial spectrum), normalized by the irradiance
#: between 280 and 4000 nm (1347.9 W m-2 of the 1366 W m-2 total).
SLINGO_BAND_SOLAR_FRACTION = np.array([0.45874, 0.32737, 0.18439, 0.02950])


@dataclass(frozen=True)
class SpectralBand:
    """A broad shortwave band of the scene optics.

    Attributes
    ----------
    name : str
        Band name used in scenes (the ``band`` coordinate).
    wavelength_range : tuple of float
        Lower and upper wavelength [m].
    slingo_bands : tuple of int
        Indices of the rows of :data:`SLINGO_1989_BANDS` the band covers.
    rayleigh_wavelength : float
        Band-effective wavelength [m] for Rayleigh scattering: where the Bodhaine et al.
        (1999) optical depth equals its solar-weighted mean over the band (our
        calculation with the ASTM G173-03 extraterrestrial spectrum).
    """

    name: str
    wavelength_range: tuple
    slingo_bands: tuple
    rayleigh_wavelength: float

    @property
    def solar_fraction(self):
        """Fraction of the 0.28-4 um extraterrestrial solar irradiance in the band [1]."""
        return float(SLINGO_BAND_SOLAR_FRACTION[list(self.slingo_bands)].sum())


#: The bands scenes can use.  ``visible`` and ``near_infrared`` split the solar spectrum
#: at 0.69 um (weights 0.459 and 0.541); the three ``near_infrared_*`` bands split the
#: near infrared further at Slingo's band limits, for finer spectral resolution.
BANDS = {
    "visible": SpectralBand("visible", (0.28e-6, 0.69e-6), (0,), 0.45e-6),
    "near_infrared": SpectralBand("near_infrared", (0.69e-6, 4.0e-6), (1, 2, 3), 0.94e-6),
    "near_infrared_short": SpectralBand("near_infrared_short", (0.69e-6, 1.19e-6), (1,), 0.85e-6),
    "near_infrared_middle": SpectralBand("near_infrared_middle", (1.19e-6, 2.38e-6), (2,), 1.47e-6),
    "near_infrared_long": SpectralBand("near_infrared_long", (2.38e-6, 4.0e-6), (3,), 2.80e-6),
}


def get_bands(names):
    """Look up bands by name and check that they do not overlap.

    Parameters
    ----------
    names : sequence of str
        Names of :data:`BANDS`.

    Returns
    -------
    list of SpectralBand
    """
    if isinstance(names, str):
        names = (names,)
    names = list(names)
    if not names:
        raise ParameterError("bands must name at least one band; choose from " + ", ".join(BANDS))
    unknown = [n for n in names if n not in BANDS]
    if unknown:
        raise ParameterError(f"bands has unknown band {unknown[0]!r}; choose from " + ", ".join(BANDS))
    if len(set(names)) != len(names):
        raise ParameterError(f"bands lists a band twice: {names}")
    bands = [BANDS[n] for n in names]
    for i, a in enumerate(bands):
        for b in bands[i + 1:]:
            if set(a.slingo_bands) & set(b.slingo_bands):
                raise ParameterError(f"bands {a.name!r} and {b.name!r} overlap in wavelength; "
                                     "choose bands that cover the spectrum once")
    return bands


def solar_weights(bands):
    """Solar weights of a set of bands, normalized to sum to 1.

    Parameters
    ----------
    bands : sequence of str or SpectralBand
        Non-overlapping bands.

    Returns
    -------
    numpy.ndarray
        Fraction of the solar flux each band stands for [1].  When the bands cover the
        whole 0.28-4 um range the weights are the bands' shares of the extraterrestrial
        irradiance (for ``visible`` and ``near_infrared``: 0.45874 and 0.54126); fewer
        bands are rescaled so that each stands for its share of the whole spectrum.

    References
    ----------
    ASTM G173-03 (2012), Standard Tables for Reference Solar Spectral Irradiances,
    extraterrestrial column; Gueymard, C. A. (2004), The sun's total and spectral
    irradiance for solar energy applications and solar radiation models, Solar Energy
    76, 423-453.

    Examples
    --------
    >>> solar_weights(["visible", "near_infrared"]).round(4).tolist()
    [0.4587, 0.5413]
    """
    bands = get_bands([b.name if isinstance(b, SpectralBand) else b for b in bands])
    w = np.array([b.solar_fraction for b in bands])
    return w / w.sum()


def cloud_extinction(liquid_water_content, effective_radius):
    """Volume extinction coefficient of cloud droplets [m-1], geometric-optics limit.

    ``beta = 3 LWC / (2 rho_w r_e)``, valid when droplets are much larger than the
    wavelength (extinction efficiency 2); the same in every shortwave band.

    Parameters
    ----------
    liquid_water_content : array_like
        Cloud liquid water content [kg m-3], >= 0.
    effective_radius : array_like
        Droplet effective radius [m], > 0 where the water content is positive.

    Returns
    -------
    numpy.ndarray
        Extinction [m-1]; 0 where there is no liquid water.

    References
    ----------
    Stephens, G. L. (1978), Radiation profiles in extended water clouds. II:
    Parameterization schemes, J. Atmos. Sci. 35, 2123-2132.

    Examples
    --------
    Liquid water path 100 g m-2 at r_e = 10 um gives optical depth 15:

    >>> round(float(cloud_extinction(1e-4, 10e-6)) * 1000.0, 6)
    15.0
    """
    lwc = np.asarray(liquid_water_content, dtype=np.float64)
    r = np.asarray(effective_radius, dtype=np.float64)
    check_array("liquid_water_content", lwc, 0.0, None)
    cloudy = lwc > 0
    if np.any(np.broadcast_to(r, lwc.shape)[cloudy] <= 0):
        raise ParameterError("effective_radius must be > 0 m where liquid_water_content > 0")
    with np.errstate(divide="ignore", invalid="ignore"):
        beta = 1.5 * lwc / (WATER_DENSITY * r)
    return np.where(cloudy, beta, 0.0)


def cloud_single_scattering(band, effective_radius):
    """Single-scattering albedo and asymmetry parameter of water clouds in a band.

    Slingo (1989): ``1 - omega = c + d r_e`` and ``g = e + f r_e`` per band, with r_e in
    micrometres clamped to the fitted range 4.2-16.6 um.  A band that spans several of
    Slingo's bands combines them with their solar weights: the co-albedo is the
    solar-weighted mean and the asymmetry parameter the scattering-weighted mean.

    Parameters
    ----------
    band : str or SpectralBand
        A band of :data:`BANDS`.
    effective_radius : array_like
        Droplet effective radius [m].

    Returns
    -------
    single_scattering_albedo : numpy.ndarray
        [1], in [0, 1].
    asymmetry_parameter : numpy.ndarray
        [1].

    References
    ----------
    Slingo, A. (1989), A GCM parameterization for the shortwave radiative properties
    of water clouds, J. Atmos. Sci. 46, 1419-1427.

    Examples
    --------
    >>> omega, g = cloud_single_scattering("visible", 10e-6)
    >>> bool(omega > 0.99999), round(float(g), 3)
    (True, 0.854)
    """
    band = get_bands([band.name if isinstance(band, SpectralBand) else band])[0]
    r_um = np.clip(np.asarray(effective_radius, dtype=np.float64), *SLINGO_RADIUS_RANGE) * 1e6
    rows = SLINGO_1989_BANDS[list(band.slingo_bands)]
    weights = SLINGO_BAND_SOLAR_FRACTION[list(band.slingo_bands)]
    weights = weights / weights.sum()
    coalbedo = np.zeros_like(r_um)
    scattering = np.zeros_like(r_um)
    scattering_g = np.zeros_like(r_um)
    for (_, _, c, d, e, f), w in zip(rows, weights):
        co = np.clip(c + d * r_um, 0.0, 1.0)
        coalbedo += w * co
        scattering += w * (1.0 - co)
        scattering_g += w * (1.0 - co) * (e + f * r_um)
    omega = np.clip(1.0 - coalbedo, 0.0, 1.0)
    g = scattering_g / np.maximum(scattering, 1e-300)
    return omega, g


def rayleigh_optical_depth(wavelength, surface_pressure=RAYLEIGH_REFERENCE_PRESSURE):
    """Column Rayleigh optical depth of dry air [1].

    Bodhaine et al. (1999), eq. 30, for sea level at 45 degrees latitude and 360 ppm
    CO2, scaled by ``surface_pressure / 101325 Pa``.  The fit (from memory: made over
    the ultraviolet to near infrared) tends to lambda**-4 at long wavelengths, where
    the optical depth is negligible.

    Parameters
    ----------
    wavelength : array_like
        Wavelength [m].
    surface_pressure : float
        Pressure at the bottom of the column [Pa].

    Returns
    -------
    numpy.ndarray
        Optical depth [1].

    References
    ----------
    Bodhaine, B. A., N. B. Wood, E. G. Dutton and J. R. Slusser (1999), On Rayleigh
    optical depth calculations, J. Atmos. Oceanic Technol. 16, 1854-1861.

    Examples
    --------
    >>> round(float(rayleigh_optical_depth(550e-9)), 4)
    0.0971
    """
    lam = np.asarray(wavelength, dtype=np.float64) * 1e6
    check_array("wavelength", np.asarray(wavelength, dtype=np.float64), 0.2e-6, None, low_open=True)
    check_number("surface_pressure", surface_pressure, 0.0, None, low_open=True)
    l2 = lam * lam
    tau = 0.0021520 * (1.0455996 - 341.29061 / l2 - 0.90230850 * l2) / (1.0 + 0.0027059889 / l2 - 85.968563 * l2)
    return tau * (float(surface_pressure) / RAYLEIGH_REFERENCE_PRESSURE)


def rayleigh_layer_optical_depth(band, air_pressure):
    """Rayleigh optical depth of each layer in a band [1].

    The column value at the band-effective wavelength is shared among layers in
    proportion to their pressure thickness, since the Rayleigh optical depth is
    proportional to the mass of air above a level (Bodhaine et al. 1999).

    Parameters
    ----------
    band : str or SpectralBand
        A band of :data:`BANDS`.
    air_pressure : array_like, shape (nz + 1,)
        Pressure at the layer edges [Pa], decreasing with height.

    Returns
    -------
    numpy.ndarray, shape (nz,)
        Layer optical depth [1].

    References
    ----------
    Bodhaine, B. A., N. B. Wood, E. G. Dutton and J. R. Slusser (1999), On Rayleigh
    optical depth calculations, J. Atmos. Oceanic Technol. 16, 1854-1861.
    """
    band = get_bands([band.name if isinstance(band, SpectralBand) else band])[0]
    p = np.asarray(air_pressure, dtype=np.float64)
    if p.ndim != 1 or p.size < 2 or np.any(np.diff(p) >= 0) or np.any(p <= 0):
        raise ParameterError("air_pressure must be positive and decrease with height along the layer edges")
    per_pascal = rayleigh_optical_depth(band.rayleigh_wavelength) / RAYLEIGH_REFERENCE_PRESSURE
    return per_pascal * (p[:-1] - p[1:])


def gas_absorption_layer_optical_depth(z_edge, column_optical_depth, scale_height):
    """Absorption optical depth of each layer for a gas decreasing exponentially with height.

    A water-vapour-like absorber with density ``exp(-z / H)``: the column value within
    the domain is shared among layers in proportion to ``exp(-z_bottom / H) -
    exp(-z_top / H)``.  Pure absorption (no scattering).

    Parameters
    ----------
    z_edge : array_like, shape (nz + 1,)
        Heights of the layer edges [m], increasing from 0.
    column_optical_depth : float
        Absorption optical depth of the whole domain column [1], >= 0.
    scale_height : float
        Density scale height of the absorber [m], > 0 (about 2 km for water vapour,
        common practice).

    Returns
    -------
    numpy.ndarray, shape (nz,)
        Layer absorption optical depth [1], summing to ``column_optical_depth``.

    References
    ----------
    Exponential absorber profile with a scale height of about 2 km for water vapour:
    common practice.
    """
    z = np.asarray(z_edge, dtype=np.float64)
    check_number("column_optical_depth", column_optical_depth, 0.0, None)
    check_number("scale_height", scale_height, 0.0, None, low_open=True)
    share = -np.diff(np.exp(-(z - z[0]) / float(scale_height)))
    return float(column_optical_depth) * share / share.sum()


def mix_optics(cloud_extinction, cloud_single_scattering_albedo, cloud_asymmetry_parameter,
               rayleigh_extinction, gas_extinction=0.0):
    """Combine cloud droplets, Rayleigh scattering and gas absorption in each cell.

    Extinctions add; the single-scattering albedo is scattering over extinction and the
    asymmetry parameter is the scattering-weighted mean (Rayleigh has g = 0, the gas
    does not scatter).

    Parameters
    ----------
    cloud_extinction : array_like
        Cloud extinction [m-1].
    cloud_single_scattering_albedo, cloud_asymmetry_parameter : array_like
        Cloud single-scattering properties [1], broadcastable to ``cloud_extinction``.
    rayleigh_extinction : array_like
        Rayleigh scattering coefficient [m-1], > 0, broadcastable.
    gas_extinction : array_like
        Gas absorption coefficient [m-1], >= 0, broadcastable.

    Returns
    -------
    extinction : numpy.ndarray
        [m-1].
    single_scattering_albedo : numpy.ndarray
        [1], in [0, 1].
    asymmetry_parameter : numpy.ndarray
        [1].

    References
    ----------
    Standard additive combination of optical properties, e.g. Liou, K. N. (2002), An
    Introduction to Atmospheric Radiation, 2nd ed., Academic Press.
    """
    ext_c = np.asarray(cloud_extinction, dtype=np.float64)
    sca_c = ext_c * np.asarray(cloud_single_scattering_albedo, dtype=np.float64)
    sca_r = np.asarray(rayleigh_extinction, dtype=np.float64)
    if np.any(sca_r <= 0):
        raise ParameterError("rayleigh_extinction must be > 0 m-1 in every cell")
    ext = ext_c + sca_r + np.asarray(gas_extinction, dtype=np.float64)
    sca = sca_c + sca_r
    ssa = np.clip(sca / ext, 0.0, 1.0)
    g = sca_c * np.asarray(cloud_asymmetry_parameter, dtype=np.float64) / sca
    return ext, ssa, g
