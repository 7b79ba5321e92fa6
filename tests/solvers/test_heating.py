"""Checks of the shortwave heating rate against hand-computed values."""

import numpy as np
import pytest

from surrogate3d.errors import ParameterError
from surrogate3d.solvers.heating import heating_rate


def test_heating_rate_matches_hand_computation():
    # dT/dt = g/c_p F_abs/dp (textbook form, Liou 2002). By hand: 10 W m-2 absorbed in a
    # 100 hPa layer: 9.80665 / 1004.64 * 10 / 10000 = 9.76135e-6 K s-1 = 0.843381 K day-1.
    # Rule of thumb: about 12 W m-2 per 100 hPa for 1 K day-1 (common practice).
    rate = heating_rate([0.01], 1000.0, [100000.0, 90000.0])
    np.testing.assert_allclose(rate, [0.843381], rtol=1e-6)
    assert 11.0 < 10.0 / rate[0] < 13.0


def test_heating_rate_scales_with_layer_pressure_thickness_and_grid():
    # Same absorbed flux in a layer of half the mass heats twice as fast (same formula).
    absorption = np.full((2, 3, 4), 0.02)
    flux = np.linspace(500.0, 1000.0, 12).reshape(3, 4)
    rate = heating_rate(absorption, flux, [100000.0, 80000.0, 70000.0])
    assert rate.shape == (2, 3, 4)
    np.testing.assert_allclose(rate[1], 2.0 * rate[0], rtol=1e-14)
    np.testing.assert_allclose(rate[0], 9.80665 / 1004.64 * 0.02 * flux / 20000.0 * 86400.0, rtol=1e-14)


@pytest.mark.parametrize("args, words", [
    (([0.1], 1000.0, [1000.0, 2000.0]), ["air_pressure_edges", "decrease", "index 1"]),
    (([0.1], 1000.0, [1000.0, 900.0, 800.0]), ["air_pressure_edges", "shape", "(2,)"]),
    (([0.1], -1.0, [1000.0, 900.0]), ["incident_flux", "-1.0"]),
    (([np.nan], 1000.0, [1000.0, 900.0]), ["absorption", "must be finite"]),
    (([0.1], 1000.0, [1000.0, -5.0]), ["air_pressure_edges", "-5.0"]),
    ((np.zeros((1, 2)), [1.0, 2.0, 3.0], [1000.0, 900.0]), ["incident_flux", "shape"]),
])
def test_invalid_input_is_named(args, words):
    with pytest.raises(ParameterError) as info:
        heating_rate(*args)
    for word in words:
        assert word in str(info.value), (word, str(info.value))
