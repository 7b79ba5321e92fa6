"""Thermal-infrared optics: the longwave bands, cloud droplets and the absorbing gases.

Six bands cover 10-3000 cm-1 (:data:`LONGWAVE_BANDS`); wavenumbers are in m-1 at the API
(SI; 1 cm-1 = 100 m-1). Two kinds of optics are given per band:

* **Cloud liquid water**: extinction, single-scattering albedo and asymmetry parameter
  from Mie theory (:mod:`surrogate3d.scenes.mie`) for a gamma size distribution of
  effective variance 0.1 (Hansen 1971), with the refractive index of liquid water of
  Hale and Querry (1973; tabulated values from memory), averaged over each band with
  Planck weights at 280 K. They are tabulated once per process over the effective radius
  and interpolated.
* **Gases**: the simple spectral model of Jeevanjee and Fueglistaler (2020) for the
  water-vapour lines (exponential rotation and vibration-rotation bands, absorption
  proportional to pressure), the same exponential form for the 15 um CO2 band (Wilson
  and Gea-Banacloche 2012; Jeevanjee et al. 2021) and the water-vapour continuum of Roberts,
  Selby and Biberman (1976). Because these absorption coefficients vary by orders of
  magnitude within a band, they are given on narrow spectral intervals
  (:func:`spectral_intervals`, 10 cm-1 by default) that the solver treats as bands of their
  own; :func:`sum_over_bands` adds the interval results up into the six bands.

Units: liquid water content and densities in kg m-3, radii in m, pressure in Pa,
temperature in K, specific humidity in kg kg-1, extinction and absorption coefficients
in m-1, mass coefficients in m2 kg-1.
"""

import functools
from dataclasses import dataclass
from typing import NamedTuple

import numpy as np

from ..core.validation import check_array, check_number, fail
from ..errors import ParameterError
from .mie import mie_efficiencies
from .optics import WATER_DENSITY
from .planck import planck_radiance

#: Wavenumbers per cm-1 in m-1.
PER_CM = 100.0


@dataclass(frozen=True)
class LongwaveBand:
    """A band of the thermal infrared.

    Attributes
    ----------
    name : str
        Band name.
    wavenumber_range : tuple of float
        Lower and upper wavenumber [m-1].
    """

    name: str
    wavenumber_range: tuple


#: The longwave bands, lowest wavenumber first: the water-vapour rotation band, its
#: wing, the wings and centre of the 15 um CO2 band (with water vapour), the
#: 800-1250 cm-1 window and the water-vapour vibration-rotation band (6.3 um) with the
#: rest of the thermal infrared up to 3000 cm-1. At 200-310 K they hold all but 1e-3 of
#: the black-body emission.
LONGWAVE_BANDS = (
    LongwaveBand("h2o_rotation", (10.0 * PER_CM, 350.0 * PER_CM)),
    LongwaveBand("h2o_rotation_wing", (350.0 * PER_CM, 500.0 * PER_CM)),
    LongwaveBand("co2_low_wing", (500.0 * PER_CM, 630.0 * PER_CM)),
    LongwaveBand("co2_centre", (630.0 * PER_CM, 800.0 * PER_CM)),
    LongwaveBand("window", (800.0 * PER_CM, 1250.0 * PER_CM)),
    LongwaveBand("h2o_vibration_rotation", (1250.0 * PER_CM, 3000.0 * PER_CM)),
)
#: Default width of the spectral intervals of the gas optics [m-1] (10 cm-1).
DEFAULT_RESOLUTION = 10.0 * PER_CM

# ----------------------------------------------------------------------------------------
# Cloud liquid water
# ----------------------------------------------------------------------------------------

