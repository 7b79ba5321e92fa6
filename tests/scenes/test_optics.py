"""Optics of scene cells checked against published formulas and values."""

import numpy as np
import pytest

from surrogate3d.errors import ParameterError
from surrogate3d.scenes import optics


def test_stephens_optical_depth_of_100_g_per_m2_at_10_um_is_15():
    # Stephens (1978): tau = 3 LWP / (2 rho_w r_e); LWP 100 g m-2, r_e 10 um -> 15.
    depth = 500.0
    lwc = 0.1 / depth  # kg m-3 spread over 500 m
    tau = optics.cloud_extinction(lwc, 10e-6) * depth
    assert tau == pytest.approx(15.0, rel=1e-12)


def test_cloud_extinction_is_zero_without_water_and_rejects_bad_input():
    assert optics.cloud_extinction([0.0, 1e-4], [0.0, 1e-5])[0] == 0.0
    with pytest.raises(ParameterError, match="liquid_water_content"):
        optics.cloud_extinction(-1e-4, 1e-5)
    with pytest.raises(ParameterError, match="effective_radius"):
        optics.cloud_extinction(1e-4, 0.0)


def test_slingo_visible_band_is_conservative_and_near_infrared_absorbs():
    # Slingo (1989): the 0.25-0.69 um band has 1 - omega below 1e-5; the near infrared absorbs,
    # more for larger drops; g near 0.85 for r_e = 10 um.
    radius = np.array([5e-6, 10e-6, 15e-6])
    omega_vis, g_vis = optics.cloud_single_scattering("visible", radius)
    omega_nir, g_nir = optics.cloud_single_scattering("near_infrared", radius)
    assert np.all(1.0 - omega_vis < 1e-5)
    assert np.all(omega_nir < 0.995) and np.all(omega_nir > 0.95)
    assert np.all(np.diff(omega_nir) < 0)  # larger drops absorb more (Slingo 1989)
    assert g_vis[1] == pytest.approx(0.829 + 2.482e-3 * 10.0, abs=1e-12)  # Slingo (1989) e + f r_e
    assert np.all((g_nir > 0.75) & (g_nir < 0.9))


def test_slingo_coefficients_reproduce_the_published_linear_forms():
    # Slingo (1989) band 3 (1.19-2.38 um): 1 - omega = 4.64e-4 + 1.24e-3 r_e, g = 0.754 + 6.56e-3 r_e.
    omega, g = optics.cloud_single_scattering("near_infrared_middle", 8e-6)
    assert 1.0 - omega == pytest.approx(4.64e-4 + 1.24e-3 * 8.0, rel=1e-12)
    assert g == pytest.approx(0.754 + 6.56e-3 * 8.0, rel=1e-12)


def test_radius_is_clamped_to_slingo_fitted_range():
    # Slingo (1989) fitted 4.2-16.6 um (from memory); outside, the end values are used.
    lo, hi = optics.SLINGO_RADIUS_RANGE
    assert optics.cloud_single_scattering("near_infrared", 1e-6)[0] == optics.cloud_single_scattering(
        "near_infrared", lo)[0]
    assert optics.cloud_single_scattering("near_infrared", 40e-6)[1] == optics.cloud_single_scattering(
        "near_infrared", hi)[1]


def test_solar_weights_sum_to_one_and_split_near_0_7_um():
    # ASTM G173-03 extraterrestrial spectrum (Gueymard 2004): about 46-47 % of the solar
    # irradiance lies below 0.69-0.70 um (from memory, and our integration: 0.4587).
    w = optics.solar_weights(["visible", "near_infrared"])
    assert w.sum() == pytest.approx(1.0, abs=1e-12)
    assert 0.44 < w[0] < 0.48
    fine = optics.solar_weights(["visible", "near_infrared_short", "near_infrared_middle", "near_infrared_long"])
    assert fine.sum() == pytest.approx(1.0, abs=1e-12)
    assert fine[1:].sum() == pytest.approx(w[1], rel=1e-12)
    assert optics.solar_weights(["visible"]).tolist() == [1.0]


