"""Per-layer absorption of the Monte Carlo solver (heating-rate profiles) against 1D references.

Every scene is horizontally homogeneous, so 3D transport and independent columns must both
give the plane-parallel answer layer by layer.
"""

import math

import numpy as np
import pytest
from scipy.special import expn

from surrogate3d.scenes import make_scene
from surrogate3d.solvers import solve_monte_carlo

from reference_solutions import adding, doubling

#: Runs with different seeds per case.  Per-layer errors come from the spread between these
#: runs: the result has no per-cell standard error, and in 3D one photon absorbs in several
#: columns, so the spread between the columns of one run would understate the error.
SEEDS = 24
#: Smallest per-layer tolerance, for layers whose absorption is (nearly) free of noise.  The
#: adding reference changes by a few 1e-7 with the number of Gauss points (24 to 64) and
#: with the optical depth its doubling starts from, and the solver's single-precision optics
#: change absorption by about 1e-7 relative: 1e-5 covers both with room to spare.
FLOOR = 1e-5

# Non-scattering layers with extinction varying with height; the clear gap must absorb nothing.
CLEAR_TAU = np.array([0.4, 0.0, 0.15, 0.6, 0.05])
CLEAR_EDGES = np.array([0.0, 300.0, 800.0, 1500.0, 2500.0, 4000.0])
# A cloud layer between absorbing aerosol and gas layers (index 0 at the surface).
CLOUDY = dict(tau=np.array([0.3, 0.2, 8.0, 0.4, 0.1]), ssa=np.array([0.6, 0.9, 0.99, 0.8, 0.5]),
              g=np.array([0.0, 0.7, 0.85, 0.7, 0.0]))
CLOUDY_EDGES = np.array([0.0, 500.0, 1000.0, 1500.0, 3000.0, 6000.0])


def stratified_scene(tau, ssa, g, z_edge, albedo, n=4, **extra):
    """Horizontally homogeneous scene whose layer k has optical depth tau[k] (index 0 at the surface)."""
    def fill(values):
        column = np.broadcast_to(np.asarray(values, dtype=float), (len(tau),))
        return np.broadcast_to(column[None, :, None, None], (1, len(tau), n, n))

    return make_scene(fill(np.asarray(tau) / np.diff(z_edge)), fill(ssa), fill(g), z_edge, 250.0, 250.0,
                      surface_albedo=albedo, **extra)


def seed_mean_layers(scene, zenith, independent, photons, first_seed):
    """Horizontal-mean absorption of every layer, averaged over :data:`SEEDS` runs, and its
    standard error (the spread between the runs over sqrt(SEEDS))."""
    runs = np.array([solve_monte_carlo(scene, zenith, 30.0, photons=photons, seed=first_seed + s,
                                       independent_columns=independent, threads=1).absorption.mean(("y", "x")).values
                     for s in range(SEEDS)])
    return runs.mean(axis=0), runs.std(axis=0, ddof=1) / math.sqrt(SEEDS)


def assert_layers_agree(comparisons, allowed):
    """Every layer within max(3 sigma, FLOOR) of its reference, but for at most ``allowed``
    comparisons, and none beyond max(5 sigma, FLOOR).

    ``comparisons`` holds (label, mean, standard error, reference) of whole profiles.  With
    sigma from the spread of SEEDS = 24 runs, the error over sigma follows Student's t with
    23 degrees of freedom (Student 1908, Biometrika 6, 1-25): 0.6 % of the comparisons lie
    beyond 3 sigma by chance and 5e-5 beyond 5 sigma (scipy.stats.t), so a strict 3-sigma rule over tens of
    comparisons would fail often by chance alone.  ``allowed`` is chosen below so that chance
    alone fails a test about once in 400 runs or less (binomial tail; the same kind of rule as
    test_montecarlo's 3D-versus-independent-column check; common practice).
    """
    outside, worst = [], 0.0
    for label, mean, se, reference in comparisons:
        excess = np.abs(mean - reference) / np.maximum(se, FLOOR / 3.0)
        outside += [(label, k, mean[k], reference[k], se[k]) for k in np.flatnonzero(excess > 3.0)]
        worst = max(worst, float(excess.max()))
    assert len(outside) <= allowed and worst < 5.0, (outside, worst)