#: Refractive index of liquid water at 25 C, Hale and Querry (1973), values from memory:
#: wavelength [um], real part n, imaginary part k. Beyond 20 um they are uncertain by tens
#: of percent; there the water-vapour rotation band makes cloud optics matter less.
WATER_REFRACTIVE_INDEX = np.array([
    # wavelength   n      k
    [3.0, 1.371, 0.272],
    [3.2, 1.476, 0.0924],
    [3.5, 1.400, 0.0094],
    [4.0, 1.351, 0.0046],
    [4.5, 1.332, 0.0134],
    [5.0, 1.325, 0.0124],
    [5.5, 1.317, 0.0116],
    [6.0, 1.265, 0.107],
    [6.2, 1.328, 0.088],
    [6.5, 1.328, 0.0392],
    [7.0, 1.317, 0.0321],
    [7.5, 1.307, 0.0339],
    [8.0, 1.291, 0.0351],
    [8.5, 1.281, 0.0367],
    [9.0, 1.262, 0.0399],
    [9.5, 1.244, 0.0449],
    [10.0, 1.218, 0.0508],
    [10.5, 1.184, 0.0674],
    [11.0, 1.153, 0.0968],
    [11.5, 1.126, 0.142],
    [12.0, 1.111, 0.199],
    [12.5, 1.123, 0.259],
    [13.0, 1.146, 0.305],
    [13.5, 1.177, 0.343],
    [14.0, 1.210, 0.370],
    [15.0, 1.270, 0.402],
    [16.0, 1.325, 0.416],
    [18.0, 1.409, 0.420],
    [20.0, 1.480, 0.393],
    [25.0, 1.510, 0.330],
    [30.0, 1.460, 0.340],
    [40.0, 1.420, 0.430],
    [50.0, 1.550, 0.510],
    [70.0, 1.800, 0.530],
    [100.0, 1.950, 0.450],
    [200.0, 2.050, 0.400],
    [1000.0, 2.500, 0.650],
])
#: Effective variance of the gamma size distribution of cloud droplets [1] (Hansen and
#: Travis 1974 use 0.1 for water clouds; common practice).
DROPLET_EFFECTIVE_VARIANCE = 0.1
#: Effective radii [m] over which the cloud optics are tabulated; radii outside are
#: clamped to the range, as the shortwave optics do.
CLOUD_RADIUS_RANGE = (2.0e-6, 40.0e-6)
#: Temperature [K] of the Planck weights of the band averages (a liquid-cloud temperature).
CLOUD_WEIGHTING_TEMPERATURE = 280.0
# Mie wavenumbers: Gauss-Legendre points at most 50 cm-1 apart on average in each band;
# droplet radii 0.1-150 um. Four times finer sampling in both changes the band means by
# less than 0.6 %, far below the uncertainty of the refractive index.
_CLOUD_SPECTRAL_STEP = 50.0 * PER_CM
_CLOUD_TABLE_RADII = 48
_MIE_RADII = np.geomspace(0.1e-6, 150e-6, 240)


def water_refractive_index(wavenumber):
    """Complex refractive index of liquid water (Hale and Querry 1973, from memory).

    Interpolated linearly in log wavelength (n) and in log-log (k); wavelengths outside
    3-1000 um take the end values.

    Parameters
    ----------
    wavenumber : array_like
        Wavenumber [m-1], > 0.

    Returns
    -------
    numpy.ndarray of complex
        ``n + i k``.

    References
    ----------
    Hale, G. M. and M. R. Querry, 1973: Optical constants of water in the 200-nm to 200-um
    wavelength region. Appl. Opt., 12, 555-563.

    Examples
    --------
    >>> m = water_refractive_index(1000.0 * PER_CM)   # 10 um
    >>> round(float(m.real), 3), round(float(m.imag), 4)
    (1.218, 0.0508)
    """
    nu = np.asarray(wavenumber, dtype=np.float64)
    check_array("wavenumber", nu, 0.0, None, low_open=True)
    log_wavelength = np.log(1e6 / nu)
    table = np.log(WATER_REFRACTIVE_INDEX[:, 0])
    n = np.interp(log_wavelength, table, WATER_REFRACTIVE_INDEX[:, 1])
    k = np.exp(np.interp(log_wavelength, table, np.log(WATER_REFRACTIVE_INDEX[:, 2])))
    return n + 1j * k


