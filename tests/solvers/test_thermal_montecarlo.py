"""The thermal Monte Carlo solver against outside references, the analog twin and itself.

Every check names its source.  Grids are tiny and photon counts small: the file, numba
compilation included, runs in well under a minute on two cores.
"""

import numba
import numpy as np
import pytest
from scipy.special import expn

from reference_solutions import gauss_01, homogeneous_layer
from surrogate3d.errors import ParameterError
from surrogate3d.scenes.longwave_optics import SpectralIntervals
from surrogate3d.scenes.planck import planck_band_radiance
from surrogate3d.solvers.heating import DRY_AIR_SPECIFIC_HEAT, SECONDS_PER_DAY, STANDARD_GRAVITY
from surrogate3d.solvers.longwave_two_stream import longwave_two_stream
from surrogate3d.solvers.thermal_montecarlo import COLUMN_RESULTS, MODES, solve_thermal_monte_carlo
from thermal_twin_tracer import twin_thermal

#: The 800-1250 cm-1 window as one interval.
WINDOW = SpectralIntervals(np.array([80000.0]), np.array([125000.0]), np.array([0]))
#: Three intervals in two bands: 400-630, 630-800 and 800-1250 cm-1.
THREE = SpectralIntervals(np.array([40000.0, 63000.0, 80000.0]), np.array([63000.0, 80000.0, 125000.0]),
                          np.array([0, 0, 1]))
#: The radiances of the kernel's temperature table, summed over intervals, agree with the
#: exact band integrals to 7e-7 relative (docs/methods/longwave.md): with a margin, the
#: floor of every comparison's error.
TABLE_ACCURACY = 1e-5


def pi_b(temperature, intervals=WINDOW):
    return float(np.pi * planck_band_radiance(temperature, intervals.wavenumber_low,
                                              intervals.wavenumber_high).sum())


def small_scene():
    """4 layers of 100 m cubes over 3 x 3 columns: an opaque interval (gas k dz up to 20),
    a moderate and a thin one; scattering cloud cells in two places; temperatures varying
    by cell; grey surfaces of different temperatures."""
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


@pytest.mark.parametrize("mode, top", [("full_3d", None), ("independent_column", 260.0)])
def test_kernel_matches_the_analog_twin(mode, top):
    # Two unbiased estimators of one expectation (common practice): the net-exchange
    # kernel and the plain analog tracer of tests/thermal_twin_tracer.py agree in every
    # column, every cell and the domain means within a few combined standard errors.
    scene = small_scene()
    twin_mean, twin_se, twin_domain_se = twin_thermal(*scene, independent_columns=mode == "independent_column",
                                                      top_temperature=top, photons=400_000, batches=20, seed=5)
    out = solve_thermal_monte_carlo(*scene, mode=mode, top_temperature=top, photons=200_000, seed=4)
    scores = []
    for name in ("surface_downward_flux", "surface_upward_flux", "toa_upward_flux", "atmosphere_net_absorption",
                 "cell_net_absorption"):
        combined = np.sqrt(out[name + "_se"] ** 2 + twin_se[name] ** 2 + (TABLE_ACCURACY * twin_mean[name]) ** 2)
        z = (out[name] - twin_mean[name]) / combined
        assert np.abs(z).max() < 4.5, (name, z)
        scores.append(z.ravel())
        if name in twin_domain_se:
            domain = (out[name + "_domain_mean"] - twin_mean[name].mean()) / np.hypot(
                out[name + "_domain_mean_se"], twin_domain_se[name])
            assert abs(domain) < 4.0, (name, domain)
            # The net exchange is the point: far less noise than counting photons.
            assert out[name + "_domain_mean_se"] < 0.5 * twin_domain_se[name], name
    scores = np.concatenate(scores)
    assert np.sqrt(np.mean(scores ** 2)) < 1.5


@pytest.mark.parametrize("mode", MODES)
@pytest.mark.parametrize("emissivity", [1.0, 0.6])
def test_isothermal_closed_system_has_no_net_flux(mode, emissivity):
    # Kirchhoff (1860): in an enclosure at one temperature, here the air, a grey surface and
    # a black body lighting the top, all at 275 K, every net flux vanishes, and the
    # fluxes are pi B in both directions, with or without scattering.  The net-exchange
    # tallies are exactly 0 (no noise).
    gas, intervals, ext, ssa, asym, t_air, _, _, z, dx, dy = small_scene()
    out = solve_thermal_monte_carlo(gas, intervals, ext, ssa, asym, np.full_like(t_air, 275.0), 275.0, emissivity,
                                    z, dx, dy, mode=mode, top_temperature=275.0, photons=20_000, seed=2)
    black = pi_b(275.0, intervals)
    for name in ("atmosphere_net_absorption", "surface_net_absorption", "cell_net_absorption"):
        assert np.all(out[name] == 0.0) and np.all(out[name + "_se"] == 0.0), name
    for name in ("surface_downward_flux", "surface_upward_flux", "toa_upward_flux"):
        np.testing.assert_allclose(out[name], black, rtol=TABLE_ACCURACY, err_msg=name)
        np.testing.assert_allclose(out[name + "_se"], 0.0, atol=1e-12 * black, err_msg=name)
    assert out["toa_downward_flux"] == pytest.approx(black, rel=TABLE_ACCURACY)