def optical_depth_above(tau):
    """Optical depth from the top of the atmosphere to the top of every layer (index 0 at the surface)."""
    return np.cumsum(tau[::-1])[::-1] - tau


def test_adding_reference_splits_layers_and_conserves_energy():
    tau, ssa, g, mu0 = 6.0, 0.95, 0.85, 0.7
    absorbed, r, surface = adding([2.0, 3.0, 1.0], [ssa] * 3, [g] * 3, mu0, 0.0)
    r_exact, t_exact = doubling(tau, ssa, g, mu0)
    # Adding sublayers reproduces the doubling of the whole layer (van de Hulst 1980): over a
    # black surface the surface absorbs the total transmittance.  Both start from thinner
    # layers of different optical depth, which leaves differences near 1e-7.
    assert abs(r - r_exact) < 1e-6 and abs(surface - t_exact) < 1e-6
    # Conservation of energy: R + sum of layer absorption + surface absorption = 1.
    absorbed, r, surface = adding(CLOUDY["tau"], CLOUDY["ssa"], CLOUDY["g"], mu0, 0.3)
    assert abs(r + absorbed.sum() + surface - 1.0) < 1e-12
    assert np.all(absorbed > 0)


@pytest.mark.parametrize("independent", [False, True])
def test_non_scattering_layers_absorb_the_direct_beam_by_beer_lambert(independent):
    mu0 = 0.5
    scene = stratified_scene(CLEAR_TAU, 0.0, 0.0, CLEAR_EDGES, 0.0)
    out = solve_monte_carlo(scene, 60.0, 30.0, photons=1000, seed=1, independent_columns=independent, threads=1)
    # Beer-Lambert law over a black surface: a non-scattering layer absorbs
    # exp(-tau_above / mu0) - exp(-tau_below / mu0), in every cell, to round-off (the solver
    # traces single-precision optics; nothing is left to scatter, so there is no noise).
    above = optical_depth_above(CLEAR_TAU)
    expected = np.exp(-above / mu0) - np.exp(-(above + CLEAR_TAU) / mu0)
    np.testing.assert_allclose(out.absorption.values, np.broadcast_to(expected[:, None, None], (5, 4, 4)),
                               rtol=1e-6, atol=1e-15)


@pytest.mark.parametrize("independent", [False, True])
def test_non_scattering_layers_absorb_the_surface_reflection_by_e3(independent):
    albedo = 0.4
    scene = stratified_scene(CLEAR_TAU, 0.0, 0.0, CLEAR_EDGES, albedo)
    comparisons = []
    for zenith in (30.0, 60.0):
        mu0 = math.cos(math.radians(zenith))
        mean, se = seed_mean_layers(scene, zenith, independent, 4000, first_seed=100 * int(zenith) + 50 * independent)
        # Beer-Lambert law for the direct beam, and for the isotropic light a Lambertian
        # surface reflects the flux transmittance 2 E3(h) of a non-scattering layer of
        # optical depth h (Chandrasekhar 1960, Radiative Transfer; Liou 2002): the
        # light reflected from the surface, albedo exp(-tau* / mu0), is absorbed in a layer
        # by the drop of 2 E3 across it, with h counted up from the surface.
        above = optical_depth_above(CLEAR_TAU)
        beam = np.exp(-above / mu0) - np.exp(-(above + CLEAR_TAU) / mu0)
        from_surface = np.concatenate([[0.0], np.cumsum(CLEAR_TAU)])
        reflected = albedo * math.exp(-CLEAR_TAU.sum() / mu0) * -np.diff(2.0 * expn(3, from_surface))
        assert reflected.sum() > 50 * se.max()  # the check sees the reflected light
        comparisons.append((zenith, mean, se, beam + reflected))
    # 10 comparisons, 8 of them noisy (the clear gap absorbs nothing): one may lie beyond 3 sigma.
    assert_layers_agree(comparisons, allowed=1)