def test_overlapping_or_unknown_bands_are_refused():
    with pytest.raises(ParameterError, match="overlap"):
        optics.get_bands(["near_infrared", "near_infrared_short"])
    with pytest.raises(ParameterError, match="unknown band 'ultraviolet'"):
        optics.get_bands(["ultraviolet"])


def test_bodhaine_rayleigh_optical_depth_at_550_nm():
    # Bodhaine et al. (1999), Table 3: tau_R(550 nm) = 0.0973 at 1013.25 hPa (from memory);
    # their eq. 30 fit gives 0.0971.
    assert optics.rayleigh_optical_depth(550e-9) == pytest.approx(0.0972, abs=0.0005)
    # Rayleigh optical depth scales with lambda**-4 to first order (Rayleigh 1871, common practice).
    ratio = optics.rayleigh_optical_depth(400e-9) / optics.rayleigh_optical_depth(800e-9)
    assert 16.0 < ratio < 18.5
    # and with surface pressure (Bodhaine et al. 1999, eq. 30 note).
    assert optics.rayleigh_optical_depth(550e-9, 50662.5) == pytest.approx(
        0.5 * optics.rayleigh_optical_depth(550e-9), rel=1e-12)


def test_rayleigh_layers_share_the_column_by_pressure_thickness():
    pressure = np.array([101325.0, 90000.0, 70000.0, 50000.0])
    layers = optics.rayleigh_layer_optical_depth("visible", pressure)
    column = optics.rayleigh_optical_depth(optics.BANDS["visible"].rayleigh_wavelength, 101325.0)
    # Rayleigh optical depth is proportional to the air mass above a level (Bodhaine et al. 1999).
    assert layers.sum() == pytest.approx(column * (101325.0 - 50000.0) / 101325.0, rel=1e-12)
    assert layers[1] / layers[2] == pytest.approx((90000.0 - 70000.0) / (70000.0 - 50000.0))


def test_gas_absorption_profile_is_exponential_and_sums_to_the_column():
    z = np.linspace(0.0, 6000.0, 7)
    tau = optics.gas_absorption_layer_optical_depth(z, 0.3, 2000.0)
    assert tau.sum() == pytest.approx(0.3, rel=1e-12)
    # Equal-thickness layers of an exp(-z/H) profile decrease by exp(-dz/H) (analytic).
    assert np.allclose(tau[1:] / tau[:-1], np.exp(-1000.0 / 2000.0))
    with pytest.raises(ParameterError, match="scale_height"):
        optics.gas_absorption_layer_optical_depth(z, 0.3, 0.0)


def test_mixing_adds_extinction_and_weights_by_scattering():
    # Additive combination of optical properties (Liou 2002): ext = sum, ssa = sca / ext,
    # g = sum(sca_i g_i) / sca, with g = 0 for Rayleigh and no scattering by the gas.
    ext, ssa, g = optics.mix_optics(0.02, 0.99, 0.85, 1e-5, 2e-5)
    assert ext == pytest.approx(0.02003)
    assert ssa == pytest.approx((0.02 * 0.99 + 1e-5) / 0.02003)
    assert g == pytest.approx(0.02 * 0.99 * 0.85 / (0.02 * 0.99 + 1e-5))


def test_clear_air_has_small_positive_extinction_and_valid_albedo():
    ext, ssa, g = optics.mix_optics(np.zeros(3), 1.0, 0.0, np.full(3, 1.5e-5), np.array([0.0, 1e-6, 1e-3]))
    assert np.all(ext > 0) and np.all(ext < 2e-3)
    assert np.all((ssa >= 0) & (ssa <= 1))
    assert ssa[0] == 1.0 and np.all(g == 0.0)
