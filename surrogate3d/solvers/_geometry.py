"""Ray geometry on the periodic cell grid and the deterministic direct beam (numba kernels).

The direct solar beam is attenuated along exact slant paths (Beer-Lambert law) through
the cells, with periodic horizontal wrap.  Each top-of-domain column is sampled by
``nsub x nsub`` parallel rays; a regular lattice of ray entry points keeps exactly
``nsub**2`` rays landing in every surface column, so a clear sky gets a direct flux of
exactly ``exp(-tau/mu0)``.  Energy removed from the beam in a cell is split into
absorption, ``(1 - omega) dE``, and a scattering source, ``omega dE``, from which the
Monte Carlo photons start; the direct beam reaching the surface is absorbed,
``(1 - A) T``, or reflected into a Lambertian source, ``A T``.
"""

import math

import numpy as np
import numba
from numba import get_thread_id, njit, prange

from ._kernel import KERNEL

INF = math.inf


@njit(cache=True, inline="always")
def periodic_step(i, step, n):
    """Cell index one step on along an axis, wrapped periodically."""
    i += step
    if i == n:
        return 0
    return n - 1 if i < 0 else i


@njit(cache=True, inline="always")
def axis_start(u, iu, i, d, pos):
    """Step, distance between faces and distance to the first face along one axis of an
    incremental walk from ``pos`` in cell ``i`` of size ``d`` (direction cosine ``u``,
    its inverse ``iu``)."""
    if u > 0.0:
        return 1, d * iu, max(((i + 1) * d - pos) * iu, 0.0)
    if u < 0.0:
        return -1, -d * iu, max((i * d - pos) * iu, 0.0)
    return 0, INF, INF


@njit(cache=True, inline="always")
def descent_start(x, y, z, ix, iy, iz, ux, uy, uz, dx, dy, z_edge):
    """Set up a walk down a ray (``uz < 0``) from (x, y, z) in cell (iz, iy, ix).

    The walk is incremental (Amanatides and Woo 1987): the distances along the ray to the
    next x and y faces grow by one cell's crossing length per crossing, so no crossing
    divides.  Returns ``(sx, dtx, tmx, sy, dty, tmy, tmz)``: cell steps, distances between
    faces and distances to the next face for x and y, and the distance to the cell's bottom.
    """
    sx, dtx, tmx = axis_start(ux, 1.0 / ux if ux != 0.0 else 0.0, ix, dx, x)
    sy, dty, tmy = axis_start(uy, 1.0 / uy if uy != 0.0 else 0.0, iy, dy, y)
    return sx, dtx, tmx, sy, dty, tmy, max((z_edge[iz] - z) / uz, 0.0)


@njit(cache=True, inline="always")
def descent_cross(ix, iy, iz, sx, sy, dtx, dty, tmx, tmy, tmz, nx, ny, z0, uz, z_edge):
    """Cross the nearest face of a walk set up by :func:`descent_start` from height ``z0``,
    with periodic wrap; at a bottom face ``iz`` drops (to -1 at the surface).

    Returns ``(ix, iy, iz, tmx, tmy, tmz, axis)``, axis 0 x, 1 y, 2 z.
    """
    if tmx <= tmy and tmx <= tmz:
        return periodic_step(ix, sx, nx), iy, iz, tmx + dtx, tmy, tmz, 0
    if tmy <= tmz:
        return ix, periodic_step(iy, sy, ny), iz, tmx, tmy + dty, tmz, 1
    iz -= 1
    if iz >= 0:
        tmz = (z_edge[iz] - z0) / uz
    return ix, iy, iz, tmx, tmy, tmz, 2