def _gamma_weights(effective_radius):
    """Number-weighted gamma size distribution on the Mie radii, times d(radius).

    ``n(r) ~ r^((1 - 3 b) / b) exp(-r / (a b))`` with ``a`` the effective radius and ``b``
    the effective variance (Hansen 1971), on the log-spaced radius grid.
    """
    b = DROPLET_EFFECTIVE_VARIANCE
    r = _MIE_RADII
    log_n = (1.0 - 3.0 * b) / b * np.log(r / effective_radius) - r / (effective_radius * b)
    return np.exp(log_n - log_n.max()) * r


def _band_quadrature(band):
    """Gauss-Legendre wavenumbers [m-1] and weights [m-1] over a band."""
    low, high = band.wavenumber_range
    count = max(4, int(np.ceil((high - low) / _CLOUD_SPECTRAL_STEP)))
    nodes, weights = np.polynomial.legendre.leggauss(count)
    return low + 0.5 * (nodes + 1.0) * (high - low), 0.5 * (high - low) * weights


@functools.lru_cache(maxsize=1)
def _cloud_table():
    """Band-mean mass extinction [m2 kg-1], single-scattering albedo and asymmetry
    parameter of droplets, each (nband, radii), and the tabulated effective radii [m]."""
    radii = np.geomspace(*CLOUD_RADIUS_RANGE, _CLOUD_TABLE_RADII)
    weights = np.array([_gamma_weights(a) for a in radii])                # (radii, mie radii)
    mass = weights @ (4.0 / 3.0 * np.pi * _MIE_RADII ** 3) * WATER_DENSITY
    shape = (len(LONGWAVE_BANDS), radii.size)
    extinction, scattering, asymmetry = np.zeros(shape), np.zeros(shape), np.zeros(shape)
    cross = np.pi * _MIE_RADII ** 2
    for i, band in enumerate(LONGWAVE_BANDS):
        total = 0.0
        for nu, step in zip(*_band_quadrature(band)):
            planck = step * float(planck_radiance(CLOUD_WEIGHTING_TEMPERATURE, nu))
            q_ext, q_sca, g = mie_efficiencies(2.0 * np.pi * _MIE_RADII * nu, water_refractive_index(nu))
            extinction[i] += planck * (weights @ (cross * q_ext)) / mass
            scattering[i] += planck * (weights @ (cross * q_sca)) / mass
            asymmetry[i] += planck * (weights @ (cross * q_sca * g)) / mass
            total += planck
        asymmetry[i] /= scattering[i]
        extinction[i] /= total
        scattering[i] /= total
    return radii, extinction, scattering / extinction, asymmetry


