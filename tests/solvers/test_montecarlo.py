"""The Monte Carlo solver against analytic solutions, published behaviour and geometry."""

import math

import numpy as np
import pytest

from surrogate3d.errors import ParameterError, ValidationError
from surrogate3d.scenes import make_scene
from surrogate3d.solvers.montecarlo import solve_monte_carlo
from surrogate3d.solvers.two_stream import delta_eddington

from reference_solutions import doubling, h_function


def layer_scene(tau, ssa=1.0, g=0.85, albedo=0.0, n=4, nz=4, depth=1000.0, top=None, bands=1):
    """Horizontally homogeneous layer of optical depth ``tau`` filling the domain height."""
    top = depth if top is None else top
    ext = np.full((bands, nz, n, n), tau / depth)
    z_edge = np.linspace(0.0, top, nz + 1)
    weights = np.full(bands, 1.0 / bands)
    return make_scene(ext, ssa, g, z_edge, 100.0, 100.0, surface_albedo=albedo, solar_weight=weights)


def domain(result, name):
    return float(result[name].mean())


def closure(result):
    """Domain-mean R + A_atm + A_sfc - 1 and its standard error (the three errors added in
    quadrature: an upper bound, since they are anticorrelated)."""
    names = ("toa_upward_flux", "atmosphere_absorption", "surface_absorption")
    se = math.sqrt(sum(float(result[n + "_domain_mean_standard_error"]) ** 2 for n in names))
    return sum(domain(result, n) for n in names) - 1.0, se


@pytest.mark.parametrize("independent", [False, True])
def test_direct_transmittance_is_beer_lambert(independent):
    scene = layer_scene(2.0, ssa=0.9)
    out = solve_monte_carlo(scene, 60.0, 30.0, photons=2000, seed=1, independent_columns=independent)
    # Beer-Lambert law: T_direct = exp(-tau / mu0), to round-off: wherever a ray lands, it
    # crosses the same optical depth, so the direct beam has no noise.
    np.testing.assert_allclose(out.surface_downward_direct_flux.values, math.exp(-2.0 / 0.5), rtol=1e-6)
    assert np.all(out.surface_downward_direct_flux_standard_error.values < 1e-15)


@pytest.mark.parametrize("independent", [False, True])
def test_energy_closes_within_the_noise(independent):
    rng = np.random.default_rng(0)
    ext = rng.uniform(0, 0.004, size=(2, 5, 6, 6))
    ssa = rng.uniform(0.6, 1.0, size=ext.shape)
    alb = rng.uniform(0, 0.8, size=(2, 6, 6))
    scene = make_scene(ext, ssa, 0.7, np.linspace(0, 2000, 6), 150.0, 100.0, surface_albedo=alb,
                       solar_weight=[0.4, 0.6])
    out = solve_monte_carlo(scene, 40.0, 110.0, photons=20000, seed=3, independent_columns=independent)
    # Conservation of energy: R + A_atm + A_sfc = 1 (in expectation: absorption below the
    # roulette weight is tallied at its expected value), and the surface absorbs what
    # reaches it minus what it reflects.
    residual, se = closure(out)
    assert abs(residual) < 4 * se
    arriving = out.surface_downward_direct_flux + out.surface_downward_diffuse_flux
    np.testing.assert_allclose(out.surface_absorption, arriving - out.surface_upward_flux, atol=1e-12)


def test_conservative_layer_reflects_or_transmits_everything():
    out = solve_monte_carlo(layer_scene(5.0, ssa=1.0), 30.0, photons=20000, seed=2)
    r = domain(out, "toa_upward_flux")
    t = domain(out, "surface_downward_direct_flux") + domain(out, "surface_downward_diffuse_flux")
    # Conservative scattering over a black surface: R + T = 1 (energy conservation).
    assert abs(r + t - 1.0) < 1e-10
    assert np.all(out.absorption.values == 0)


def _hg_backscatter_fraction(g, mu0, n=400):
    """Fraction of single-scattered HG light going upward for a beam at cosine mu0 (plain quadrature)."""
    mu = (np.arange(n) + 0.5) / n  # upward directions, mu in (0, 1)
    phi = (np.arange(n) + 0.5) / n * 2 * np.pi
    m, p = np.meshgrid(mu, phi, indexing="ij")
    cos_theta = -mu0 * m + np.sqrt(1 - mu0**2) * np.sqrt(1 - m**2) * np.cos(p)
    phase = (1 - g * g) / (1 + g * g - 2 * g * cos_theta) ** 1.5 / (4 * np.pi)
    return float(phase.sum() * (1 / n) * (2 * np.pi / n))