@pytest.mark.parametrize("independent", [False, True])
def test_scattering_layers_match_the_adding_method(independent):
    comparisons = []
    for i, (zenith, albedo) in enumerate([(z, a) for z in (0.0, 50.0, 75.0) for a in (0.0, 0.3)]):
        scene = stratified_scene(CLOUDY["tau"], CLOUDY["ssa"], CLOUDY["g"], CLOUDY_EDGES, albedo)
        # Every case has its own seeds, so that its errors are independent of the others'.
        mean, se = seed_mean_layers(scene, zenith, independent, 15000, first_seed=1000 + 100 * i + 50 * independent)
        # Per-layer absorption of a plane-parallel atmosphere over a Lambertian surface by the
        # adding method (Hansen and Travis 1974; van de Hulst 1980).
        reference, _, _ = adding(CLOUDY["tau"], CLOUDY["ssa"], CLOUDY["g"], math.cos(math.radians(zenith)), albedo)
        comparisons.append(((zenith, albedo), mean, se, reference))
    # 30 comparisons: two may lie beyond 3 sigma.
    assert_layers_agree(comparisons, allowed=2)


@pytest.mark.parametrize("independent", [False, True])
def test_layer_absorption_sums_to_the_column_absorption(independent):
    scene = stratified_scene(CLOUDY["tau"], CLOUDY["ssa"], CLOUDY["g"], CLOUDY_EDGES, 0.3)
    out = solve_monte_carlo(scene, 40.0, 30.0, photons=4000, seed=3, independent_columns=independent, threads=1)
    # Bookkeeping (common practice): every deposit goes to one cell and to its column's
    # total, so the layers of a column add up to its atmospheric absorption to round-off.
    np.testing.assert_allclose(out.absorption.sum("z").values, out.atmosphere_absorption.values,
                               rtol=1e-12, atol=1e-15)


def test_monte_carlo_heating_rate_of_a_non_scattering_layer_by_hand():
    pressure = np.array([100000.0, 96000.0, 90000.0, 82000.0, 72000.0, 60000.0])
    scene = stratified_scene(CLEAR_TAU, 0.0, 0.0, CLEAR_EDGES, 0.0, air_pressure=pressure)
    out = solve_monte_carlo(scene, 60.0, 30.0, photons=1000, seed=2, threads=1, solar_constant=1361.0)
    # dT/dt = g / c_p * F_abs / dp (textbook form, Liou 2002), by hand, with g = 9.80665
    # m s-2 (standard gravity, CGPM 1901), c_p = 1004.64 J kg-1 K-1 (dry air; textbooks give
    # 1004-1005, from memory) and S0 cos(60 deg) = 680.5 W m-2 (S0 = 1361 W m-2, Kopp and
    # Lean 2011).  The 100 hPa-thick layer from 82 to 72 kPa (index 3, optical depth 0.6
    # under 0.05) absorbs the Beer-Lambert fraction
    # exp(-0.1) - exp(-1.3) = 0.632306: 9.80665 / 1004.64 * 0.632306 * 680.5 / 10000 * 86400
    # = 36.2893 K day-1.  The 40 hPa-thick layer at the surface (index 0, optical depth 0.4
    # under 0.8) absorbs exp(-1.6) - exp(-2.4) = 0.111179: 15.9519 K day-1.
    np.testing.assert_allclose(out.heating_rate.values[3], 36.2893, rtol=2e-6)
    np.testing.assert_allclose(out.heating_rate.values[0], 15.9519, rtol=2e-6)
    # The clear gap (index 1) neither absorbs nor heats.
    assert np.all(out.heating_rate.values[1] == 0.0)