def cloud_optics(liquid_water_content, effective_radius):
    """Longwave extinction, single-scattering albedo and asymmetry of cloud droplets per band.

    Mie theory (Mie 1908) for a gamma distribution of droplets with effective variance 0.1
    (Hansen 1971) and the refractive index of liquid water (Hale and Querry 1973, from
    memory), averaged over each band of :data:`LONGWAVE_BANDS` with Planck weights at
    280 K (extinction and scattering coefficients averaged; the asymmetry parameter
    scattering-weighted). Effective radii outside 2-40 um are clamped to that range.

    Parameters
    ----------
    liquid_water_content : array_like
        Cloud liquid water content [kg m-3], >= 0.
    effective_radius : array_like
        Droplet effective radius [m], > 0 where the water content is positive;
        broadcasts with ``liquid_water_content``.

    Returns
    -------
    extinction : numpy.ndarray, shape (nband,) + shape
        Volume extinction coefficient [m-1]; 0 where there is no liquid water.
    single_scattering_albedo : numpy.ndarray, shape (nband,) + shape
        [1], in [0, 1].
    asymmetry_parameter : numpy.ndarray, shape (nband,) + shape
        [1].

    References
    ----------
    Mie, G., 1908: Beitraege zur Optik trueber Medien. Ann. Phys., 330, 377-445.

    Hansen, J. E., 1971: Multiple scattering of polarized light in planetary atmospheres.
    Part II. Sunlight reflected by terrestrial water clouds. J. Atmos. Sci., 28, 1400-1426.

    Hale, G. M. and M. R. Querry, 1973: Optical constants of water in the 200-nm to 200-um
    wavelength region. Appl. Opt., 12, 555-563.

    Examples
    --------
    Mass absorption coefficient [m2 kg-1] in the window for droplets of 10 um:

    >>> ext, ssa, g = cloud_optics(1e-3, 10e-6)
    >>> bool(50.0 < float(ext[4] * (1.0 - ssa[4])) / 1e-3 < 150.0)
    True
    """
    lwc = np.asarray(liquid_water_content, dtype=np.float64)
    r = np.asarray(effective_radius, dtype=np.float64)
    check_array("liquid_water_content", lwc, 0.0, None)
    try:
        lwc, r = np.broadcast_arrays(lwc, r)
    except ValueError:
        raise ParameterError(f"liquid_water_content {lwc.shape} and effective_radius {r.shape} do not "
                             "broadcast together") from None
    bad = (lwc > 0.0) & ~(np.isfinite(r) & (r > 0.0))
    if np.any(bad):
        index = np.unravel_index(int(np.argmax(bad)), bad.shape)
        fail("effective_radius", "finite and > 0 where liquid_water_content > 0", r[index].item(),
             tuple(int(i) for i in index) if bad.ndim else None)
    radii, mass_extinction, ssa_table, g_table = _cloud_table()
    # Cloud-free cells may carry any radius; they get the properties of the smallest one.
    log_r = np.log(np.clip(np.where(lwc > 0.0, r, radii[0]), radii[0], radii[-1])).ravel()
    log_table = np.log(radii)
    shape = (len(LONGWAVE_BANDS),) + lwc.shape
    extinction, ssa, g = (np.empty(shape) for _ in range(3))
    for i in range(len(LONGWAVE_BANDS)):
        extinction[i] = lwc * np.interp(log_r, log_table, mass_extinction[i]).reshape(lwc.shape)
        ssa[i] = np.interp(log_r, log_table, ssa_table[i]).reshape(lwc.shape)
        g[i] = np.interp(log_r, log_table, g_table[i]).reshape(lwc.shape)
    return extinction, np.clip(ssa, 0.0, 1.0), g


# ----------------------------------------------------------------------------------------
# Gases
# ----------------------------------------------------------------------------------------

#: Water-vapour lines, simple spectral model of Jeevanjee and Fueglistaler (2020), values
#: from memory: mass absorption coefficient at the band centre [m2 kg-1], band centre
#: [cm-1] and e-folding width [cm-1] of the rotation band and of the vibration-rotation
#: band, at the reference pressure below.
H2O_ROTATION_BAND = (130.0, 150.0, 56.0)
H2O_VIBRATION_ROTATION_BAND = (8.0, 1500.0, 40.0)
#: Reference pressure [Pa] of the water-vapour line coefficients (from memory: 500 hPa).
H2O_REFERENCE_PRESSURE = 50000.0
#: The 15 um CO2 band in the same exponential form (Wilson and Gea-Banacloche 2012;
#: Jeevanjee et al. 2021), values from memory: [m2 kg-1], [cm-1], [cm-1].
CO2_BAND = (110.0, 667.5, 10.2)
#: Reference pressure [Pa] of the CO2 coefficient (from memory: 100 hPa).
CO2_REFERENCE_PRESSURE = 10000.0
#: Default CO2 mole fraction [mol mol-1] (about the global mean of 2015; common practice).
CO2_MOLE_FRACTION = 400e-6
#: Water-vapour continuum of Roberts, Selby and Biberman (1976), fitted in the 8-12 um
#: window: ``C(nu) = a + b exp(-beta nu)`` [cm2 g-1 atm-1] at 296 K with a = 4.18,
#: b = 5578, beta = 7.87e-3 cm, temperature factor ``exp(T0 (1/T - 1/296))`` with
#: T0 = 1800 K, and foreign broadening 0.002 of self broadening (from memory).
ROBERTS_CONTINUUM = (4.18, 5578.0, 7.87e-3, 1800.0, 0.002)
#: The continuum is applied below this wavenumber [cm-1]: in the window where it was
#: fitted and in the rotation-band wing. Above, the 6.3 um lines dominate and the 4 um
#: window continuum is much weaker (common practice to treat it separately).
CONTINUUM_LIMIT = 1250.0
#: Molar masses [kg mol-1] of dry air (U.S. Standard Atmosphere 1976), water and CO2.
DRY_AIR_MOLAR_MASS = 0.0289644
WATER_MOLAR_MASS = 0.01801528
CO2_MOLAR_MASS = 0.0440095
#: Gas constant of dry air [J kg-1 K-1], as in :mod:`surrogate3d.scenes.atmosphere`.
DRY_AIR_GAS_CONSTANT = 8.31432 / DRY_AIR_MOLAR_MASS
#: Standard atmosphere [Pa].
ATMOSPHERE = 101325.0