@pytest.mark.parametrize("g", [0.0, 0.85])
def test_thin_layer_single_scattering_limit(g):
    tau, mu0 = 2e-3, 0.5
    out = solve_monte_carlo(layer_scene(tau, ssa=1.0, g=g), 60.0, photons=100000, seed=4)
    r = domain(out, "toa_upward_flux")
    # Single-scattering approximation for an optically thin layer over a black surface:
    # R = (tau / mu0) * (fraction of the phase function scattered upward)  (Liou 2002, ch. 6;
    # Chandrasekhar 1960), with corrections of order tau.
    expected = tau / mu0 * _hg_backscatter_fraction(g, mu0)
    se = float(out.toa_upward_flux_standard_error.mean()) / 4  # domain mean of 16 columns
    assert abs(r - expected) < 4 * se + 0.02 * expected


def test_semi_infinite_isotropic_albedo_matches_chandrasekhar():
    omega, mu0 = 0.9, 0.5
    out = solve_monte_carlo(layer_scene(60.0, ssa=omega, g=0.0), 60.0, photons=60000, seed=5,
                            independent_columns=True)
    # Plane albedo of a semi-infinite isotropically scattering atmosphere:
    # r(mu0) = 1 - H(mu0) sqrt(1 - omega)  (Chandrasekhar 1960, eq. IV.120 / V.49).
    expected = 1 - h_function(omega, mu0)[0] * math.sqrt(1 - omega)
    r = domain(out, "toa_upward_flux")
    se = float(out.toa_upward_flux_standard_error.mean()) / 4
    assert abs(r - expected) < 4 * se + 2e-3, (r, expected)


@pytest.mark.parametrize("tau, ssa, g, mu0", [(1.0, 1.0, 0.0, 0.5), (8.0, 1.0, 0.85, 0.866),
                                             (4.0, 0.9, 0.75, 0.6), (2.0, 0.99, 0.85, 1.0)])
def test_plane_parallel_layer_matches_doubling_and_delta_eddington(tau, ssa, g, mu0):
    out = solve_monte_carlo(layer_scene(tau, ssa=ssa, g=g), math.degrees(math.acos(mu0)), photons=80000,
                            seed=13, independent_columns=True)
    r = domain(out, "toa_upward_flux")
    t = domain(out, "surface_downward_direct_flux") + domain(out, "surface_downward_diffuse_flux")
    se = float(out.toa_upward_flux_standard_error.mean()) / 4
    # Exact plane-parallel albedo and transmittance by the doubling method (van de Hulst 1980;
    # Hansen 1971), over a black surface: Monte Carlo agrees within its noise plus the
    # doubling quadrature error.
    r_exact, t_exact = doubling(tau, ssa, g, mu0)
    assert abs(r - r_exact) < 4 * se + 3e-3
    assert abs(t - t_exact) < 4 * se + 3e-3
    # Delta-Eddington fluxes are within a few hundredths of exact ones for layers that are not
    # optically thin (Joseph, Wiscombe and Weinman 1976; King and Harshvardhan 1986; from memory).
    de = delta_eddington(np.array([tau]), np.array([ssa]), np.array([g]), mu0, 0.0)
    assert abs(r - float(de["toa_upward_flux"])) < 0.04
    assert abs(t - float(de["surface_downward_direct_flux"] + de["surface_downward_diffuse_flux"])) < 0.04


def test_homogeneous_scene_3d_equals_independent_column():
    scene = layer_scene(4.0, ssa=0.98, g=0.85, albedo=0.3, n=6)
    a = solve_monte_carlo(scene, 45.0, 60.0, photons=60000, seed=6)
    b = solve_monte_carlo(scene, 45.0, 60.0, photons=60000, seed=7, independent_columns=True)
    # Without horizontal structure 3D transport equals the independent column (common practice):
    # differences within 3 combined standard errors column by column, allowing the ~0.3 % of
    # columns a normal distribution puts beyond 3 sigma, and none beyond 5 sigma.
    for name in ("toa_upward_flux", "surface_downward_diffuse_flux", "atmosphere_absorption"):
        se = np.hypot(a[name + "_standard_error"].values, b[name + "_standard_error"].values)
        z = np.abs(a[name].values - b[name].values) / se
        assert np.mean(z > 3) <= 0.06 and z.max() < 5, (name, z.max())


