"""The backward longwave flux estimator against outside references, the forward solver, its plain twin and itself.

Every physics check names its source.  Grids are tiny and ray counts small: the file,
numba compilation included, runs in well under a minute on two cores.
"""

import numba
import numpy as np
import pytest
from scipy.special import expn

from reference_solutions import gauss_01, homogeneous_layer
from surrogate3d.errors import ParameterError
from surrogate3d.scenes.generator import generate_scene
from surrogate3d.scenes.longwave_fields import longwave_fields
from surrogate3d.scenes.longwave_optics import SpectralIntervals
from surrogate3d.scenes.planck import planck_band_radiance
from surrogate3d.solvers import _thermal_backward_kernel as kernel
from surrogate3d.solvers.thermal_backward import backward_longwave_fluxes, kernel_inputs, spectral_proposal
from surrogate3d.solvers.thermal_montecarlo import MODES, checked_scene, planck_table, solve_thermal_monte_carlo
from thermal_backward_twin import twin_batch

NAMES = ("surface_downward_flux", "toa_upward_flux")
#: The 800-1250 cm-1 window as one interval.
WINDOW = SpectralIntervals(np.array([80000.0]), np.array([125000.0]), np.array([0]))
#: Three intervals in two bands: 400-630, 630-800 and 800-1250 cm-1.
THREE = SpectralIntervals(np.array([40000.0, 63000.0, 80000.0]), np.array([63000.0, 80000.0, 125000.0]),
                          np.array([0, 0, 1]))
#: The temperature table's radiances agree with the exact band integrals to 7e-7 relative
#: on their sum, 4.3e-5 per 10 cm-1 interval (docs/methods/longwave.md): with a margin, the
#: floor of every comparison with exact Planck integrals.
TABLE_ACCURACY = 1e-4


def pi_b(temperature, intervals=WINDOW):
    """pi B per interval (ninterval,) + shape of ``temperature``, exact band integrals."""
    t = np.asarray(temperature, dtype=np.float64)
    low = intervals.wavenumber_low.reshape((-1,) + (1,) * t.ndim)
    high = intervals.wavenumber_high.reshape((-1,) + (1,) * t.ndim)
    return np.pi * planck_band_radiance(t[None], low, high)


def small_scene():
    """4 layers of 100 m cubes over 3 x 3 columns: an opaque interval (gas k dz up to 20), a
    moderate and a thin one; scattering cloud cells in two places; temperatures varying by
    cell; grey surfaces of different temperatures."""
    rng = np.random.default_rng(3)
    nz, ny, nx = 4, 3, 3
    gas = np.array([[0.2, 0.15, 0.1, 0.05], [2e-3, 2e-3, 1e-3, 1e-3], [1e-4, 1e-4, 1e-4, 5e-5]])
    ext = np.zeros((2, nz, ny, nx))
    ext[:, 1, 1, :2] = [[0.05], [0.04]]
    ext[:, 1:3, 0, 2] = [[0.03], [0.03]]
    ssa = np.full((2, nz, ny, nx), 0.5)
    ssa[1] = 0.7
    asym = np.full((2, nz, ny, nx), 0.8)
    t_air = 285.0 - 6.5e-3 * (100.0 * np.arange(nz)[:, None, None] + 50.0) + rng.uniform(-3, 3, (nz, ny, nx))
    t_sfc = 290.0 + rng.uniform(-4, 4, (ny, nx))
    eps = np.array([[1.0, 0.9, 0.7], [1.0, 1.0, 0.95], [0.8, 1.0, 1.0]])
    return gas, THREE, ext, ssa, asym, t_air, t_sfc, eps, np.linspace(0.0, 400.0, nz + 1), 100.0, 100.0


@pytest.mark.parametrize("mode", MODES)
def test_isothermal_black_atmosphere_over_black_surface_is_exact(mode):
    # An isothermal opaque atmosphere over a black surface at its temperature (Kirchhoff
    # 1860): pi B(T) summed over the intervals, down at the surface and up at the top,
    # exactly (the rays' radiance is formed relative to their start cell's: no noise).
    nz, t = 3, 270.0
    out = backward_longwave_fluxes(np.full((3, nz), 0.5), THREE, 0.0, 0.0, 0.0, np.full((nz, 2, 2), t), t, 1.0,
                                   np.linspace(0.0, 300.0, nz + 1), 100.0, 100.0, mode=mode, rays_per_column=16,
                                   batches=4, seed=1)
    black = pi_b(t, THREE).sum()
    for name in NAMES:
        np.testing.assert_allclose(out[name], black, rtol=TABLE_ACCURACY, err_msg=name)
        assert out[name + "_se"].max() < 1e-12 * black, name