def slab(tau, ssa, g, mode, layers=4, columns=3, photons=100_000, seed=3):
    """An isothermal slab (280 K, 1 km) of optical depth tau in the window, cut into cells,
    over a black surface at 3 K, nothing from above: fluxes out of both faces over pi B."""
    z = np.linspace(0.0, 1000.0, layers + 1)
    shape = (1, layers, columns, columns)
    out = solve_thermal_monte_carlo(np.zeros((1, layers)), WINDOW, np.full(shape, tau / 1000.0), ssa, g,
                                    np.full(shape[1:], 280.0), 3.0, 1.0, z, 100.0, 100.0, mode=mode,
                                    photons=photons, seed=seed)
    black = pi_b(280.0)
    return [(out[name + "_domain_mean"] / black, out[name + "_domain_mean_se"] / black)
            for name in ("toa_upward_flux", "surface_downward_flux")]


@pytest.mark.parametrize("mode", MODES)
@pytest.mark.parametrize("tau", [0.1, 1.0, 3.0])
def test_nonscattering_slab_emits_one_minus_two_e3(mode, tau):
    # Flux emissivity of an isothermal non-scattering slab, 1 - 2 E3(tau), exact
    # (exponential-integral flux transmittance; Chandrasekhar 1960; Liou 2002), at both faces.
    exact = 1.0 - 2.0 * expn(3, tau)
    for value, se in slab(tau, 0.0, 0.0, mode):
        assert se < 0.01 * exact
        assert abs(value - exact) < 4.0 * se + TABLE_ACCURACY, (value, se, exact)


def diffuse_emissivity(tau, ssa, g, n=24):
    """1 - R - T of a slab for isotropic illumination, R and T by the doubling method
    (van de Hulst 1980; Hansen 1971) of tests/reference_solutions.py."""
    mu, w = gauss_01(n)
    c = 2.0 * mu * w
    refl, trans, _, _, _ = homogeneous_layer(tau, ssa, g, 0.5, mu, w)
    ones = np.ones(n)
    return 1.0 - c @ refl @ ones - c @ trans @ ones


@pytest.mark.parametrize("mode", MODES)
@pytest.mark.parametrize("tau, ssa, g", [(1.0, 0.5, 0.8), (5.0, 0.6, 0.9), (1.0, 0.9, 0.0)])
def test_scattering_slab_emissivity_is_one_minus_r_minus_t(mode, tau, ssa, g):
    # Kirchhoff's law: a slab's emissivity equals its absorptivity for isotropic
    # illumination, 1 - R - T, R and T from the doubling method (van de Hulst 1980); the
    # doubling on 24 Gauss points is good to about 1e-3 (common practice), the allowance.
    exact = diffuse_emissivity(tau, ssa, g)
    for value, se in slab(tau, ssa, g, mode, photons=150_000):
        assert abs(value - exact) < 4.0 * se + 2e-3, (value, se, exact)


@pytest.mark.parametrize("mode", MODES)
def test_energy_is_conserved_in_every_batch(mode):
    # Conservation of energy: what comes in at the top equals what leaves there plus what
    # the air and the surface absorb net, in every batch to round-off (every net exchange
    # is added to one side and taken from the other).
    out = solve_thermal_monte_carlo(*small_scene(), mode=mode, top_temperature=250.0, photons=20_000, seed=8)
    batches = {name: values.mean(axis=(1, 2)) for name, values in out["batches"].items()}
    residual = out["toa_downward_flux"] - batches["toa_upward_flux"] - batches["atmosphere_net_absorption"] \
        - batches["surface_net_absorption"]
    assert np.abs(residual).max() < 1e-12 * out["toa_upward_flux_domain_mean"]
    # The surface's fluxes and its net absorption are the same numbers.
    np.testing.assert_allclose(out["surface_downward_flux"] - out["surface_upward_flux"],
                               out["surface_net_absorption"], atol=1e-10)
    np.testing.assert_allclose(out["cell_net_absorption"].sum(axis=0), out["atmosphere_net_absorption"], atol=1e-9)


