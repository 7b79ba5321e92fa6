"""The effective cloud fraction of broken clouds (after Killen and Ellingson 1994) against
analytic limits and a simulated Boolean field of cylinders (Stoyan et al. 1995)."""

import numpy as np
import pytest

from surrogate3d.baselines.effective_cloud_fraction import (cylinder_diameter, effective_cloud_fraction,
                                                           effective_cloud_fraction_corrections)
from surrogate3d.pairs.coarsen import edge_length_density


def test_flat_clouds_are_the_flat_plate():
    """Zero depth: N_e = N (the plate model every plane-parallel scheme uses)."""
    n = np.linspace(0.0, 1.0, 11)
    np.testing.assert_allclose(effective_cloud_fraction(n, 0.0), n, atol=1e-14)


def test_sparse_cylinders_hide_one_plus_twice_their_aspect_ratio():
    """Isolated cylinders: N_e / N -> 1 + 2 H / D as N -> 0 (the cosine-weighted mean of the
    projected area pi D^2/4 + D H tan(theta) over the hemisphere: 1 + (4/pi) (H/D) (pi/2);
    Stoyan et al. 1995, coverage of a Boolean model)."""
    for beta in (0.25, 1.0, 2.0):
        ratio = effective_cloud_fraction(1e-6, beta) / 1e-6
        assert ratio == pytest.approx(1.0 + 2.0 * beta, rel=1e-3)


def test_effective_cover_grows_with_depth_and_stays_in_range():
    n = np.array([0.1, 0.5, 0.9])
    previous = n.copy()
    for beta in (0.5, 1.0, 3.0):
        value = effective_cloud_fraction(n, beta)
        assert np.all(value > previous) and np.all(value < 1.0)
        previous = value
    assert float(effective_cloud_fraction(1.0, 2.0)) == pytest.approx(1.0, abs=1e-14)


def test_diameter_of_a_simulated_boolean_field_of_disks():
    """Random disks of 40 cells on a periodic 2000 x 2000 grid: the diameter recovered from the
    cover and the staircase edge length (Boolean model boundary length, Cauchy-Crofton 4/pi) is
    within 3 % of the true one."""
    rng = np.random.default_rng(5)
    size, diameter, count = 2000, 40.0, 1900
    centres = rng.uniform(0, size, (count, 2))
    y, x = np.mgrid[0:size, 0:size] + 0.5
    mask = np.zeros((size, size), dtype=bool)
    r = diameter / 2
    for cy, cx in centres:
        lo_y, lo_x = int(cy - r) - 1, int(cx - r) - 1
        rows = np.arange(lo_y, lo_y + int(diameter) + 3) % size
        cols = np.arange(lo_x, lo_x + int(diameter) + 3) % size
        dy = (y[rows][:, cols] - cy + size / 2) % size - size / 2
        dx = (x[rows][:, cols] - cx + size / 2) % size - size / 2
        mask[np.ix_(rows, cols)] |= dy**2 + dx**2 <= r**2
    cover = mask.mean()
    assert 0.3 < cover < 0.6
    edge = edge_length_density(mask, 1.0, 1.0).mean()
    assert float(cylinder_diameter(cover, edge)) == pytest.approx(diameter, rel=0.03)


def test_corrections_per_host_column():
    one = np.ones((2, 2))
    cover = np.array([[0.0, 0.3], [1.0, 0.3]])
    out = effective_cloud_fraction_corrections(cover, 380.0 * one, 330.0 * one, 1e-3 * one,
                                               np.array([[0.0, 1000.0], [1000.0, 0.0]]), 0.98 * one)
    down = out["longwave_surface_downward_flux"]
    # Clear, overcast and flat host columns get none; a deep broken one a positive change.
    assert down[0, 0] == 0.0 and down[1, 0] == 0.0 and down[1, 1] == pytest.approx(0.0, abs=1e-12)
    assert down[0, 1] > 0.0
    np.testing.assert_allclose(out["longwave_surface_upward_flux"], 0.02 * down)
    np.testing.assert_allclose(out["longwave_surface_net_absorption"], 0.98 * down)
    assert not out["longwave_toa_upward_flux"].any() and not out["longwave_atmosphere_net_absorption"].any()
