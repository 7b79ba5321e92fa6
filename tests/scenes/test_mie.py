"""Checks of the Mie efficiencies against published values and analytic limits."""

import numpy as np
import pytest

from surrogate3d.errors import ParameterError
from surrogate3d.scenes.mie import mie_efficiencies


def test_bohren_huffman_sample_case():
    # Bohren and Huffman (1983), Appendix A, sample output of their program: sphere of
    # radius 0.525 um, wavelength 0.6328 um, refractive index 1.55: Q_ext = Q_sca = 3.1054
    # (from memory).
    q_ext, q_sca, _ = mie_efficiencies(2.0 * np.pi * 0.525 / 0.6328, 1.55)
    assert float(q_ext) == pytest.approx(3.1054, abs=1e-4)
    assert float(q_sca) == pytest.approx(float(q_ext), rel=1e-12)


def test_rayleigh_limit():
    # Small spheres (Bohren and Huffman 1983, eqs. 5.8 and 5.13; Rayleigh 1871):
    # Q_abs = 4 x Im((m^2 - 1)/(m^2 + 2)), Q_sca = 8/3 x^4 |(m^2 - 1)/(m^2 + 2)|^2, and
    # symmetric scattering (g -> 0). The next terms are O(x^2) relative.
    m = 1.5 + 0.4j
    x = np.array([1e-3, 1e-2])
    q_ext, q_sca, g = mie_efficiencies(x, m)
    polarizability = (m * m - 1.0) / (m * m + 2.0)
    np.testing.assert_allclose(q_ext - q_sca, 4.0 * x * polarizability.imag, rtol=3e-4)
    np.testing.assert_allclose(q_sca, 8.0 / 3.0 * x ** 4 * abs(polarizability) ** 2, rtol=3e-4)
    assert np.all(np.abs(g) < 1e-4)


def test_large_spheres_remove_twice_their_cross_section():
    # The extinction paradox (van de Hulst 1957): Q_ext -> 2 for x -> inf, approached as
    # 2 + O(x^(-2/3)); a strongly absorbing large sphere absorbs about its cross-section
    # less what its surface reflects.
    q_ext, q_sca, g = mie_efficiencies(np.array([500.0, 3000.0]), 1.33 + 0.3j)
    np.testing.assert_allclose(q_ext, 2.0, atol=0.03)
    assert np.all((q_ext - q_sca > 0.85) & (q_ext - q_sca < 1.0))
    assert np.all(g > 0.85)


def test_efficiencies_are_physical_over_a_range_of_sizes():
    # Energy: a sphere cannot scatter more than it removes; without absorption it scatters
    # all it removes (optical theorem, Bohren and Huffman 1983, section 3.4).
    x = np.geomspace(0.01, 300.0, 400).reshape(20, 20)
    q_ext, q_sca, g = mie_efficiencies(x, 1.2 + 0.05j)
    assert q_ext.shape == (20, 20)
    assert np.all(q_sca <= q_ext) and np.all(q_sca > 0.0)
    assert np.all((g > -1e-12) & (g < 1.0))
    q_ext, q_sca, _ = mie_efficiencies(x, 1.33)
    np.testing.assert_allclose(q_sca, q_ext, rtol=1e-9)


def test_bad_input_is_named():
    with pytest.raises(ParameterError, match=r"^size_parameter must be in \(0, inf\); got 0.0 \(at index 1\)$"):
        mie_efficiencies([1.0, 0.0], 1.33)
    with pytest.raises(ParameterError, match=r"^refractive_index.imag must be in \[0, inf\); got -0.1$"):
        mie_efficiencies(1.0, 1.33 - 0.1j)