class SpectralIntervals(NamedTuple):
    """Narrow spectral intervals tiling the longwave bands.

    Attributes
    ----------
    wavenumber_low, wavenumber_high : numpy.ndarray
        Interval limits [m-1], increasing.
    band : numpy.ndarray of int
        Index in :data:`LONGWAVE_BANDS` of the band each interval belongs to.
    """

    wavenumber_low: np.ndarray
    wavenumber_high: np.ndarray
    band: np.ndarray


def spectral_intervals(resolution=DEFAULT_RESOLUTION):
    """Split each longwave band into equal intervals no wider than ``resolution``.

    Parameters
    ----------
    resolution : float
        Widest interval [m-1], > 0; default 10 cm-1.

    Returns
    -------
    SpectralIntervals

    Examples
    --------
    >>> intervals = spectral_intervals()
    >>> len(intervals.band), float(intervals.wavenumber_low[0]), float(intervals.wavenumber_high[-1])
    (299, 1000.0, 300000.0)
    """
    step = check_number("resolution", resolution, 0.0, None, low_open=True)
    low, high, band = [], [], []
    for i, b in enumerate(LONGWAVE_BANDS):
        start, stop = b.wavenumber_range
        count = int(np.ceil((stop - start) / step - 1e-9))
        edges = np.linspace(start, stop, count + 1)
        low.append(edges[:-1])
        high.append(edges[1:])
        band.append(np.full(count, i))
    return SpectralIntervals(np.concatenate(low), np.concatenate(high), np.concatenate(band))


def sum_over_bands(values, intervals):
    """Add interval values (interval axis first) up into the longwave bands.

    Parameters
    ----------
    values : array_like, shape (ninterval, ...)
        Per-interval quantities that add (fluxes, absorption), interval axis first.
    intervals : SpectralIntervals
        The intervals of ``values``.

    Returns
    -------
    numpy.ndarray, shape (nband, ...)

    Examples
    --------
    >>> intervals = spectral_intervals()
    >>> sum_over_bands(np.ones(len(intervals.band)), intervals).tolist()
    [34.0, 15.0, 13.0, 17.0, 45.0, 175.0]
    """
    values = np.asarray(values, dtype=np.float64)
    if values.ndim < 1 or values.shape[0] != len(intervals.band):
        raise ParameterError(f"values must have the interval axis first, length {len(intervals.band)}; "
                             f"got shape {values.shape}")
    starts = np.flatnonzero(np.r_[True, np.diff(intervals.band) != 0])
    return np.add.reduceat(values, starts, axis=0)


def _line_coefficient(nu, strength, centre, width):
    return strength * np.exp(-np.abs(nu - centre) / width)