def test_independent_columns_agree_with_the_two_stream_within_its_measured_accuracy():
    # docs/methods/longwave.md measures the two-stream (diffusivity 1.66) against the exact
    # 1 - 2 E3 (Chandrasekhar 1960) and the doubling method (van de Hulst 1980): within
    # 3.8 % for non-scattering layers of optical depth 0.3-4 (below 0.43 % beyond), within
    # 5 % for cloud-like layers (omega 0.3-0.6, g 0.5-0.9, tau >= 0.5).  A column built of
    # such layers only (three intervals; a cloud in layer 2) must agree within 5 %.
    nz = 5
    z = np.linspace(0.0, 2500.0, nz + 1)
    dz = np.diff(z)
    t_layer = 288.0 - 6.5e-3 * 0.5 * (z[1:] + z[:-1])
    tau_gas = np.array([[3.5, 3.0, 2.5, 2.0, 1.5], [1.2, 1.0, 0.9, 0.7, 0.6], [0.45, 0.4, 0.35, 0.32, 0.3]])
    gas = tau_gas / dz
    cloud_tau = np.array([2.0, 2.5])
    ext = np.zeros((2, nz, 2, 2))
    ext[:, 2] = (cloud_tau / dz[2])[:, None, None]
    ssa, g = 0.5, 0.8
    out = solve_thermal_monte_carlo(gas, THREE, ext, ssa, g, np.broadcast_to(t_layer[:, None, None], (nz, 2, 2)),
                                    288.0, 1.0, z, 500.0, 500.0, mode="independent_column", photons=200_000, seed=6)
    cloud = np.zeros((3, nz))
    cloud[:, 2] = cloud_tau[THREE.band]
    tau = tau_gas + cloud
    omega = np.divide(ssa * cloud, tau)
    two_stream = longwave_two_stream(tau, omega, g, t_layer, 288.0, 1.0, THREE.wavenumber_low, THREE.wavenumber_high)
    for name in ("surface_downward_flux", "toa_upward_flux", "atmosphere_net_absorption"):
        mc, se = out[name + "_domain_mean"], out[name + "_domain_mean_se"]
        assert abs(two_stream[name].sum() - mc) < 0.05 * abs(mc) + 3.0 * se, name


def test_heating_rate_is_net_absorption_over_layer_mass():
    # dT/dt = g / c_p * net / dp (hydrostatic layer mass dp / g; Liou 2002).
    scene = small_scene()
    p_edge = np.array([101325.0, 100000.0, 98800.0, 97600.0, 96500.0])
    out = solve_thermal_monte_carlo(*scene, air_pressure_edges=p_edge, photons=5_000, seed=1)
    per_watt = STANDARD_GRAVITY / DRY_AIR_SPECIFIC_HEAT / -np.diff(p_edge) * SECONDS_PER_DAY
    np.testing.assert_allclose(out["heating_rate"], out["cell_net_absorption"] * per_watt[:, None, None], rtol=1e-14)
    np.testing.assert_allclose(out["heating_rate_se"], out["cell_net_absorption_se"] * per_watt[:, None, None],
                               rtol=1e-14)


@pytest.mark.skipif(numba.config.NUMBA_NUM_THREADS < 2, reason="needs two numba threads")
@pytest.mark.parametrize("mode", MODES)
def test_same_seed_same_numbers_for_one_and_two_threads(mode):
    # Reproducibility: every batch draws from its own stream and the batches are added in
    # order, so the thread count changes nothing, bit for bit.
    kw = dict(mode=mode, top_temperature=255.0, photons=24_000, batch_size=1_000, seed=11)
    one = solve_thermal_monte_carlo(*small_scene(), threads=1, **kw)
    two = solve_thermal_monte_carlo(*small_scene(), threads=2, **kw)
    for name in COLUMN_RESULTS:
        for suffix in ("", "_se", "_domain_mean", "_domain_mean_se"):
            assert np.array_equal(one[name + suffix], two[name + suffix]), name + suffix
    assert np.array_equal(one["cell_net_absorption"], two["cell_net_absorption"])
    assert np.array_equal(one["cell_net_absorption_se"], two["cell_net_absorption_se"])
    assert one["scattering_events"] == two["scattering_events"]


def _with(scene, position, index, value):
    scene = list(scene)
    array = np.array(scene[position], dtype=np.float64)
    array[index] = value
    scene[position] = array
    return scene


@pytest.mark.parametrize("position, index, value, name", [
    (5, (1, 0, 2), -1.0, "air_temperature"),
    (5, (0, 2, 2), 0.0, "air_temperature"),
    (0, (0, 1), np.nan, "gas_absorption"),
    (7, (2, 1), 1.5, "surface_emissivity"),
    (7, (0, 0), -0.1, "surface_emissivity"),
    (2, (1, 0, 0, 0), -0.01, "cloud_extinction"),
    (6, (1, 1), np.nan, "surface_temperature"),
    (3, (0, 3, 1, 1), 1.2, "cloud_single_scattering_albedo"),
])
def test_bad_input_is_refused_in_one_line_naming_variable_and_index(position, index, value, name):
    with pytest.raises(ParameterError) as error:
        solve_thermal_monte_carlo(*_with(small_scene(), position, index, value), photons=100)
    message = str(error.value)
    assert message.startswith(name + " must be") and f"(at index {index}" in message and "\n" not in message


def test_bad_options_are_refused():
    scene = small_scene()
    for kw, name in ((dict(mode="3d"), "mode"), (dict(top_temperature=-5.0), "top_temperature"),
                     (dict(photons=0), "photons"), (dict(roulette_weight=0.0), "roulette_weight")):
        with pytest.raises(ParameterError, match=f"^{name} must be"):
            solve_thermal_monte_carlo(*scene, **kw)
    with pytest.raises(ParameterError, match="^z_edge must be strictly rising; got 100.0 .at index 2"):
        solve_thermal_monte_carlo(*scene[:8], np.array([0.0, 100.0, 100.0, 300.0, 400.0]), 100.0, 100.0)
