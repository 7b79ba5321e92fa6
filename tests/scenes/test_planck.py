"""Checks of the band-integrated Planck function against the laws of black-body radiation.

The reference for band integrals is the exponential series of Widger and Woodall (1976),
written here independently of the quadrature in the package.
"""

import warnings

import numpy as np
import pytest
from scipy.optimize import minimize_scalar

from surrogate3d.errors import ParameterError
from surrogate3d.scenes.planck import (BOLTZMANN_CONSTANT, PLANCK_CONSTANT, SECOND_RADIATION_CONSTANT,
                                       SPEED_OF_LIGHT, STEFAN_BOLTZMANN, planck_band_fraction,
                                       planck_band_radiance, planck_radiance)

#: CODATA 2018 (Tiesinga et al. 2021): Stefan-Boltzmann constant [W m-2 K-4] and the Wien
#: displacement constants for wavelength [m K] and for frequency [Hz K-1].
CODATA_SIGMA = 5.670374419e-8
CODATA_WIEN_WAVELENGTH = 2.897771955e-3
CODATA_WIEN_FREQUENCY = 5.878925757e10


def _radiance_above(temperature, wavenumber, terms=200):
    """int_nu^inf B dnu by the series of Widger and Woodall (1976):
    2 k^4 T^4 / (h^3 c^2) sum_n e^(-n x) (x^3/n + 3 x^2/n^2 + 6 x/n^3 + 6/n^4), x = h c nu / (k T)."""
    x = SECOND_RADIATION_CONSTANT * np.asarray(wavenumber, dtype=float) / temperature
    n = np.arange(1, terms + 1)[:, None]
    series = (np.exp(-n * x) * (x ** 3 / n + 3 * x ** 2 / n ** 2 + 6 * x / n ** 3 + 6 / n ** 4)).sum(axis=0)
    return 2 * BOLTZMANN_CONSTANT ** 4 * temperature ** 4 / (PLANCK_CONSTANT ** 3 * SPEED_OF_LIGHT ** 2) * series


def test_stefan_boltzmann_constant_from_the_exact_constants():
    # CODATA 2018 lists sigma = 5.670374419e-8 W m-2 K-4 (exact to the digits given).
    assert STEFAN_BOLTZMANN == pytest.approx(CODATA_SIGMA, rel=1e-9)


@pytest.mark.parametrize("temperature", [3.0, 150.0, 200.0, 288.15, 300.0, 1000.0, 5772.0])
def test_whole_spectrum_is_sigma_t4_over_pi(temperature):
    # Stefan (1879) and Boltzmann (1884): int_0^inf B dnu = sigma T^4 / pi, sigma from
    # CODATA 2018.
    radiance = planck_band_radiance(temperature, 0.0, np.inf)
    assert float(radiance) == pytest.approx(CODATA_SIGMA * temperature ** 4 / np.pi, rel=1e-10)


def test_bands_agree_with_the_series_to_1e_9():
    # The series of Widger and Woodall (1976) converges for every x > 0; band integral =
    # difference of the tails. The requirement is 1e-6 relative; the quadrature does 1e-9.
    rng = np.random.default_rng(3)
    temperature = rng.uniform(150.0, 330.0, 200)
    low = rng.uniform(1000.0, 250000.0, 200)
    high = low + rng.uniform(10.0, 100000.0, 200)
    expected = _radiance_above(temperature, low) - _radiance_above(temperature, high)
    np.testing.assert_allclose(planck_band_radiance(temperature, low, high), expected, rtol=1e-9, atol=0)


def test_wien_displacement_in_wavenumber_and_in_wavelength():
    # Wien (1893), constants from CODATA 2018: the spectral radiance per unit frequency (and
    # so per wavenumber) peaks at nu = b' T / c, per unit wavelength at lambda = b / T.
    for temperature in (220.0, 300.0):
        peak = minimize_scalar(lambda nu: -planck_radiance(temperature, nu), bounds=(1e3, 2e5),
                               method="bounded", options={"xatol": 1e-6}).x
        assert peak == pytest.approx(CODATA_WIEN_FREQUENCY * temperature / SPEED_OF_LIGHT, rel=1e-8)
        # B_lambda = B_nu |dnu / dlambda| = B_nu / lambda^2 with nu = 1 / lambda.
        peak = minimize_scalar(lambda lam: -planck_radiance(temperature, 1.0 / lam) / lam ** 2,
                               bounds=(1e-6, 1e-4), method="bounded", options={"xatol": 1e-15}).x
        assert peak == pytest.approx(CODATA_WIEN_WAVELENGTH / temperature, rel=1e-8)