@pytest.mark.parametrize("mode", MODES)
def test_isothermal_enclosure_with_scattering_clouds_is_exact(mode):
    # Kirchhoff (1860): inside an enclosure at one temperature (air, scattering clouds, a
    # grey surface, a black lid lighting the top, all at 275 K) the radiance is B
    # everywhere, so both fluxes are pi B, whatever the optics; here with no noise.
    gas, intervals, ext, ssa, asym, t_air, _, eps, z, dx, dy = small_scene()
    out = backward_longwave_fluxes(gas, intervals, ext, ssa, asym, np.full_like(t_air, 275.0), 275.0, eps, z, dx, dy,
                                   mode=mode, top_temperature=275.0, rays_per_column=32, batches=4, seed=2)
    black = pi_b(275.0, intervals).sum()
    for name in NAMES:
        np.testing.assert_allclose(out[name], black, rtol=TABLE_ACCURACY, err_msg=name)
        assert out[name + "_se"].max() < 1e-12 * black, name
    assert out["toa_downward_flux"] == pytest.approx(black, rel=TABLE_ACCURACY)
    assert out["scattering_events"] > 0


def grey_slab_fluxes_per_interval(tau, t_air, t_surface, intervals):
    """Exact fluxes per interval of an isothermal non-scattering slab of optical depth ``tau``
    (per interval) over a black surface, nothing from above: surface down ``pi B_a (1 - 2
    E3(tau))``, TOA up ``pi B_s 2 E3(tau) + pi B_a (1 - 2 E3(tau))`` (Chandrasekhar 1960;
    Liou 2002, the exponential-integral flux transmittance)."""
    tau = np.asarray(tau, dtype=np.float64)
    transmitted = 2.0 * expn(3, tau)
    b_air, b_sfc = pi_b(t_air, intervals), pi_b(t_surface, intervals)
    shape = (-1,) + (1,) * (b_air.ndim - 1)
    transmitted = transmitted.reshape(shape) if transmitted.ndim == 1 else transmitted
    return b_air * (1.0 - transmitted), b_sfc * transmitted + b_air * (1.0 - transmitted)


def grey_slab_fluxes(tau, t_air, t_surface, intervals):
    """:func:`grey_slab_fluxes_per_interval` summed over the intervals."""
    down, up = grey_slab_fluxes_per_interval(tau, t_air, t_surface, intervals)
    return down.sum(axis=0), up.sum(axis=0)


@pytest.mark.parametrize("mode", MODES)
@pytest.mark.parametrize("tau", [[0.1, 1.0, 3.0], [2.0, 0.3, 0.05]])
def test_nonscattering_grey_slab_matches_exponential_integrals(mode, tau):
    # Plane-parallel isothermal grey slab (Chandrasekhar 1960; Liou 2002), cut into 100 m
    # cubes; three intervals of different optical depths check the spectral weights.
    nz = 4
    z = np.linspace(0.0, 1000.0, nz + 1)
    gas = np.repeat(np.asarray(tau)[:, None] / 1000.0, nz, axis=1)
    out = backward_longwave_fluxes(gas, THREE, 0.0, 0.0, 0.0, np.full((nz, 3, 3), 280.0), 300.0, 1.0, z, 100.0,
                                   100.0, mode=mode, rays_per_column=256, batches=16, seed=3)
    down, up = grey_slab_fluxes(tau, 280.0, 300.0, THREE)
    for name, exact in zip(NAMES, (down, up)):
        value, se = out[name + "_domain_mean"], out[name + "_domain_mean_se"]
        assert se < 0.01 * exact, (name, se)
        assert abs(value - exact) < 4.0 * se + TABLE_ACCURACY * exact, (name, value, se, exact)
        # Per column 4.5 as for the forward solver: 16 batches give Student-t tails.
        z_columns = (out[name] - exact) / np.hypot(out[name + "_se"], TABLE_ACCURACY * exact)
        assert np.abs(z_columns).max() < 4.5, (name, z_columns)


def test_independent_columns_each_match_their_own_plane_parallel_slab():
    # Independent columns: every column is its own plane-parallel isothermal slab (absorbing
    # cloud of its own optical depth, air and surface temperatures of its own), so each
    # column's fluxes are the exponential-integral ones of that slab (Chandrasekhar 1960).
    nz, ny, nx = 3, 2, 3
    z = np.linspace(0.0, 600.0, nz + 1)
    tau = np.array([[0.05, 0.4, 1.0], [2.0, 4.0, 0.2]])                       # (ny, nx), both bands
    t_air = np.array([[250.0, 265.0, 280.0], [290.0, 275.0, 260.0]])
    t_sfc = np.array([[300.0, 285.0, 270.0], [295.0, 310.0, 280.0]])
    ext = np.broadcast_to(tau / 600.0, (2, nz, ny, nx))
    gas = np.zeros((3, nz))
    out = backward_longwave_fluxes(gas, THREE, ext, 0.0, 0.0, np.broadcast_to(t_air, (nz, ny, nx)), t_sfc, 1.0, z,
                                   100.0, 100.0, mode="independent_column", rays_per_column=512, batches=16, seed=4)
    down, up = grey_slab_fluxes(np.broadcast_to(tau, (3, ny, nx)), t_air, t_sfc, THREE)
    for name, exact in zip(NAMES, (down, up)):
        combined = np.hypot(out[name + "_se"], TABLE_ACCURACY * exact)
        assert np.all(out[name + "_se"] < 0.03 * exact), name
        assert np.abs((out[name] - exact) / combined).max() < 4.5, (name, out[name], exact)