def gas_absorption_coefficient(air_temperature, air_pressure, specific_humidity,
                               co2_mole_fraction=CO2_MOLE_FRACTION, resolution=DEFAULT_RESOLUTION):
    """Absorption coefficient of water vapour and CO2 on the spectral intervals [m-1].

    At the centre ``nu`` [cm-1] of each interval (:func:`spectral_intervals`):

    * water-vapour lines (Jeevanjee and Fueglistaler 2020), ``kappa = [k_rot exp(-|nu - 150| /
      56) + k_vr exp(-|nu - 1500| / 40)] p / p_ref`` [m2 kg-1], with ``k_rot = 130``,
      ``k_vr = 8`` m2 kg-1 and ``p_ref = 500 hPa`` (line wings broaden with pressure);
    * CO2, ``kappa = 110 exp(-|nu - 667.5| / 10.2) p / 100 hPa`` [m2 kg-1] (Wilson and
      Gea-Banacloche 2012; Jeevanjee et al. 2021);
    * the water-vapour continuum below 1250 cm-1 (Roberts et al. 1976), ``kappa = 0.1 C(nu)
      exp(1800 (1/T - 1/296)) (e + 0.002 (p - e)) / 1 atm`` [m2 kg-1] with ``C(nu) = 4.18 +
      5578 exp(-7.87e-3 nu)`` [cm2 g-1 atm-1] and e the vapour pressure.

    The coefficients are from memory. The temperature dependence of the lines and all
    other gases (ozone, methane, nitrous oxide) are left out. The absorption coefficient
    is ``kappa_h2o rho_v + kappa_co2 rho_co2`` with the densities from the ideal-gas law
    for moist air.

    Parameters
    ----------
    air_temperature : array_like
        [K], > 0.
    air_pressure : array_like
        [Pa], > 0.
    specific_humidity : array_like
        Mass of water vapour per mass of moist air [kg kg-1], in [0, 1).
    co2_mole_fraction : float
        CO2 moles per mole of dry air [mol mol-1], in [0, 1]; default 400e-6.
    resolution : float
        Widest spectral interval [m-1]; default 10 cm-1.

    The three arrays broadcast together.

    Returns
    -------
    numpy.ndarray, shape (ninterval,) + shape
        Absorption coefficient [m-1] on each interval of ``spectral_intervals(resolution)``;
        no scattering.

    References
    ----------
    Jeevanjee, N. and S. Fueglistaler, 2020: Simple spectral models for atmospheric
    radiative cooling. J. Atmos. Sci., 77, 479-497.

    Jeevanjee, N., J. T. Seeley, D. Paynter and S. Fueglistaler, 2021: An analytical model
    for spatially varying clear-sky CO2 forcing. J. Climate, 34, 9463-9480.

    Wilson, D. J. and J. Gea-Banacloche, 2012: Simple model to estimate the contribution of
    atmospheric CO2 to the Earth's greenhouse effect. Am. J. Phys., 80, 306-315.

    Roberts, R. E., J. E. A. Selby and L. M. Biberman, 1976: Infrared continuum absorption
    by atmospheric water vapor in the 8-12 um window. Appl. Opt., 15, 2085-2090.

    Examples
    --------
    >>> k = gas_absorption_coefficient(288.0, 101325.0, 0.01)
    >>> k.shape
    (299,)
    >>> intervals = spectral_intervals()
    >>> window = intervals.band == 4
    >>> bool(k[window].min() < 1e-3 < k.max())     # a few 1e-4 m-1 in the window
    True
    """
    t = np.asarray(air_temperature, dtype=np.float64)
    p = np.asarray(air_pressure, dtype=np.float64)
    q = np.asarray(specific_humidity, dtype=np.float64)
    check_array("air_temperature", t, 0.0, None, low_open=True)
    check_array("air_pressure", p, 0.0, None, low_open=True)
    check_array("specific_humidity", q, 0.0, 1.0, high_open=True)
    co2 = check_number("co2_mole_fraction", co2_mole_fraction, 0.0, 1.0)
    try:
        t, p, q = np.broadcast_arrays(t, p, q)
    except ValueError:
        raise ParameterError(f"air_temperature {t.shape}, air_pressure {p.shape} and specific_humidity "
                             f"{q.shape} do not broadcast together") from None
    intervals = spectral_intervals(resolution)
    nu = (0.5 * (intervals.wavenumber_low + intervals.wavenumber_high) / PER_CM).reshape((-1,) + (1,) * t.ndim)

    epsilon = WATER_MOLAR_MASS / DRY_AIR_MOLAR_MASS
    density = p / (DRY_AIR_GAS_CONSTANT * t * (1.0 + (1.0 / epsilon - 1.0) * q))
    vapour_density = q * density
    co2_density = co2 * CO2_MOLAR_MASS / DRY_AIR_MOLAR_MASS * (1.0 - q) * density
    vapour_pressure = p * q / (epsilon + (1.0 - epsilon) * q)

    lines = (_line_coefficient(nu, *H2O_ROTATION_BAND) + _line_coefficient(nu, *H2O_VIBRATION_ROTATION_BAND)) \
        * (p / H2O_REFERENCE_PRESSURE)
    a, b, beta, t0, foreign = ROBERTS_CONTINUUM
    # cm2 g-1 atm-1 times atm gives cm2 g-1; 0.1 converts to m2 kg-1.
    continuum = 0.1 * (a + b * np.exp(-beta * nu)) * np.exp(t0 * (1.0 / t - 1.0 / 296.0)) \
        * (vapour_pressure + foreign * (p - vapour_pressure)) / ATMOSPHERE
    continuum = np.where(nu < CONTINUUM_LIMIT, continuum, 0.0)
    co2_coefficient = _line_coefficient(nu, *CO2_BAND) * (p / CO2_REFERENCE_PRESSURE)
    return vapour_density * (lines + continuum) + co2_density * co2_coefficient