@njit(cache=True, inline="always")
def ray_entry(r, nx, nsub, dx, dy):
    """Column indices and entry position (x, y) of direct-beam ray ``r`` at the domain top."""
    c = r % nsub
    a = (r // nsub) % nsub
    col = r // (nsub * nsub)
    ix = col % nx
    iy = col // nx
    return ix, iy, (ix + (c + 0.5) / nsub) * dx, (iy + (a + 0.5) / nsub) * dy


@njit(cache=True, inline="always")
def _apply_pending(trans, pending, source, b, r):
    # Attenuate band b of the beam by the optical depth of the conservative cells crossed
    # since the last update; all it removed is scattered (the source of ray r).
    if pending[b] > 0.0:
        t_out = trans[b] * math.exp(-pending[b])
        source[b, r] += trans[b] - t_out
        trans[b] = t_out
        pending[b] = 0.0


def direct_beam_3d(ext, ssa, alb, z_edge, dx, dy, ux, uy, uz, nsub, czi):
    """Trace the direct beam along slant paths with periodic wrap (see :func:`_direct_rays`)."""
    return _direct_rays(ext, ssa, alb, z_edge, dx, dy, ux, uy, uz, nsub, czi, numba.get_num_threads())


@njit(cache=True, parallel=True)
def _direct_rays(ext, ssa, alb, z_edge, dx, dy, ux, uy, uz, nsub, czi, nthreads):
    """Trace the direct beam along slant paths with periodic wrap.

    Parameters
    ----------
    ext, ssa : float64 (nband, nz, ny, nx)
        Extinction [m-1] and single-scattering albedo.
    alb : float64 (nband, ny, nx)
        Surface albedo.
    z_edge : float64 (nz + 1,)
        Layer edges [m].
    dx, dy : float
        Cell size [m].
    ux, uy, uz : float
        Beam direction (uz < 0).
    nsub : int
        Rays per column and axis.
    czi : int64 (ncz + 1,)
        Layer-edge indices where the cumulative tables are recorded (block edges).
    nthreads : int
        Numba threads in use (one fixed-point absorption array each).

    Returns
    -------
    absorbed : (nband, nz, ny, nx)
        Direct-beam absorption per cell, in units of one column's incident flux.
    surface : (nband, ny, nx)
        Direct flux reaching the surface per column (fraction of the incident flux).
    source : (nband, nray)
        Scattered plus surface-reflected direct-beam energy per ray.
    ray_cum, ray_trans : (nband, nray, ncz + 1)
        Scattered energy above, and direct beam left at, each block edge ``czi[ncz - j]``
        for ``j = 0 .. ncz`` (from the top down); they let a photon find its starting
        block without re-tracing the whole ray.
    """
    nb, nz, ny, nx = ext.shape
    ncz = czi.shape[0] - 1
    nray = nx * ny * nsub * nsub
    wray = 1.0 / (nsub * nsub)
    # Every ray fills its own entries (it crosses every layer edge below the top once), so
    # the tables are first touched, and paged in, by the threads in parallel.
    source = np.empty((nb, nray))
    ray_cum = np.empty((nb, nray, ncz + 1))
    ray_trans = np.empty((nb, nray, ncz + 1))
    ray_surface = np.empty((nb, nray))
    ray_column = np.empty(nray, dtype=np.int64)
    edge_slot = np.full(nz + 1, -1, dtype=np.int64)
    for j in range(ncz + 1):
        edge_slot[czi[ncz - j]] = j
    # Rays run in parallel.  Cells take absorption from many rays, so each thread sums into
    # its own fixed-point array (the whole beam maps to 2**61 units): integer sums give the
    # same total for any number of threads.
    scale = 2.0**61 / (nx * ny)
    absorbed_fixed = np.empty((nthreads, nb, nz, ny, nx), dtype=np.int64)
    ncell = nb * nz * ny * nx
    fixed = absorbed_fixed.reshape(nthreads, ncell)
    for c in prange(ncell):
        for i in range(nthreads):
            fixed[i, c] = 0
    # Per thread: the beam left, and the optical depth of conservative cells not yet applied
    # to it; padded, so that threads never share a cache line.
    trans_of_thread = np.empty((nthreads, 2 * nb + 16))
    for r in prange(nray):
        thread = get_thread_id()
        mine = absorbed_fixed[thread]
        trans = trans_of_thread[thread, :nb]
        pending = trans_of_thread[thread, nb:2 * nb]
        trans[:] = wray
        pending[:] = 0.0
        ix, iy, x, y = ray_entry(r, nx, nsub, dx, dy)
        iz = nz - 1
        z0 = z_edge[nz]
        for b in range(nb):
            source[b, r] = 0.0
            ray_cum[b, r, 0] = 0.0
            ray_trans[b, r, 0] = wray
        sx, dtx, tmx, sy, dty, tmy, tmz = descent_start(x, y, z0, ix, iy, iz, ux, uy, uz, dx, dy, z_edge)
        t = 0.0
        while True:
            tn = min(tmx, tmy, tmz)
            for b in range(nb):
                k = ext[b, iz, iy, ix]
                if k > 0.0:
                    w = ssa[b, iz, iy, ix]
                    if w == 1.0:
                        # A conservative cell absorbs nothing and scatters all it removes, so
                        # its source only telescopes: one exponential for a run of such cells.
                        pending[b] += k * (tn - t)
                        continue
                    _apply_pending(trans, pending, source, b, r)
                    t_out = trans[b] * math.exp(-k * (tn - t))
                    removed = trans[b] - t_out
                    mine[b, iz, iy, ix] += np.int64((1.0 - w) * removed * scale + 0.5)
                    source[b, r] += w * removed
                    trans[b] = t_out
            t = tn
            ix, iy, iz, tmx, tmy, tmz, axis = descent_cross(ix, iy, iz, sx, sy, dtx, dty, tmx, tmy, tmz, nx, ny,
                                                            z0, uz, z_edge)
            if axis == 2:
                j = edge_slot[iz + 1]
                if j >= 0:
                    for b in range(nb):
                        _apply_pending(trans, pending, source, b, r)
                        ray_cum[b, r, j] = source[b, r]
                        ray_trans[b, r, j] = trans[b]
                if iz < 0:
                    break
        ray_column[r] = iy * nx + ix
        for b in range(nb):
            _apply_pending(trans, pending, source, b, r)
            ray_surface[b, r] = trans[b]
            source[b, r] += alb[b, iy, ix] * trans[b]
    surface = np.zeros((nb, ny, nx))
    for r in range(nray):
        iy, ix = ray_column[r] // nx, ray_column[r] % nx
        for b in range(nb):
            surface[b, iy, ix] += ray_surface[b, r]
    absorbed = np.empty((nb, nz, ny, nx))
    flat = absorbed.reshape(ncell)
    for c in prange(ncell):
        total = fixed[0, c]
        for i in range(1, nthreads):
            total += fixed[i, c]
        flat[c] = total / scale
    return absorbed, surface, source, ray_cum, ray_trans


@njit(cache=True, inline="always")
def _near_cell(pos, i, d, length):
    # The periodic image of pos nearest to cell i, held inside the cell against round-off.
    lo = i * d
    pos -= length * math.floor((pos - lo - 0.5 * d) / length + 0.5)
    return min(max(pos, lo), lo + d)


@njit(cache=True, inline="always")
def _point_in_cell(x, y, z, t, ux, uy, uz, ix, iy, iz, dx, dy, lx, ly, z_edge):
    """The point a distance ``t`` down the ray from (x, y, z), which the walk found in cell
    (iz, iy, ix): wrapped into the domain and kept in that cell against round-off."""
    return (_near_cell(x + t * ux, ix, dx, lx), _near_cell(y + t * uy, iy, dy, ly),
            min(max(z + t * uz, z_edge[iz]), z_edge[iz + 1]))


@njit(**KERNEL)
def locate_source_3d(r, band, target, kext, alb, z_edge, dx, dy, ux, uy, uz, nsub, u, ssa_g, czi,
                     ray_cum, ray_trans):
    """Find where the scattered energy of ray ``r`` passes ``target``.

    The block holding the point comes from the ray's cumulative tables; only that block
    is re-traced.  ``kext`` is the float32 extinction (nband, nz, ny, nx) and ``ssa_g``
    the float32 (nband, nz, ny, nx, 2) single-scattering albedo and asymmetry.
    Returns ``(kind, x, y, z, ix, iy, iz)``: kind 0 is a scattering point in the
    atmosphere (position sampled exactly from the attenuated beam inside the cell,
    using the uniform number ``u``), kind 1 a reflection point on the surface.
    """
    nz, ny, nx = kext.shape[1], kext.shape[2], kext.shape[3]
    ncz = czi.shape[0] - 1
    ex, ey, x0, y0 = ray_entry(r, nx, nsub, dx, dy)
    lx, ly = nx * dx, ny * dy
    row = ray_cum[band, r]
    if target < row[ncz]:
        j = 0
        while j < ncz - 1 and row[j + 1] <= target:
            j += 1
        cz = ncz - 1 - j
        z = z_edge[czi[cz + 1]]
        path = (z_edge[nz] - z) / -uz
        x = (x0 + path * ux) % lx
        y = (y0 + path * uy) % ly
        ix = min(int(x / dx), nx - 1)
        iy = min(int(y / dy), ny - 1)
        iz = czi[cz + 1] - 1
        trans = ray_trans[band, r, j]
        cum = row[j]
        sx, dtx, tmx, sy, dty, tmy, tmz = descent_start(x, y, z, ix, iy, iz, ux, uy, uz, dx, dy, z_edge)
        t = 0.0
        last_ix, last_iy, last_iz = -1, -1, -1
        last_t = 0.0
        while True:
            tn = min(tmx, tmy, tmz)
            seg = tn - t
            k = float(kext[band, iz, iy, ix])
            if k > 0.0:
                kt = k * seg
                t_out = trans * math.exp(-kt)
                gain = float(ssa_g[band, iz, iy, ix, 0]) * (trans - t_out)
                if gain > 0.0:
                    if cum + gain > target:
                        if kt < 1e-9:
                            s = u * seg
                        else:
                            s = -math.log1p(u * math.expm1(-kt)) / k
                        px, py, pz = _point_in_cell(x, y, z, t + min(s, seg), ux, uy, uz, ix, iy, iz, dx, dy, lx, ly,
                                                    z_edge)
                        return 0, px, py, pz, ix, iy, iz
                    cum += gain
                    last_ix, last_iy, last_iz = ix, iy, iz
                    last_t = t + 0.5 * seg
                trans = t_out
            t = tn
            ix, iy, iz, tmx, tmy, tmz, _ = descent_cross(ix, iy, iz, sx, sy, dtx, dty, tmx, tmy, tmz, nx, ny, z, uz,
                                                         z_edge)
            if iz < 0:
                break
        if last_ix >= 0:
            # Round-off left the target just beyond the block's sum: use the last source cell.
            px, py, pz = _point_in_cell(x, y, z, last_t, ux, uy, uz, last_ix, last_iy, last_iz, dx, dy, lx, ly,
                                        z_edge)
            return 0, px, py, pz, last_ix, last_iy, last_iz
    path = z_edge[nz] / -uz
    x = (x0 + path * ux) % lx
    y = (y0 + path * uy) % ly
    return 1, x, y, 0.0, min(int(x / dx), nx - 1), min(int(y / dy), ny - 1), 0


@njit(**KERNEL)
def locate_source_column(col, band, target, props, alb, z_edge, mu0, u):
    """Independent-column version of :func:`locate_source_3d` (vertical column ``col``).

    ``props`` is the packed float32 (nband, ny, nx, nz, 3) column layout.
    Returns ``(kind, z, iz)``.
    """
    nx, nz = props.shape[2], props.shape[3]
    ix = col % nx
    iy = col // nx
    column = props[band, iy, ix]
    trans = 1.0
    cum = 0.0
    last = -1
    for iz in range(nz - 1, -1, -1):
        k = float(column[iz, 0])
        if k <= 0.0:
            continue
        path = (z_edge[iz + 1] - z_edge[iz]) / mu0
        kt = k * path
        t_out = trans * math.exp(-kt)
        gain = float(column[iz, 1]) * (trans - t_out)
        if gain > 0.0:
            if cum + gain > target:
                if kt < 1e-9:
                    s = u * path
                else:
                    s = -math.log1p(u * math.expm1(-kt)) / k
                return 0, max(z_edge[iz + 1] - min(s, path) * mu0, z_edge[iz]), iz
            cum += gain
            last = iz
        trans = t_out
    if alb[band, iy, ix] * trans > 0.0 or last < 0:
        return 1, 0.0, 0
    return 0, 0.5 * (z_edge[last] + z_edge[last + 1]), last