def block_cloud_scene(n=24, base=800.0, depth=200.0, width=4, tau=30.0):
    nz = 10
    z_edge = np.linspace(0.0, 2000.0, nz + 1)
    ext = np.zeros((1, nz, n, n))
    zc = 0.5 * (z_edge[1:] + z_edge[:-1])
    layers = (zc > base) & (zc < base + depth)
    lo = n // 2 - width // 2
    ext[0][np.ix_(layers, range(lo, lo + width), range(lo, lo + width))] = tau / depth
    return make_scene(ext, 1.0, 0.85, z_edge, 100.0, 100.0, surface_albedo=0.1), (lo + width / 2) * 100.0


def _shadow_centroid(direct, axis_coords):
    deficit = 1.0 - direct
    return float((deficit * axis_coords).sum() / deficit.sum())


@pytest.mark.parametrize("azimuth", [0.0, 90.0, 180.0])
def test_block_cloud_shadow_is_displaced_along_the_beam(azimuth):
    scene, centre = block_cloud_scene()
    theta = 40.0
    out = solve_monte_carlo(scene, theta, azimuth, photons=2000, seed=8, rays_per_column=4)
    ica = solve_monte_carlo(scene, theta, azimuth, photons=2000, seed=8, independent_columns=True)
    x = scene.x.values
    direct = out.surface_downward_direct_flux.values
    # Geometry (common practice): a cloud layer between heights H and H + D casts its shadow
    # displaced by (H + D/2) tan(theta0) on average, along the direction the beam travels.
    shift = (800.0 + 100.0) * math.tan(math.radians(theta))
    if azimuth == 0.0:
        assert abs(_shadow_centroid(direct, x[None, :]) - (centre + shift)) < 20.0
    elif azimuth == 180.0:
        assert abs(_shadow_centroid(direct, x[None, :]) - (centre - shift)) < 20.0
    else:
        assert abs(_shadow_centroid(direct, x[:, None]) - (centre + shift)) < 20.0
    # The independent-column shadow lies right under the cloud.
    assert abs(_shadow_centroid(ica.surface_downward_direct_flux.values, x[None, :]) - centre) < 1.0


def test_same_seed_same_numbers_for_any_thread_count():
    import numba

    scene, _ = block_cloud_scene(n=12, width=3)
    kw = dict(photons=16000, seed=9, batch_size=1000)
    one = solve_monte_carlo(scene, 30.0, photons=kw["photons"], seed=9, batch_size=1000, threads=1)
    two = solve_monte_carlo(scene, 30.0, threads=min(2, numba.config.NUMBA_NUM_THREADS), **kw)
    for name in one.data_vars:
        if name != "run_wall_time":
            np.testing.assert_array_equal(one[name].values, two[name].values, err_msg=name)
    other = solve_monte_carlo(scene, 30.0, photons=16000, seed=10, batch_size=1000)
    assert not np.array_equal(one.toa_upward_flux.values, other.toa_upward_flux.values)


def test_per_band_fluxes_combine_to_broadband():
    scene = layer_scene(3.0, ssa=0.95, albedo=0.2, bands=2)
    scene["single_scattering_albedo"][1] = 0.8
    out = solve_monte_carlo(scene, 30.0, photons=20000, seed=11, per_band=True)
    for name in ("toa_upward_flux", "surface_downward_diffuse_flux", "atmosphere_absorption"):
        combined = (out[name + "_per_band"] * scene.solar_weight.values[:, None, None]).sum("band")
        np.testing.assert_allclose(combined.values, out[name].values, rtol=1e-10, atol=1e-14)
    # The absorbing band absorbs more (single-scattering albedo 0.8 vs 0.95).
    band = out.atmosphere_absorption_per_band.mean(("y", "x")).values
    assert band[1] > band[0]


def test_bad_input_is_refused():
    scene = layer_scene(1.0)
    with pytest.raises(ParameterError, match="photons"):
        solve_monte_carlo(scene, 30.0, photons=0)
    with pytest.raises(ParameterError, match="photons"):
        solve_monte_carlo(scene, 30.0, photons=-5)
    with pytest.raises(ParameterError, match="solar_zenith_angle"):
        solve_monte_carlo(scene, 90.0, photons=10)
    with pytest.raises(ParameterError, match="solar_zenith_angle"):
        solve_monte_carlo(scene, float("nan"), photons=10)
    bad = scene.copy(deep=True)
    bad["single_scattering_albedo"][0, 0, 0, 0] = 1.5
    with pytest.raises(ValidationError, match="single_scattering_albedo"):
        solve_monte_carlo(bad, 30.0, photons=10)