def mix_longwave_optics(gas_absorption, cloud_extinction, cloud_single_scattering_albedo,
                        cloud_asymmetry_parameter, intervals):
    """Combine gas absorption on the intervals with cloud optics per band.

    Each interval takes the cloud optics of its band; extinctions add, the gas does not
    scatter, so the single-scattering albedo is the cloud's scattering over the total
    extinction and the asymmetry parameter is the cloud's.

    Parameters
    ----------
    gas_absorption : array_like, shape (ninterval, ...)
        Gas absorption coefficient [m-1], >= 0 (:func:`gas_absorption_coefficient`).
    cloud_extinction, cloud_single_scattering_albedo, cloud_asymmetry_parameter : array_like
        Cloud optics per band (:func:`cloud_optics`), shape (nband, ...) broadcastable to
        the trailing shape of ``gas_absorption``: [m-1], [1], [1].
    intervals : SpectralIntervals
        The intervals of ``gas_absorption``.

    Returns
    -------
    extinction, single_scattering_albedo, asymmetry_parameter : numpy.ndarray
        Shape of ``gas_absorption``: [m-1], [1], [1]. Where the extinction is 0 the
        single-scattering albedo is 0.

    Examples
    --------
    >>> intervals = spectral_intervals()
    >>> gas = gas_absorption_coefficient(288.0, 101325.0, 0.01)
    >>> ext, ssa, g = mix_longwave_optics(gas, *cloud_optics(0.0, 10e-6), intervals)
    >>> bool(np.all(ssa == 0.0) and np.all(ext == gas))
    True
    """
    gas = np.asarray(gas_absorption, dtype=np.float64)
    check_array("gas_absorption", gas, 0.0, None)
    if gas.ndim < 1 or gas.shape[0] != len(intervals.band):
        raise ParameterError(f"gas_absorption must have the interval axis first, length {len(intervals.band)}; "
                             f"got shape {gas.shape}")
    cloud = [np.asarray(v, dtype=np.float64)[intervals.band] for v in
             (cloud_extinction, cloud_single_scattering_albedo, cloud_asymmetry_parameter)]
    extinction = gas + cloud[0]
    scattering = cloud[0] * cloud[1]
    ssa = np.divide(scattering, extinction, out=np.zeros_like(extinction), where=extinction > 0.0)
    return extinction, np.clip(ssa, 0.0, 1.0), np.broadcast_to(cloud[2], extinction.shape).copy()