def test_spectral_proposal_follows_the_clear_column_fluxes():
    # Without its Planck share, the proposal of an isothermal non-scattering slab over a
    # black surface is every interval's share of the exact fluxes, pi B_a (1 - 2 E3(tau))
    # down and pi B_s 2 E3(tau) + pi B_a (1 - 2 E3(tau)) up (Chandrasekhar 1960); 8 Gauss
    # points in the cosine give the shares to 1e-5 (measured), 1e-4 allowed.
    tau = np.array([0.05, 0.5, 3.0])
    table = planck_table(THREE.wavenumber_low, THREE.wavenumber_high, 270.0, 300.0)
    cdf = spectral_proposal(np.repeat(tau[:, None] / 2.0, 2, axis=1), np.zeros((2, 2)), THREE.band,
                            np.array([270.0, 270.0]), 300.0, 1.0, 0.0, np.array([0.0, 1.0, 2.0]), table,
                            planck_share=1e-12)
    for row, exact in zip(cdf, grey_slab_fluxes_per_interval(tau, 270.0, 300.0, THREE)):
        np.testing.assert_allclose(np.diff(row, prepend=0.0), exact / exact.sum(), rtol=1e-4)


def diffuse_emissivity(tau, ssa, g, n=24):
    """1 - R - T of a slab for isotropic illumination, R and T by the doubling method
    (van de Hulst 1980; Hansen 1971) of tests/reference_solutions.py."""
    mu, w = gauss_01(n)
    c = 2.0 * mu * w
    refl, trans, _, _, _ = homogeneous_layer(tau, ssa, g, 0.5, mu, w)
    ones = np.ones(n)
    return 1.0 - c @ refl @ ones - c @ trans @ ones


@pytest.mark.parametrize("mode", MODES)
@pytest.mark.parametrize("tau, ssa, g", [(1.0, 0.5, 0.8), (5.0, 0.9, 0.0)])
def test_scattering_slab_emission_is_one_minus_r_minus_t(mode, tau, ssa, g):
    # Kirchhoff's law: an isothermal scattering slab emits pi B (1 - R - T) from each face
    # (over a black surface at 3 K, nothing from above), R and T for isotropic illumination
    # by the doubling method (van de Hulst 1980), good to about 1e-3 on 24 Gauss points
    # (common practice), the allowance.
    nz = 4
    z = np.linspace(0.0, 1000.0, nz + 1)
    out = backward_longwave_fluxes(np.zeros((1, nz)), WINDOW, tau / 1000.0, ssa, g, np.full((nz, 3, 3), 280.0), 3.0,
                                   1.0, z, 100.0, 100.0, mode=mode, rays_per_column=256, batches=16, seed=5)
    exact = diffuse_emissivity(tau, ssa, g) * pi_b(280.0).sum()
    for name in NAMES:
        value, se = out[name + "_domain_mean"], out[name + "_domain_mean_se"]
        assert abs(value - exact) < 4.0 * se + 2e-3 * exact, (name, value, se, exact)


@pytest.mark.parametrize("mode", MODES)
def test_agrees_with_the_forward_estimator_on_a_cloudy_scene(mode):
    # Two unbiased estimators of one expectation (common practice): the forward net-exchange
    # solver and the backward rays agree on a generated cumulus scene (12 x 12 x 6 cells,
    # 299 intervals, scattering clouds) in the domain means and in every column, within
    # their combined standard errors.
    fields = longwave_fields(generate_scene("scattered_cumulus", 0, nx=12, ny=12, nz=6))
    scene = (fields.gas_absorption, fields.intervals, fields.cloud_extinction, fields.cloud_single_scattering_albedo,
             fields.cloud_asymmetry_parameter, fields.air_temperature, fields.surface_temperature,
             fields.surface_longwave_emissivity, fields.z_edge, fields.dx, fields.dy)
    forward = solve_thermal_monte_carlo(*scene, mode=mode, photons=2_000_000, seed=1)
    backward = backward_longwave_fluxes(*scene, mode=mode, rays_per_column=512, seed=2)
    scores = []
    for name in NAMES:
        domain = (backward[name + "_domain_mean"] - forward[name + "_domain_mean"]) / np.hypot(
            backward[name + "_domain_mean_se"], forward[name + "_domain_mean_se"])
        assert abs(domain) < 4.0, (name, domain)
        z = (backward[name] - forward[name]) / np.hypot(backward[name + "_se"], forward[name + "_se"])
        assert np.abs(z).max() < 5.0, (name, z)
        scores.append(z.ravel())
        # The point of the backward estimate: less noise per column than the forward's.
        assert np.median(backward[name + "_se"]) < np.median(forward[name + "_se"]), name
    rms = np.sqrt(np.mean(np.concatenate(scores) ** 2))
    assert 0.6 < rms < 1.5, rms