def test_broken_cumulus_3d_effect_changes_sign_with_solar_zenith():
    from surrogate3d.scenes import generate_scene

    scene = generate_scene("scattered_cumulus", 1, nx=32, ny=32)

    def delta_reflectance(zenith):
        full = solve_monte_carlo(scene, zenith, photons=60000, seed=1)
        ica = solve_monte_carlo(scene, zenith, photons=60000, seed=2, independent_columns=True)
        se = np.sqrt((full.toa_upward_flux_standard_error.values ** 2).sum()
                     + (ica.toa_upward_flux_standard_error.values ** 2).sum()) / full.toa_upward_flux.size
        return float(full.toa_upward_flux.mean() - ica.toa_upward_flux.mean()), float(se)

    # Broken cumulus reflect less in 3D than in the independent column approximation for a
    # high sun (light leaks out of cloud sides) and more for a low sun (sunlit cloud sides),
    # Barker et al. 2015 (J. Atmos. Sci. 72, 4073-4086); Hogan et al. 2016 (J. Geophys. Res. 121, 8583-8599).
    high, se_high = delta_reflectance(0.0)
    low, se_low = delta_reflectance(75.0)
    assert high < -3 * se_high
    assert low > 3 * se_low


def test_independent_column_shadow_under_cloud_and_3d_shadow_displaced():
    scene, centre = block_cloud_scene(n=24, base=600.0, depth=200.0)
    full = solve_monte_carlo(scene, 60.0, 0.0, photons=2000, seed=12)
    ica = solve_monte_carlo(scene, 60.0, 0.0, photons=2000, seed=12, independent_columns=True)
    x = scene.x.values
    lo = int(np.argmin(ica.surface_downward_direct_flux.values.mean(axis=0)))
    shifted = int(np.argmin(full.surface_downward_direct_flux.values.mean(axis=0)))
    # Independent-column shadow directly below the cloud; 3D shadow displaced downsun by about
    # (H + D/2) tan(theta0) = 700 m * tan(60 deg) = 1.2 km (geometry, common practice).
    assert abs(x[lo] - centre) <= 200.0
    shift = (x[shifted] - x[lo]) % (x.size * 100.0)  # periodic domain
    assert abs(shift - 700.0 * math.tan(math.radians(60.0))) <= 200.0


@pytest.mark.parametrize("batches", [32, 200])
def test_standard_errors_are_as_precise_as_their_batch_count_says(batches):
    # The sample variance of n normal batch means follows a chi-square law with n - 1
    # degrees of freedom, so a standard error is uncertain by about 1 / sqrt(2 (n - 1))
    # (from memory; any statistics text): two independent runs then differ by sqrt(2) of
    # that in ln(se).  Many photons per column and batch keep the batch means near normal.
    scene = layer_scene(4.0, ssa=0.99, g=0.85, albedo=0.2, n=8)
    se = [solve_monte_carlo(scene, 30.0, photons=batches * 1500, batches=batches, seed=seed)
          ["surface_downward_diffuse_flux_standard_error"].values.ravel() for seed in (3, 4)]
    measured = float(np.std(np.log(se[0] / se[1])) / math.sqrt(2.0))
    expected = 1.0 / math.sqrt(2.0 * (batches - 1))
    # 64 columns estimate the spread to about 1 / sqrt(128) = 9 %, relative.
    assert measured == pytest.approx(expected, rel=0.3)


def test_batches_and_batch_size_exclude_each_other_and_runs_record_their_batches():
    scene = layer_scene(1.0)
    out = solve_monte_carlo(scene, 30.0, photons=3000, batches=7, seed=1)
    assert int(out.run_batches) == 7 and int(out.run_photons) == 3003
    with pytest.raises(ParameterError, match="batch_size or batches"):
        solve_monte_carlo(scene, 30.0, photons=3000, batches=7, batch_size=100)
    with pytest.raises(ParameterError, match="batches must be an integer >= 2"):
        solve_monte_carlo(scene, 30.0, photons=3000, batches=1)
