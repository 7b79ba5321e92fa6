"""Fourier-filtered random fields: spectrum, statistics, thresholds, reproducibility."""

import numpy as np
import pytest

from surrogate3d.errors import ParameterError
from surrogate3d.scenes.random_fields import (gaussian_random_field, quantile_mask, radial_spectrum,
                                              random_generator)


def _mean_slope(n, dx, realisations, kmin_index, kmax_index, **kwargs):
    slopes = []
    for seed in range(realisations):
        field = gaussian_random_field((n, n), dx, dx, random_generator(seed, 7), **kwargs)
        k, power = radial_spectrum(field, dx, dx)
        dk = 1.0 / (n * dx)
        use = (k >= kmin_index * dk * 0.999) & (k <= kmax_index * dk * 1.001)
        slopes.append(np.polyfit(np.log(k[use]), np.log(power[use]), 1)[0])
    return float(np.mean(slopes))


def test_spectrum_slope_is_minus_five_thirds():
    # Cloud liquid water follows E(k) ~ k**(-5/3) (Cahalan and Snider 1989; Davis et al. 1996).
    # Tolerance: the ring at wavenumber index m holds ~2 pi m modes with exponentially
    # distributed power, so log ring power scatters by ~1/sqrt(pi m); a least-squares slope
    # over m = 4..64 then has a standard error near 0.03 per 256 x 256 field, 0.015 for the
    # mean of four, plus a few per cent of bias from square rings at low m: 0.1 is > 5 sigma.
    assert _mean_slope(256, 100.0, 4, 4, 64) == pytest.approx(-5.0 / 3.0, abs=0.1)


def test_other_exponents_and_outer_scale():
    assert _mean_slope(256, 100.0, 4, 4, 64, spectral_exponent=3.0) == pytest.approx(-3.0, abs=0.1)
    # With an outer scale L the 2D density is flat below k = 1/L, so E(k) ~ k there
    # (analytic: d ln E / d ln k = 1 - (8/3) k**2 / (k**2 + L**-2)); L = 3.2 km is ring 8 here.
    flat = _mean_slope(256, 100.0, 4, 1, 3, outer_scale=3200.0)
    steep = _mean_slope(256, 100.0, 4, 40, 100, outer_scale=3200.0)
    assert flat > 0.5 and steep < -1.3


def test_field_is_zero_mean_unit_variance_and_reproducible():
    a = gaussian_random_field((40, 24), 50.0, 80.0, random_generator(3, 1))
    b = gaussian_random_field((40, 24), 50.0, 80.0, random_generator(3, 1))
    c = gaussian_random_field((40, 24), 50.0, 80.0, random_generator(3, 2))
    assert a.shape == (40, 24)
    assert abs(a.mean()) < 1e-12 and a.std() == pytest.approx(1.0, rel=1e-12)
    assert np.array_equal(a, b)
    assert not np.allclose(a, c)


def test_parameters_are_checked():
    rng = random_generator(0)
    with pytest.raises(ParameterError, match="spectral_exponent"):
        gaussian_random_field((8, 8), 1.0, 1.0, rng, spectral_exponent=-1.0)
    with pytest.raises(ParameterError, match="outer_scale"):
        gaussian_random_field((8, 8), 1.0, 1.0, rng, outer_scale=0.0)
    with pytest.raises(ParameterError, match="fraction"):
        quantile_mask(np.zeros(4), 1.5)


@pytest.mark.parametrize("fraction", [0.0, 0.01, 0.25, 0.5, 0.7, 0.999, 1.0])
def test_quantile_mask_hits_the_cloud_fraction_exactly(fraction):
    field = gaussian_random_field((37, 29), 100.0, 100.0, random_generator(11))
    mask, threshold = quantile_mask(field, fraction)
    assert mask.sum() == round(fraction * field.size)
    if 0 < mask.sum() < field.size:
        assert field[mask].min() > threshold > field[~mask].max()