def test_narrow_band_is_radiance_times_width():
    # Definition of the band integral: for a narrow band int B dnu = B(nu) dnu (1 + E) with
    # the midpoint-rule error E = dx^2 f''/(24 f) for f = x^3 / (e^x - 1), below 1e-9 for a
    # width of 1e-5 nu (dx = 1.4e-4 at x = 14).
    nu = np.array([5000.0, 66700.0, 100000.0, 250000.0])
    width = 1e-5 * nu
    band = planck_band_radiance(260.0, nu - width / 2, nu + width / 2)
    np.testing.assert_allclose(band, planck_radiance(260.0, nu) * width, rtol=1e-8)


def test_band_fractions():
    # Fractions of adjacent bands tiling [0, inf) add up to 1 (Stefan-Boltzmann); the
    # fraction emitted below lambda T = 2898 um K is 0.250108 and below 5000 um K 0.633747
    # (Incropera and DeWitt, Fundamentals of Heat and Mass Transfer, table of the blackbody
    # radiation functions; from memory; computed with slightly older constants, hence 1e-4).
    edges = np.array([0.0, 35000.0, 50000.0, 63000.0, 80000.0, 125000.0, 300000.0, np.inf])
    fractions = planck_band_fraction(255.0, edges[:-1], edges[1:])
    assert fractions.sum() == pytest.approx(1.0, abs=1e-12)
    for lambda_t, table in ((2898e-6, 0.250108), (5000e-6, 0.633747)):
        temperature = 400.0
        below = planck_band_fraction(temperature, temperature / lambda_t, np.inf)
        assert float(below) == pytest.approx(table, abs=1e-4)


def test_vectorised_over_temperature_and_bands():
    temperature = np.array([[200.0], [250.0], [300.0]])
    low = np.array([1000.0, 35000.0, 80000.0, 125000.0])
    high = np.array([35000.0, 80000.0, 125000.0, 300000.0])
    out = planck_band_radiance(temperature, low, high)
    assert out.shape == (3, 4)
    for i in range(3):
        for j in range(4):
            assert out[i, j] == pytest.approx(float(planck_band_radiance(temperature[i, 0], low[j], high[j])),
                                              rel=1e-13)


def test_cold_bodies_underflow_quietly_to_zero():
    # At 1 K the 800-1250 cm-1 window sits at x > 1150, where e^-x underflows: the radiance
    # is 0 without overflow warnings.
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        assert float(planck_band_radiance(1.0, 80000.0, 125000.0)) == 0.0
        assert float(planck_radiance(1.0, 100000.0)) == 0.0


@pytest.mark.parametrize("temperature, message", [
    ([250.0, -1.0, 300.0], r"^temperature must be in \(0, inf\); got -1.0 \(at index 1\)$"),
    ([250.0, 0.0], r"^temperature must be in \(0, inf\); got 0.0 \(at index 1\)$"),
    ([np.nan, 250.0], r"^temperature must be finite; got nan \(at index 0\)$"),
])
def test_bad_temperature_is_named_with_its_index(temperature, message):
    with pytest.raises(ParameterError, match=message):
        planck_band_radiance(temperature, 80000.0, 125000.0)


def test_bad_band_limits_are_named_with_their_index():
    with pytest.raises(ParameterError, match=r"^wavenumber_low must be in \[0, inf\); got -5.0 \(at index 1\)$"):
        planck_band_radiance(280.0, [0.0, -5.0], 1e5)
    with pytest.raises(ParameterError, match=r"^wavenumber_high must be greater than wavenumber_low; got 10.0 "
                                             r"\(at index 2\)$"):
        planck_band_radiance(280.0, 10.0, [20.0, 30.0, 10.0])
    with pytest.raises(ParameterError, match=r"^wavenumber_high must be finite; got nan$"):
        planck_band_radiance(280.0, 10.0, np.nan)
