"""The Monte Carlo kernels against plain-Python references and analytic results."""

import math

import numpy as np
import pytest

from surrogate3d.core.config import DIRECT_BEAM_TILE
from surrogate3d.solvers import _geometry, _rng, _transport
from surrogate3d.solvers._records import Beam, BeamTables, Grid, Optics, Photon, Slabs, Survival, Tallies

MASK = (1 << 64) - 1


def _xoshiro_reference(state, n):
    """Plain-Python xoshiro256** (Blackman and Vigna 2021, reference C code transcribed)."""
    s = [int(v) for v in state]
    out = []
    for _ in range(n):
        rotl = lambda x, k: ((x << k) | (x >> (64 - k))) & MASK  # noqa: E731
        out.append((rotl((s[1] * 5) & MASK, 7) * 9) & MASK)
        t = (s[1] << 17) & MASK
        s[2] ^= s[0]
        s[3] ^= s[1]
        s[1] ^= s[2]
        s[0] ^= s[3]
        s[2] ^= t
        s[3] = rotl(s[3], 45)
    return out


def test_xoshiro_matches_plain_python_reference():
    state = _rng.new_state()
    _rng.seed_stream(state, 12345, 7)
    start = state.copy()
    got = [int(_rng.next_uint64(state)) for _ in range(50)]
    assert got == _xoshiro_reference(start, 50)


def test_streams_differ_and_uniforms_are_uniform():
    a, b = _rng.new_state(), _rng.new_state()
    _rng.seed_stream(a, 1, 0)
    _rng.seed_stream(b, 1, 1)
    assert not np.array_equal(a, b)
    u = np.array([_rng.uniform(a) for _ in range(20000)])
    # Mean 1/2 and variance 1/12 of U(0, 1) (common practice), within 5 standard errors.
    assert abs(u.mean() - 0.5) < 5 * math.sqrt(1 / 12 / u.size)
    assert abs(u.var() - 1 / 12) < 0.005
    assert u.min() >= 0.0 and u.max() < 1.0


@pytest.mark.parametrize("g", [0.0, 0.5, 0.85, -0.3])
def test_henyey_greenstein_sampling(g):
    # The mean scattering cosine of the Henyey-Greenstein function is g (Henyey and Greenstein 1941).
    xi = (np.arange(200000) + 0.5) / 200000
    mu = np.array([_transport.hg_cosine(g, x) for x in xi])
    assert abs(mu.mean() - g) < 2e-3
    # The sampled cosines follow p(mu) = (1 - g^2) / (2 (1 + g^2 - 2 g mu)^1.5) (Henyey and Greenstein 1941).
    hist, edges = np.histogram(mu, bins=20, range=(-1, 1))
    centres = 0.5 * (edges[1:] + edges[:-1])
    pdf = (1 - g * g) / (2 * (1 + g * g - 2 * g * centres) ** 1.5)
    cdf = lambda m: (1 - g * g) / (2 * g) * (1 / np.sqrt(1 + g * g - 2 * g * m) - 1 / (1 + g)) if g else (m + 1) / 2  # noqa: E731
    expected = np.diff(cdf(edges)) * mu.size
    np.testing.assert_allclose(hist, expected, rtol=0.02, atol=30)
    assert pdf.min() > 0


def test_rotation_keeps_unit_length_and_angle():
    rng = np.random.default_rng(3)
    for _ in range(200):
        u = rng.normal(size=3)
        u /= np.linalg.norm(u)
        mu, phi = rng.uniform(-1, 1), rng.uniform(0, 2 * np.pi)
        v = np.array(_transport.rotate(u[0], u[1], u[2], mu, math.cos(phi), math.sin(phi)))
        assert abs(np.linalg.norm(v) - 1) < 1e-12
        assert abs(v @ u - mu) < 1e-9  # the scattering angle is kept (geometry)


def test_random_azimuth_is_uniform_on_the_circle():
    # von Neumann (1951): (a^2 - b^2, 2ab) / (a^2 + b^2) for (a, b) uniform in the unit disk is
    # (cos, sin) of a uniform angle.  Check unit length, E[cos] = E[sin] = 0, E[cos^2] = 1/2
    # and a flat histogram of the angle.
    state = _rng.new_state()
    _rng.seed_stream(state, 9, 0)
    cs = np.array([_transport.random_azimuth(state) for _ in range(40000)])
    np.testing.assert_allclose(np.hypot(cs[:, 0], cs[:, 1]), 1.0, atol=1e-12)
    se = math.sqrt(0.5 / cs.shape[0])
    assert abs(cs[:, 0].mean()) < 5 * se and abs(cs[:, 1].mean()) < 5 * se
    assert abs((cs[:, 0] ** 2).mean() - 0.5) < 0.01
    hist, _ = np.histogram(np.arctan2(cs[:, 1], cs[:, 0]), bins=16, range=(-math.pi, math.pi))
    np.testing.assert_allclose(hist, cs.shape[0] / 16, rtol=0.08)


def _brute_force_tau(ext, z_edge, dx, dy, x0, y0, u, n=200000):
    """Optical depth along a ray from the top to the surface by fine midpoint sampling (plain Python)."""
    nb, nz, ny, nx = ext.shape
    length = z_edge[-1] / -u[2]
    s = (np.arange(n) + 0.5) / n * length
    x = (x0 + s * u[0]) % (nx * dx)
    y = (y0 + s * u[1]) % (ny * dy)
    z = z_edge[-1] + s * u[2]
    ix = np.minimum((x / dx).astype(int), nx - 1)
    iy = np.minimum((y / dy).astype(int), ny - 1)
    iz = np.clip(np.searchsorted(z_edge, z, side="right") - 1, 0, nz - 1)
    return ext[:, iz, iy, ix].sum(axis=1) * length / n