@pytest.mark.parametrize("mode, top, max_events", [("full_3d", None, 100_000), ("independent_column", 250.0, 100_000),
                                                   ("full_3d", 260.0, 2)])
def test_kernel_matches_its_plain_twin(mode, top, max_events):
    # The numba kernel and the plain-Python twin (tests/thermal_backward_twin.py) draw the
    # same random numbers and must give the same numbers, batch by batch, to round-off;
    # the third case caps the scattering events, so rays end in the clouds.
    scene = checked_scene(*small_scene(), mode, top)
    medium, boundaries, planck, cdf = kernel_inputs(scene)
    out = backward_longwave_fluxes(*small_scene(), mode=mode, top_temperature=top, rays_per_column=6, batches=2,
                                   seed=9, max_scattering_events=max_events)
    run = kernel.BackwardRun(mode == "full_3d", 9, 3, 0.1, max_events)
    events = 0
    for batch in range(2):
        values, k = twin_batch(batch, run, medium, boundaries, planck, cdf)
        events += k
        for flux, name in enumerate(NAMES):
            np.testing.assert_allclose(out["batches"][name][batch], values[flux], rtol=1e-10, err_msg=name)
    assert out["scattering_events"] == events > 0


@pytest.mark.skipif(numba.config.NUMBA_NUM_THREADS < 2, reason="needs two numba threads")
@pytest.mark.parametrize("mode", MODES)
def test_same_seed_same_numbers_for_one_and_two_threads(mode):
    # Reproducibility: every batch draws from its own stream into its own slot.
    kw = dict(mode=mode, top_temperature=255.0, rays_per_column=64, batches=8, seed=11)
    one = backward_longwave_fluxes(*small_scene(), threads=1, **kw)
    two = backward_longwave_fluxes(*small_scene(), threads=2, **kw)
    for name in NAMES:
        for suffix in ("", "_se", "_domain_mean", "_domain_mean_se"):
            assert np.array_equal(one[name + suffix], two[name + suffix]), name + suffix
    assert one["scattering_events"] == two["scattering_events"]


def _with(scene, position, index, value):
    scene = list(scene)
    array = np.array(scene[position], dtype=np.float64)
    array[index] = value
    scene[position] = array
    return scene


@pytest.mark.parametrize("position, index, value", [
    (5, (1, 0, 2), -1.0),
    (5, (0, 2, 2), 0.0),
    (0, (0, 1), np.nan),
    (7, (2, 1), 1.5),
    (7, (0, 0), -0.1),
    (2, (1, 0, 0, 0), -0.01),
    (6, (1, 1), np.nan),
    (3, (0, 3, 1, 1), 1.2),
    (4, (1, 2, 0, 0), 1.0),
])
def test_bad_input_is_refused_with_the_forward_solvers_one_line_error(position, index, value):
    bad = _with(small_scene(), position, index, value)
    with pytest.raises(ParameterError) as forward:
        solve_thermal_monte_carlo(*bad, photons=100)
    with pytest.raises(ParameterError) as backward:
        backward_longwave_fluxes(*bad, rays_per_column=2, batches=2)
    message = str(backward.value)
    assert message == str(forward.value)
    assert f"(at index {index}" in message and "\n" not in message


def test_bad_options_are_refused():
    scene = small_scene()
    for kw, name in ((dict(mode="3d"), "mode"), (dict(top_temperature=-5.0), "top_temperature"),
                     (dict(rays_per_column=0), "rays_per_column"), (dict(batches=1), "batches"),
                     (dict(roulette_weight=0.0), "roulette_weight"), (dict(seed=-1), "seed")):
        with pytest.raises(ParameterError, match=f"^{name} must be"):
            backward_longwave_fluxes(*scene, **kw)
    with pytest.raises(ParameterError, match="^z_edge must be strictly rising; got 100.0 .at index 2"):
        backward_longwave_fluxes(*scene[:8], np.array([0.0, 100.0, 100.0, 300.0, 400.0]), 100.0, 100.0)
