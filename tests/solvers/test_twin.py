"""The production Monte Carlo kernel against its plain analog twin (``tests/twin_tracer.py``).

Two estimators of the same expectation: for every column and every flux the difference
must be consistent with the two standard errors, and so must the domain means.  The twin
shares no direct beam, source tables, majorant blocks, clear-air shortcuts, weights or
roulette with the production kernel, so a bias in any of them shows here.
"""

import math

import numpy as np
import pytest

from surrogate3d.scenes import make_scene
from surrogate3d.solvers.montecarlo import solve_monte_carlo

from twin_tracer import TALLIES, twin_fluxes


def cloudy_scene():
    """Two clouds of different shape and opacity in an absorbing clear sky over a patchy
    surface, with two bands of different absorption (8 x 8 columns, 6 layers)."""
    nz, ny, nx = 6, 8, 8
    ext = np.full((2, nz, ny, nx), 2e-5)
    ext[:, 2:5, 1:4, 1:5] = 0.02   # a broad cloud, optical depth 6 through its 300 m
    ext[:, 1:6, 5:7, 5:7] = 0.008  # a tower, 4 through its 500 m
    ssa = np.where(ext > 1e-3, [[[[0.97]]], [[[0.9]]]], [[[[1.0]]], [[[0.8]]]])
    asym = np.where(ext > 1e-3, 0.8, 0.0)
    alb = np.broadcast_to(np.linspace(0.1, 0.6, nx)[None, None, :], (2, ny, nx)).copy()
    alb[1] *= 0.8
    return make_scene(ext, ssa, asym, np.linspace(0.0, 1200.0, nz + 1), 100.0, 100.0, surface_albedo=alb,
                      solar_weight=[0.6, 0.4])


CASES = [  # (independent columns, majorant block, clear cube, zenith, beam azimuth)
    (False, 1, 0, 0.0, 0.0),
    (False, 1, 8, 30.0, 135.0),
    (False, 2, 2, 60.0, 250.0),
    (False, 4, 4, 80.0, 320.0),
    (True, 1, 8, 45.0, 10.0),
    (True, 1, 8, 75.0, 190.0),
]


@pytest.mark.parametrize("independent, block, cube, zenith, azimuth", CASES)
def test_production_kernel_agrees_with_its_plain_analog_twin(independent, block, cube, zenith, azimuth):
    scene = cloudy_scene()
    ours = solve_monte_carlo(scene, zenith, azimuth, photons=64_000, seed=21, independent_columns=independent,
                             majorant_block=block, clear_cube=cube)
    mean, se, domain_se, _, per_column = twin_fluxes(scene, zenith, azimuth, 400_000, batches=40, seed=22,
                                                     independent_columns=independent)
    # Two unbiased estimators differ by noise alone (common practice): per column, |z| > 3
    # for about 0.3 % of normal deviates (we allow 2 % for the t-distributed estimates of
    # 32 and 40 batches) and none beyond 5; domain means within 4 combined standard errors.
    # A twin tally is a count over the column's photons: its standard error is at least the
    # Poisson one of the count our value predicts, which also covers columns the twin never
    # saw a count in (a deep shadow's direct flux).
    zs = []
    for name in TALLIES:
        value = ours[name].values
        twin_se = np.maximum(se[name], np.sqrt(np.abs(value) / per_column))
        combined = np.hypot(ours[name + "_standard_error"].values, twin_se)
        diff = value - mean[name]
        exact = combined == 0
        np.testing.assert_allclose(diff[exact], 0.0, atol=1e-12, err_msg=name)
        z = diff[~exact] / combined[~exact]
        zs.append(z)
        assert np.abs(z).max() < 5, (name, float(np.abs(z).max()))
        dz = diff.mean() / math.hypot(float(ours[name + "_domain_mean_standard_error"]), domain_se[name])
        assert abs(dz) < 4, (name, dz)
    z = np.concatenate(zs)
    assert np.mean(np.abs(z) > 3) <= 0.02
    assert 0.85 < np.sqrt(np.mean(z**2)) < 1.15, np.sqrt(np.mean(z**2))