def _single(ext):
    # The single-precision values the kernels trace with, back in double precision.
    return np.asarray(ext, dtype=np.float32).astype(np.float64)


def direct_beam(ext, ssa, alb, z_edge, dx, dy, u, nsub, czi, seed=0, batch=0, weights=None, slabs=True,
                tile=DIRECT_BEAM_TILE, families=False):
    """One batch's direct beam (:func:`_geometry.direct_beam_batch`) with fresh scratch.

    Returns ``(absorbed, direct, source, cum, trans, ray_xy)``: absorbed per cell (band-summed,
    solar-weighted), the (3, nband, ny, nx) surface, column-absorbed and surface-absorbed
    direct flux, and the per-ray tables; with ``families``, also the families' landing
    points and segment lists ``(landing, cells, lengths, count)``.
    """
    nb, nz, ny, nx = ext.shape
    weights = np.full(nb, 1.0) if weights is None else np.asarray(weights, dtype=np.float64)
    optics = np.zeros(ext.shape + (3,), np.float32)
    optics[..., 0], optics[..., 1] = ext, ssa
    kext, ssa_g = optics[..., 0], optics[..., 1:3]
    nray = nx * ny * _geometry.RAYS_PER_STRATUM * nsub * nsub
    ncz = czi.size - 1
    source, ray_xy = np.empty((nb, nray)), np.empty((nray, 2))
    cum, trans = np.empty((nb, nray, ncz + 1)), np.empty((nb, nray, ncz + 1))
    direct = np.zeros((3, nb, ny, nx))
    cell = np.zeros((nz, ny, nx), dtype=np.int64)
    scale = 2.0**50
    state = _rng.new_state()
    _rng.seed_stream(state, seed, batch)
    path = (z_edge[-1] - z_edge[0]) / -u[2]
    uniform = _geometry.uniform_slabs(kext, ssa_g[..., 0], z_edge, -u[2])
    if not slabs:  # walk every layer: no slab on top, none below
        uniform = Slabs(nz, 0, np.ones((nb, nz + 1)), np.zeros((nb, nz + 1)), np.ones((nb, nz + 1)),
                        np.zeros((nb, nz)))
    records = _beam_records(kext, ssa_g, alb, weights, z_edge, dx, dy, u, nsub, czi, path * u[0], path * u[1],
                            tile=tile, slabs=uniform)
    beam = records[2]
    landing = np.empty((beam.tile_x * beam.tile_y * _geometry.RAYS_PER_STRATUM * nsub * nsub, 2))
    tables = BeamTables(ray_xy, source, cum, trans, np.empty(nb * nray), direct, landing,
                        np.empty((beam.max_segments, 4), np.int32), np.empty(beam.max_segments), np.empty((3, ny * nx)))
    _geometry.direct_beam_batch(state, *records, uniform, tables, Tallies(np.empty((nb, 0)), cell, scale))
    out = (cell / scale, direct, source, cum, trans, ray_xy)
    return out + (landing,) if families else out


def _beam_records(kext, ssa_g, alb, weights, z_edge, dx, dy, u, nsub, czi, reach_x=0.0, reach_y=0.0,
                  tile=DIRECT_BEAM_TILE, slabs=None):
    """The optics, grid (cells only) and beam records of the direct-beam kernels (the beam's
    walk tables only with ``slabs``)."""
    nb, nz, ny, nx = kext.shape
    edge_slot = np.full(nz + 1, -1, dtype=np.int64)
    edge_slot[czi[::-1]] = np.arange(czi.size)
    z_edge = np.asarray(z_edge, dtype=np.float64)
    unused = np.zeros(1)
    optics = Optics(kext, ssa_g, np.zeros((1, 1, 1, 1, 3), np.float32), np.asarray(alb, dtype=np.float64),
                    np.asarray(weights, dtype=np.float64))
    grid = Grid(z_edge, float(dx), float(dy), 1, 1, np.array([0, nz]), z_edge[[0, nz]], kext[:, :1, :1, :1],
                np.zeros((1, 1, 1, 1), np.uint8), unused, unused.astype(np.int64), unused.astype(np.int64))
    kept = np.column_stack([np.arange(czi.size), czi[::-1]]).astype(np.int64)
    gx, gy, segments = 1, 1, 1
    sweep = (np.zeros((nb, 1, 1, 1, 1, 1), np.float32), np.zeros(2, np.int64), np.zeros((0, 2), np.int32),
             np.zeros((0, 2)))
    if slabs is not None:
        gx, gy = _geometry.tile_sides(nx, ny, tile)
        segments = _geometry.max_segments(slabs.top - slabs.bottom, z_edge[slabs.top] - z_edge[slabs.bottom], *u, dx,
                                          dy)
        sweep = _geometry.sweep_tables(kext, ssa_g[..., 0], slabs.bottom, slabs.top, gx, gy)
    beam = Beam(*(float(c) for c in u), int(nsub), gx, gy, segments, *sweep, float(reach_x), float(reach_y), edge_slot, kept, np.asarray(czi),
                unused, np.zeros((3, 1, 1, 1)))
    return optics, grid, beam


def _direction(zenith, azimuth):
    theta, phi = math.radians(zenith), math.radians(azimuth)
    return math.sin(theta) * math.cos(phi), math.sin(theta) * math.sin(phi), -math.cos(theta)


def test_direct_beam_conserves_energy_and_lands_where_geometry_says():
    rng = np.random.default_rng(5)
    ext = _single(rng.uniform(0, 0.01, size=(2, 5, 4, 6)))
    ssa = _single(rng.uniform(0.5, 1.0, size=ext.shape))
    alb = np.full((2, 4, 6), 0.3)
    z_edge = np.array([0.0, 100.0, 250.0, 300.0, 600.0, 1000.0])
    u = _direction(50, 35)
    absorbed, direct, source, *_ = direct_beam(ext, ssa, alb, z_edge, 100.0, 80.0, u, 2, np.array([0, 5]))
    surface = direct[0]
    # Conservation: absorbed + scattered + transmitted = incident (one unit per column and
    # band, both bands of weight 1), exactly, in every batch.
    scattered = source.sum() - 0.3 * surface.sum()
    np.testing.assert_allclose(absorbed.sum() + scattered + surface.sum(), 2 * 24, rtol=1e-12)
    np.testing.assert_allclose(direct[1].sum(), absorbed.sum(), rtol=1e-9)
    np.testing.assert_allclose(direct[2], 0.7 * surface, rtol=1e-13)
    # Without extinction every column receives exactly its incident flux: every column gets
    # its own rays, wherever they land inside it.
    _, clear, *_ = direct_beam(np.zeros_like(ext), ssa, alb, z_edge, 100.0, 80.0, u, 3, np.array([0, 5]))
    np.testing.assert_allclose(clear[0], 1.0, rtol=1e-13)


def test_direct_beam_mixing_conservative_and_absorbing_layers_follows_beer_lambert_layer_by_layer():
    # Overhead sun through layers alternating between conservative and absorbing cells:
    # the beam entering layer i is exp(-sum of the optical depths above) (Beer-Lambert law);
    # layer i removes T_i (1 - exp(-tau_i)), absorbs (1 - omega_i) of it and scatters the
    # rest, also where conservative layers are applied in one run.
    ext = np.broadcast_to(_single([0.004, 0.001, 0.0, 0.003, 0.002, 0.0005])[None, :, None, None],
                          (1, 6, 2, 3)).copy()
    ssa = np.broadcast_to(_single([1.0, 0.6, 1.0, 1.0, 0.9, 1.0])[None, :, None, None], ext.shape).copy()
    alb = np.full((1, 2, 3), 0.25)
    z_edge = np.array([0.0, 100.0, 300.0, 450.0, 500.0, 800.0, 1000.0])
    czi = np.array([0, 3, 6])
    tau = ext[0, :, 0, 0] * np.diff(z_edge)
    above = np.concatenate([np.cumsum(tau[::-1])[::-1][1:], [0.0]])
    removed = np.exp(-above) * -np.expm1(-tau)
    absorbed, direct, source, *_ = direct_beam(ext, ssa, alb, z_edge, 100.0, 100.0, (0.0, 0.0, -1.0), 2, czi)
    t_surface = math.exp(-tau.sum())
    np.testing.assert_allclose(direct[0], t_surface, rtol=1e-13)
    np.testing.assert_allclose(absorbed[:, 1, 2], (1 - ssa[0, :, 0, 0]) * removed, rtol=1e-9, atol=1e-14)
    per_ray = ((ssa[0, :, 0, 0] * removed).sum() + 0.25 * t_surface) / 8  # 2 x 2 strata, 2 rays each
    np.testing.assert_allclose(source[0], per_ray, rtol=1e-12)


def test_uniform_slabs_are_found_and_crossed_as_if_walked():
    # Two bands; an absorbing uniform layer on top, a cloud in the middle layers, uniform
    # conservative layers below: the slabs hold exactly those, and crossing them without
    # walking gives every ray the same transmission and source (Beer-Lambert: a uniform
    # layer has optical depth k dz / mu0 on every path) and every layer the same absorption.
    rng = np.random.default_rng(3)
    nz, ny, nx = 7, 5, 6
    ext = np.full((2, nz, ny, nx), 1e-4)
    ssa = np.ones_like(ext)
    ext[:, 5:] = 3e-4
    ssa[1, 5:] = 0.7
    ext[:, 2:5, 1:3, 2:5] = _single(rng.uniform(0.005, 0.02, (2, 3, 2, 3)))
    ssa[:, 2:5, 1:3, 2:5] = _single(rng.uniform(0.8, 1.0, (2, 3, 2, 3)))
    ssa[:, 3] = np.where(ext[:, 3] > 1e-3, ssa[:, 3], 0.9)  # layer 3 absorbs in clear air too
    alb = np.full((2, ny, nx), 0.2)
    z_edge = np.linspace(0.0, 1400.0, nz + 1)
    optics = np.zeros(ext.shape + (3,), np.float32)
    optics[..., 0], optics[..., 1] = ext, ssa
    top, bottom, top_t, *_ = _geometry.uniform_slabs(optics[..., 0], optics[..., 1], z_edge, 1.0)
    assert (top, bottom) == (5, 2)
    np.testing.assert_allclose(top_t[:, 5], np.exp(-float(np.float32(3e-4)) * 400.0), rtol=1e-12)  # Beer-Lambert
    czi = np.array([0, 2, 4, 7])
    u = _direction(50, 110)
    fast = direct_beam(ext, ssa, alb, z_edge, 100.0, 100.0, u, 2, czi, seed=4, weights=[0.6, 0.4])
    walked = direct_beam(ext, ssa, alb, z_edge, 100.0, 100.0, u, 2, czi, seed=4, weights=[0.6, 0.4], slabs=False)
    for a, b in zip(fast[2:], walked[2:]):  # sources, tables, ray entries
        np.testing.assert_allclose(a, b, rtol=1e-11, atol=1e-14)
    np.testing.assert_allclose(fast[1][[0, 2]], walked[1][[0, 2]], rtol=1e-11)  # direct flux at the surface
    # Absorption: the same in every layer (and band); the uniform top layers' spread evenly.
    np.testing.assert_allclose(fast[0].sum(axis=(1, 2)), walked[0].sum(axis=(1, 2)), rtol=1e-9, atol=1e-13)
    np.testing.assert_allclose(fast[1][1].sum(axis=(1, 2)), walked[1][1].sum(axis=(1, 2)), rtol=1e-11)
    np.testing.assert_allclose(fast[0][5:], fast[0][5:, :1, :1] * np.ones((1, ny, nx)), rtol=1e-12)


def _brute_force_landing(x0, y0, u, top, dx, dy, nx, ny):
    s = top / -u[2]
    return int(((x0 + s * u[0]) % (nx * dx)) // dx), int(((y0 + s * u[1]) % (ny * dy)) // dy)


def test_direct_beam_transmission_equals_beer_lambert_per_ray():
    # Every ray crosses several cells: transmission exp(-sum k_i l_i) (Beer-Lambert law), and
    # it lands in the column it was drawn for, at a point of its stratum.
    rng = np.random.default_rng(11)
    ext = _single(rng.uniform(0, 0.02, size=(1, 4, 3, 3)))
    ssa = np.ones_like(ext)
    alb = np.zeros((1, 3, 3))
    z_edge = np.array([0.0, 200.0, 400.0, 700.0, 900.0])
    u = _direction(40, 200)
    _, direct, source, _, _, ray_xy = direct_beam(ext, ssa, alb, z_edge, 100.0, 100.0, u, 2, np.array([0, 4]))
    landed = np.zeros((3, 3))
    for r in range(72):
        x0, y0 = ray_xy[r]
        tau = _brute_force_tau(ext, z_edge, 100.0, 100.0, x0, y0, u, n=400000)[0]
        # Conservative scattering over a black surface: source = 1/8 (1 - exp(-tau)) for that ray.
        assert abs(8 * source[0, r] - (1 - math.exp(-tau))) < 2e-5
        lx, ly = _brute_force_landing(x0, y0, u, z_edge[-1], 100.0, 100.0, 3, 3)
        assert (ly * 3 + lx) == r // 8
        landed[ly, lx] += math.exp(-tau) / 8
    np.testing.assert_allclose(direct[0, 0], landed, atol=1e-5)


def _exact_column_transmittance(ext, z_edge, dx, dy, u, points=120):
    """Direct transmittance averaged over each surface column: midpoint rule on a fine grid
    of landing points, each traced by fine sampling of its slant path (plain numpy)."""
    nb, nz, ny, nx = ext.shape
    length = (z_edge[-1] - z_edge[0]) / -u[2]
    s = (np.arange(1200) + 0.5) / 1200 * length  # along the ray, from the surface up
    z = z_edge[0] - s * u[2]
    iz = np.clip(np.searchsorted(z_edge, z, side="right") - 1, 0, nz - 1)
    frac = (np.arange(points) + 0.5) / points
    out = np.zeros((ny, nx))
    for iy in range(ny):
        for ix in range(nx):
            px = (ix + frac[None, :, None]) * dx - s[:, None, None] * u[0]
            py = (iy + frac[None, None, :]) * dy - s[:, None, None] * u[1]
            jx = np.floor(px / dx).astype(int) % nx
            jy = np.floor(py / dy).astype(int) % ny
            tau = ext[0][iz[:, None, None], jy, jx].sum(axis=0) * length / s.size
            out[iy, ix] = np.exp(-tau).mean()
    return out


def test_direct_beam_of_every_batch_is_unbiased_in_every_column():
    # A cloud block with sharp edges seen at 60 deg along a diagonal: a column in its
    # penumbra is partly shaded.  The mean over batches of the direct flux of one
    # antithetic pair of rays per column equals the column's area-averaged transmittance
    # (computed independently by fine quadrature), within the batch-to-batch standard
    # error, in every column (stratified and antithetic sampling are unbiased; e.g. Owen
    # 2013, ch. 8 and 10).
    nx = ny = 6
    ext = np.zeros((1, 4, ny, nx))
    ext[0, 2:, 2:4, 1:4] = 0.01
    ssa = np.ones_like(ext)
    alb = np.zeros((1, ny, nx))
    z_edge = np.array([0.0, 100.0, 200.0, 300.0, 400.0])
    u = _direction(60, 30)
    exact = _exact_column_transmittance(ext, z_edge, 100.0, 100.0, u)
    # Tiles of 3 x 3: every column shares its rays with the column 3 away (ray families).
    batches = np.array([direct_beam(ext, ssa, alb, z_edge, 100.0, 100.0, u, 1, np.array([0, 4]), seed=3,
                                    batch=b, tile=3)[1][0, 0] for b in range(800)])
    mean, se = batches.mean(axis=0), batches.std(axis=0, ddof=1) / math.sqrt(len(batches))
    partly = se > 0
    assert partly.sum() >= 8  # the penumbra is there
    z = (mean - exact)[partly] / np.hypot(se[partly], 2e-4)  # 2e-4: quadrature error of the reference
    assert np.abs(z).max() < 4.5, z
    np.testing.assert_allclose(mean[~partly], exact[~partly], atol=3e-4)


def test_sampled_first_scatter_points_follow_the_direct_beam_source():
    # The photons' starting cells must be distributed like the energy the direct beam
    # scatters in each cell (importance sampling of the first-order source; common practice).
    rng = np.random.default_rng(2)
    ext = _single(rng.uniform(0, 0.006, size=(1, 6, 3, 4)))
    ssa = _single(rng.uniform(0.3, 1.0, size=ext.shape))
    alb = np.full((1, 3, 4), 0.4)
    z_edge = np.linspace(0, 1200.0, 7)
    czi = np.array([0, 2, 4, 6])
    u = _direction(35, 120)
    # The same rays (same seed and batch) with nothing scattered: the absorbed flux is the removed flux.
    removed = direct_beam(ext, np.zeros_like(ssa), alb, z_edge, 100.0, 100.0, u, 2, czi)[0]
    _, direct, source, cum, trans, ray_xy = direct_beam(ext, ssa, alb, z_edge, 100.0, 100.0, u, 2, czi)
    expected = np.concatenate([(ssa[0] * removed).ravel(), (alb[0] * direct[0, 0]).ravel()])
    kext = ext.astype(np.float32)
    ssa_g = np.stack([ssa, np.zeros_like(ssa)], axis=-1).astype(np.float32)
    cdf = np.cumsum(source[0])
    counts = np.zeros(expected.size)
    n = 40000
    for i in range(n):
        target = (i + 0.5) / n * cdf[-1]
        r = int(np.searchsorted(cdf, target, side="right"))
        below = cdf[r - 1] if r else 0.0
        kind, x, y, z, ix, iy, iz = _geometry.locate_source_3d(r, 0, target - below, rng.random(), kext, ssa_g,
                                                               z_edge, 100.0, 100.0, *u, czi, ray_xy, cum, trans)
        counts[(iz * 3 + iy) * 4 + ix if kind == 0 else ext[0].size + iy * 4 + ix] += 1
        if kind == 0:
            assert z_edge[iz] - 1e-9 <= z <= z_edge[iz + 1] + 1e-9
    np.testing.assert_allclose(counts / n, expected / expected.sum(), atol=3e-3)


def test_cube_radius_matches_brute_force():
    from surrogate3d.solvers.montecarlo import cube_radius

    rng = np.random.default_rng(4)
    clear = rng.random((1, 6, 9, 11)) >= 0.04
    radius = cube_radius(clear, 4)
    nz, ny, nx = clear.shape[1:]
    for iz in range(nz):
        for iy in range(ny):
            for ix in range(nx):
                best = 0
                for r in range(1, 5):  # the cube of radius r, periodic in x and y, cut in z
                    zs = range(max(iz - r, 0), min(iz + r, nz - 1) + 1)
                    if all(clear[0, k, (iy + j) % ny, (ix + i) % nx] for k in zs for j in range(-r, r + 1)
                           for i in range(-r, r + 1)):
                        best = r
                    else:
                        break
                assert radius[0, iz, iy, ix] == best, (iz, iy, ix)


def test_slot_index_gives_every_tally_of_every_column_its_own_place():
    # A batch slot holds each of the five tallies of each column exactly once, and a
    # column's two surface tallies side by side (one cache line per surface hit; common practice).
    ncol = 12
    t = _transport
    kinds = (t.TOA_UP, t.ATM_ABS, t.SFC_DIR, t.SFC_DOWN, t.SFC_ABS)
    places = [t.slot_index(k, j, ncol) for k in kinds for j in range(ncol)]
    assert sorted(places) == list(range(t.N_TALLIES * ncol))
    for j in range(ncol):
        down = t.slot_index(t.SFC_DOWN, j, ncol)
        assert t.slot_index(t.SFC_ABS, j, ncol) == down + 1 and down % 2 == 0


@pytest.mark.parametrize("nx", [9, 10])
def test_block_codes_read_back_as_packed(nx):
    # Two four-bit codes per byte (odd widths padded): every block reads back 0 where it is
    # tracked at its majorant, else its clear-cube radius (capped) + 1 (plain-Python reference).
    from surrogate3d.solvers.montecarlo import MAX_CLEAR_CUBE, _majorant_grid, majorant_blocks

    rng = np.random.default_rng(9)
    ext = np.where(rng.random((2, 5, 7, nx)) < 0.1, 0.02, 1e-6).astype(np.float32)
    z_edge = np.linspace(0.0, 500.0, 6)
    kmaj, bskip, kclear, *rest = majorant_blocks(ext, z_edge, 100.0, 100.0, 1, 3)
    bskip[0, 0, 0, 0] = 40  # beyond four bits: read back as the largest radius
    packed = _majorant_grid(kmaj, bskip, kclear, *rest, z_edge, 100.0, 100.0).bcode
    for b, k, j, i in np.ndindex(ext.shape):
        expected = 0 if kmaj[b, k, j, i] > kclear[b] else min(int(bskip[b, k, j, i]), MAX_CLEAR_CUBE) + 1
        assert _transport._code(packed, b, k, j, i) == expected, (b, k, j, i)


def test_majorant_blocks_bound_every_cell_and_find_the_clear_slabs():
    from surrogate3d.solvers.montecarlo import majorant_blocks

    rng = np.random.default_rng(8)
    ext = np.full((2, 10, 6, 9), 1e-5, np.float32)
    ext[:, 3:7] = np.where(rng.random((2, 4, 6, 9)) < 0.2, rng.uniform(0.005, 0.03, (2, 4, 6, 9)), 1e-5)
    ext[1, 8, 2, 2] = 0.02
    z_edge = np.linspace(0.0, 1000.0, 11)
    kmaj, bskip, kclear, bx, by, bedge, below, above = majorant_blocks(ext, z_edge, 100.0, 100.0, 4, 2)
    assert (bx, by) == (3, 3) and list(bedge) == [0, 4, 8, 10]
    for b in range(2):
        for kz in range(3):
            for j in range(2):
                for i in range(3):
                    cells = ext[b, bedge[kz]:bedge[kz + 1], j * 3:(j + 1) * 3, i * 3:(i + 1) * 3]
                    assert kmaj[b, kz, j, i] == cells.max()  # a majorant, and the tightest one
    np.testing.assert_array_equal(kclear, [np.float32(1e-5)] * 2)
    # Band 0: clouds in layers 3-6 only, i.e. block rows 0 and 1; band 1 also in row 2.
    assert list(below) == [0, 0] and list(above) == [2, 3]


def test_delta_tracking_free_paths_follow_beer_lambert():
    # Photons launched straight up through a column of layers, absorbed at their first real
    # collision, must be absorbed in layer k with probability exp(-tau_above_k) (1 - exp(-tau_k))
    # and escape with exp(-tau) (Beer-Lambert law), whatever the majorant blocks (Woodcock et al. 1965).
    from surrogate3d.solvers.montecarlo import _majorant_grid, majorant_blocks

    ext = np.zeros((1, 6, 4, 4), np.float32)
    ext[0, :, :, :] = np.array([0.002, 0.0001, 0.004, 0.001, 0.003, 0.0])[:, None, None]
    ext[0, :, 1, 2] *= 0.3  # heterogeneous blocks, so null collisions happen
    z_edge = np.array([0.0, 100.0, 300.0, 400.0, 700.0, 800.0, 1000.0])
    ssa_g = np.zeros(ext.shape + (2,), np.float32)  # black cells: the first real collision absorbs
    alb = np.zeros((1, 4, 4))
    dz = np.diff(z_edge)
    tau = ext[0, :, 0, 0].astype(float) * dz
    expected = np.append(np.exp(-np.concatenate([[0.0], np.cumsum(tau)[:-1]])) * -np.expm1(-tau), np.exp(-tau.sum()))
    for block, cube in [(1, 0), (2, 1), (4, 2)]:
        kmaj, bskip, kclear, bx, by, bedge, below, above = majorant_blocks(ext, z_edge, 100.0, 100.0, block, cube)
        grid = _majorant_grid(kmaj, bskip, kclear, bx, by, bedge, below, above, z_edge, 100.0, 100.0)
        optics = Optics(ext, ssa_g, np.zeros((1, 1, 1, 1, 3), np.float32), alb, np.ones(1))
        tallies = Tallies(np.zeros((1, 16 * _transport.N_TALLIES)), np.zeros((6, 4, 4), np.int64), 2.0**61)
        state = _rng.new_state()
        _rng.seed_stream(state, 3, block)
        n = 20000
        photon = Photon(0, 1.0 / n, 50.0, 50.0, 0.0, 0.0, 0.0, 1.0, 0, 0, 0)
        for _ in range(n):
            _transport.transport_3d(state, photon, optics, grid, Survival(0.0, 10), tallies)
        got = np.append(tallies.cell[:, 0, 0] / tallies.scale,
                        tallies.col[0, _transport.slot_index(_transport.TOA_UP, 0, 16)])
        np.testing.assert_allclose(got, expected, atol=4 * math.sqrt(0.25 / n))
        assert abs(got.sum() - 1.0) < 1e-12


@pytest.mark.parametrize("block, cube", [(1, 0), (1, 1), (2, 1)])
def test_oblique_free_paths_follow_beer_lambert_along_the_wrapped_slant_path(block, cube):
    # Photons leaving the surface obliquely through a heterogeneous periodic grid, absorbed at
    # their first real collision, escape at the top with probability exp(-tau) along their
    # slant path, wrapped around the domain twice (Beer-Lambert law; Woodcock et al.
    # 1965 for the null collisions).  The walk crosses cloud, clear cells next to cloud and
    # clear cubes; tau comes from fine midpoint sampling of the same path in plain Python.
    from surrogate3d.solvers.montecarlo import _majorant_grid, majorant_blocks, tracking_arrays

    rng = np.random.default_rng(21)
    ext = np.full((1, 6, 8, 8), 2e-6)
    ext[0, 3:] = np.where(rng.random((3, 8, 8)) < 0.4, rng.uniform(0.0005, 0.003, (3, 8, 8)), 2e-6)
    ext[0, 1, 2, 5] = 0.002
    z_edge = np.array([0.0, 150.0, 300.0, 400.0, 600.0, 800.0, 1000.0])
    kext, ssa_g, column_props = tracking_arrays(ext, np.zeros_like(ext), np.zeros_like(ext), False)
    grid = _majorant_grid(*majorant_blocks(kext, z_edge, 100.0, 100.0, block, cube), z_edge, 100.0, 100.0)
    alb = np.zeros((1, 8, 8))
    u = np.array([0.8, 0.3, 0.0])
    u[2] = math.sqrt(1.0 - u[0] ** 2 - u[1] ** 2)
    x0, y0 = 130.0, 470.0
    path = z_edge[-1] / u[2]
    top = (x0 + path * u[0], y0 + path * u[1])
    tau = _brute_force_tau(ext.astype(np.float32).astype(float), z_edge, 100.0, 100.0, *top, -u)[0]
    col, cell, scale = np.zeros((1, 64 * _transport.N_TALLIES)), np.zeros((6, 8, 8), np.int64), 2.0**61
    optics = Optics(kext, ssa_g, column_props, alb, np.ones(1))
    state = _rng.new_state()
    _rng.seed_stream(state, 5, block + 10 * cube)
    n = 20000
    photon = Photon(0, 1.0 / n, x0, y0, 0.0, *u, 1, 4, 0)
    for _ in range(n):
        _transport.transport_3d(state, photon, optics, grid, Survival(0.0, 10), Tallies(col, cell, scale))
    escaped = sum(col[0, _transport.slot_index(_transport.TOA_UP, j, 64)] for j in range(64))
    p = math.exp(-tau)
    assert abs(escaped - p) < 4 * math.sqrt(p * (1 - p) / n), (escaped, p)
    assert abs(escaped + cell.sum() / scale - 1.0) < 1e-12


def test_galloping_source_search_matches_a_binary_search():
    # The first index where a cumulative table exceeds u, found by galloping from the previous
    # photon's index, must equal numpy's binary search of the whole table (clamped to the end).
    rng = np.random.default_rng(4)
    cdf = np.cumsum(np.where(rng.random(500) < 0.3, 0.0, rng.random(500)))  # flat runs: empty rays
    last = cdf.size - 1
    for _ in range(2000):
        k = int(rng.integers(0, last))
        u = cdf[k] + rng.random() * (cdf[-1] - cdf[k]) * rng.choice([1e-3, 0.1, 1.0])
        if cdf[k] > u:
            continue
        expected = min(int(np.searchsorted(cdf, u, side="right")), last)
        assert _transport._next_above(cdf, k, last, u) == expected


def _plain_segments(ox, oy, u, dx, dy, nx, ny, z_edge, top, bottom, n=200000):
    """Length of the ray landing at (ox dx, oy dy) of column (0, 0) in every cell (iz, iy, ix)
    between edges ``top`` and ``bottom``, by fine midpoint sampling (plain numpy)."""
    length = (z_edge[top] - z_edge[bottom]) / -u[2]
    s = (np.arange(n) + 0.5) / n * length
    back = (z_edge[bottom] - z_edge[0]) / -u[2] + length - s  # distance back up from the landing point
    x, y = ox * dx - back * u[0], oy * dy - back * u[1]
    z = z_edge[top] + s * u[2]
    iz = np.searchsorted(z_edge, z, side="right") - 1
    keys = np.stack([iz, np.floor(y / dy).astype(int) % ny, np.floor(x / dx).astype(int) % nx], axis=1)
    cells, counts = np.unique(keys, axis=0, return_counts=True)
    return {tuple(c): k * length / n for c, k in zip(cells, counts)}


def test_segment_list_matches_a_plain_trace():
    # The cells a family's ray crosses, relative to its column, and the length in each (geometry),
    # against fine sampling along the same straight line, for several directions and points.
    z_edge = np.array([0.0, 100.0, 250.0, 300.0, 600.0, 1000.0])
    edge_slot = np.full(6, -1, dtype=np.int64)
    edge_slot[[5, 3, 0]] = [0, 1, 2]
    cells, lengths = np.empty((64, 4), np.int32), np.empty(64)
    for zenith, azimuth, ox, oy in [(50, 35, 0.3, 0.8), (20, 200, 0.9, 0.1), (70, 300, 0.5, 0.5), (0, 0, 0.2, 0.7)]:
        u = _direction(zenith, azimuth)
        n = _geometry.trace_segments(ox, oy, *u, 100.0, 80.0, 6, 4, z_edge, 5, 1, edge_slot, cells, lengths)
        assert n <= _geometry.max_segments(4, 900.0, *u, 100.0, 80.0)
        got = {}
        for q in range(n):
            key = tuple(int(v) for v in cells[q, :3])
            got[key] = got.get(key, 0.0) + lengths[q]
        plain = _plain_segments(ox, oy, u, 100.0, 80.0, 6, 4, z_edge, 5, 1)
        big = {key for key, value in plain.items() if value > 0.05}
        assert big <= set(got)
        for key, value in got.items():
            assert abs(value - plain.get(key, 0.0)) < 0.05, (key, value, plain.get(key))
        np.testing.assert_allclose(lengths[:n].sum(), 900.0 / -u[2], rtol=1e-12)
        # The table slots are where the ray crosses the kept edges 3 and 0 (slot 2 lies below edge 1).
        assert [int(j) for j in cells[:n, 3] if j >= 0] == [1]


def test_rays_share_landing_points_by_tile_place_in_antithetic_pairs():
    # Columns at the same place of their tiles share every landing point; the columns of a tile
    # do not; the two rays of a stratum are mirror images through its centre, each inside it.
    nz, ny, nx = 3, 4, 6
    ext = np.full((1, nz, ny, nx), 1e-4)
    ext[0, 1, 1:3, 2:4] = 0.01
    ssa = np.where(ext > 1e-3, 0.9, 1.0)
    z_edge = np.array([0.0, 100.0, 200.0, 300.0])
    u = _direction(40, 60)
    *_, ray_xy, landing = direct_beam(ext, ssa, np.zeros((1, ny, nx)), z_edge, 100.0, 100.0, u, 2, np.array([0, 3]),
                                      tile=2, families=True)
    path = 300.0 / -u[2]
    frac = ((ray_xy + path * np.array(u[:2])) / 100.0) % 1.0  # landing point in the column
    frac = frac.reshape(ny, nx, 8, 2)
    np.testing.assert_allclose(frac[:, 2:], frac[:, :-2], atol=1e-9)
    np.testing.assert_allclose(frac[2:], frac[:-2], atol=1e-9)
    assert not np.allclose(frac[0, 0], frac[0, 1]) and not np.allclose(frac[0, 0], frac[1, 0])
    stratum = np.stack([np.arange(4) % 2, np.arange(4) // 2], axis=1)[:, None, :]
    pairs = frac.reshape(ny, nx, 4, 2, 2) * 2 - stratum  # in the stratum, [0, 1)
    assert (pairs >= -1e-9).all() and (pairs <= 1 + 1e-9).all()
    np.testing.assert_allclose(pairs[..., 0, :] + pairs[..., 1, :], 1.0, atol=1e-9)
    assert landing.shape == (2 * 2 * 8, 2)


def _plain_ray(ext, ssa, z_edge, dx, dy, x0, y0, u, n=100000):
    """Transmission, absorbed and scattered energy of a unit ray from (x0, y0) at the top to
    the surface, and its absorption per cell, by fine midpoint sampling (plain numpy;
    Beer-Lambert law)."""
    nb, nz, ny, nx = ext.shape
    length = (z_edge[-1] - z_edge[0]) / -u[2]
    ds = length / n
    s = (np.arange(n) + 0.5) * ds
    ix = np.floor((x0 + s * u[0]) / dx).astype(int) % nx
    iy = np.floor((y0 + s * u[1]) / dy).astype(int) % ny
    iz = np.clip(np.searchsorted(z_edge, z_edge[-1] + s * u[2], side="right") - 1, 0, nz - 1)
    k, w = ext[:, iz, iy, ix], ssa[:, iz, iy, ix]
    tau = np.cumsum(k * ds, axis=1)
    removed = np.exp(-(tau - k * ds)) * -np.expm1(-k * ds)
    cell = np.zeros((nb, nz, ny, nx))
    for b in range(nb):
        np.add.at(cell[b], (iz, iy, ix), (1 - w[b]) * removed[b])
    return np.exp(-tau[:, -1]), ((1 - w) * removed).sum(axis=1), (w * removed).sum(axis=1), cell


def test_every_ray_of_a_swept_family_follows_beer_lambert_with_absorbing_cells():
    # Two bands, absorbing clouds and absorbing clear air between uniform layers, tiles of
    # 2 x 2 columns (families shared by three columns along x and two along y): every ray's
    # transmission and scattered source, and the absorption of every cell and column,
    # against fine sampling along the same ray (Beer-Lambert law).
    rng = np.random.default_rng(8)
    nz, ny, nx = 6, 4, 6
    ext = _single(np.where(rng.random((2, nz, ny, nx)) < 0.3, rng.uniform(0.003, 0.01, (2, nz, ny, nx)), 2e-4))
    ssa = _single(np.where(ext > 1e-3, rng.uniform(0.8, 1.0, ext.shape), 1.0))
    ssa[1, 2] = np.where(ext[1, 2] > 1e-3, ssa[1, 2], 0.95)
    ext[:, 5], ssa[:, 5] = 1e-4, 1.0  # a uniform layer on top
    alb = np.full((2, ny, nx), 0.25)
    z_edge = np.linspace(0.0, 1200.0, nz + 1)
    u = _direction(55, 160)
    czi = np.array([0, 2, 4, 6])
    absorbed, direct, source, cum, trans, ray_xy = direct_beam(ext, ssa, alb, z_edge, 100.0, 100.0, u, 1, czi,
                                                               weights=[0.7, 0.3], tile=2)
    per_ray = 2
    cells = np.zeros((2, nz, ny, nx))
    for r in range(ray_xy.shape[0]):
        t, _, scattered, cell = _plain_ray(ext, ssa, z_edge, 100.0, 100.0, *ray_xy[r], u)
        np.testing.assert_allclose(per_ray * source[:, r], scattered + 0.25 * t, rtol=2e-3, atol=1e-5)
        np.testing.assert_allclose(per_ray * trans[:, r, -1], t, rtol=2e-3, atol=1e-6)  # slot -1: the surface
        cells += cell / per_ray
    weighted = np.array([0.7, 0.3])[:, None, None, None] * cells
    np.testing.assert_allclose(absorbed, weighted.sum(axis=0), rtol=3e-3, atol=1e-7)
    # A column's absorption is that of its cells, wherever the rays absorbed in them land.
    np.testing.assert_allclose(direct[1], weighted.sum(axis=1), rtol=3e-3, atol=1e-7)
    np.testing.assert_allclose(direct[1].sum(axis=0), absorbed.sum(axis=0), rtol=1e-9, atol=1e-15)
