"""Ray geometry on the periodic cell grid and the direct beam (numba kernels).

The direct solar beam is attenuated along exact slant paths (Beer-Lambert law) through
the cells, with periodic horizontal wrap.  Every batch of photons traces its own direct
beam: ``nsub x nsub`` parallel rays land in every surface column, one at a uniformly
random point of each of the column's ``nsub x nsub`` equal strata (stratified random
sampling).  Every batch's direct flux is then an unbiased estimate for every column,
whatever the cloud edges do inside it, a column under a horizontally uniform sky still
receives exactly ``exp(-tau/mu0)``, and the errors of different columns are independent.
Energy removed from the beam in a cell is split into absorption, ``(1 - omega) dE``, and
a scattering source, ``omega dE``, from which the batch's Monte Carlo photons start; the
direct beam reaching the surface is absorbed, ``(1 - A) T``, or reflected into a
Lambertian source, ``A T``.  Horizontally uniform layers above the clouds (and uniform
conservative layers below them) are crossed without walking their cells
(:func:`uniform_slabs`).
"""

import math

import numpy as np
from numba import njit

from ._kernel import KERNEL
from ._records import Slabs
from ._rng import uniform

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
def wrap_into(pos, length):
    """``pos`` moved by whole periods into [0, length)."""
    pos -= length * math.floor(pos / length)
    return pos if pos < length else 0.0


@njit(cache=True, inline="always")
def ray_entry(r, nx, ny, nsub, dx, dy, offset, reach):
    """Top-of-domain entry point (x, y) [m] of direct-beam ray ``r``.

    Ray ``r`` lands in column ``r // nsub**2`` (``iy * nx + ix``), in its stratum
    ``((r // nsub) % nsub, r % nsub)`` along (y, x), at ``offset`` (x, y), in [0, 1) of
    the stratum's sides.  ``reach`` (x, y) is the horizontal distance [m] the beam travels
    from the top of the domain to the surface; the entry point lies that far upsun,
    wrapped into the periodic domain.
    """
    c = r % nsub
    a = (r // nsub) % nsub
    col = r // (nsub * nsub)
    x = (col % nx + (c + offset[0]) / nsub) * dx - reach[0]
    y = (col // nx + (a + offset[1]) / nsub) * dy - reach[1]
    return wrap_into(x, nx * dx), wrap_into(y, ny * dy)


@njit(cache=True, inline="always")
def _apply_pending(trans, pending, source, b, r):
    # Attenuate band b of the beam by the optical depth of the conservative cells crossed
    # since the last update; all it removed is scattered (the source of ray r).
    if pending[b] > 0.0:
        t_out = trans[b] * math.exp(-pending[b])
        source[b, r] += trans[b] - t_out
        trans[b] = t_out
        pending[b] = 0.0


@njit(cache=True, inline="always")
def _enter_top_slab(trans, pending, source, r, ray_cum, ray_trans, kept, slabs, wray):
    """Ray ``r`` through the uniform layers on top: every path through them crosses the same
    optical depth, so their transmission and scattered source are the slab's precomputed
    ones (:func:`uniform_slabs`), read at the kept layer edges ``kept`` (slot, edge index)."""
    top, top_t, top_s = slabs.top, slabs.top_transmission, slabs.top_source
    for b in range(trans.shape[0]):
        trans[b] = wray * top_t[b, top]
        source[b, r] = wray * top_s[b, top]
        pending[b] = 0.0
        for j in range(kept.shape[0]):
            edge = kept[j, 1]
            if edge >= top:
                ray_cum[b, r, kept[j, 0]] = wray * top_s[b, edge]
                ray_trans[b, r, kept[j, 0]] = wray * top_t[b, edge]


@njit(cache=True, inline="always")
def _cross_bottom_slab(trans, source, r, ray_cum, ray_trans, kept, slabs):
    """Ray ``r`` through the uniform conservative layers below ``bottom``: the beam falls by the
    slab's precomputed transmission and all it loses is scattered (:func:`uniform_slabs`)."""
    bottom, bottom_t = slabs.bottom, slabs.bottom_transmission
    for b in range(trans.shape[0]):
        for j in range(kept.shape[0]):
            edge = kept[j, 1]
            if edge < bottom:
                ray_cum[b, r, kept[j, 0]] = source[b, r] + trans[b] * (1.0 - bottom_t[b, edge])
                ray_trans[b, r, kept[j, 0]] = trans[b] * bottom_t[b, edge]
        t_out = trans[b] * bottom_t[b, 0]
        source[b, r] += trans[b] - t_out
        trans[b] = t_out


@njit(cache=True, inline="always")
def _uniform_layer_absorption(weights, slabs, direct, cell, scale):
    """Direct-beam absorption of the uniform layers on top: the beam reaches them undiminished
    by any cloud, so every cell of such a layer absorbs the same, its exact expectation (rays
    through it would only sample where it falls)."""
    top, absorbed = slabs.top, slabs.top_absorption
    ny, nx = cell.shape[1], cell.shape[2]
    for b in range(weights.shape[0]):
        for k in range(top, absorbed.shape[1]):
            a = weights[b] * absorbed[b, k]
            if a > 0.0:
                units = np.int64(a * scale + 0.5)
                for iy in range(ny):
                    for ix in range(nx):
                        cell[k, iy, ix] += units
                        direct[1, b, iy, ix] += a


@njit(**KERNEL)
def direct_beam_batch(state, optics, grid, beam, slabs, tables, tallies):
    """Trace one batch's direct beam along slant paths with periodic wrap.

    Parameters
    ----------
    state : uint64 (4,)
        The batch's random stream: every ray lands at a point drawn uniformly from its
        stratum with two uniforms.
    optics : surrogate3d.solvers._records.Optics
        ``kext``, ``ssa_g``, ``albedo`` and ``band_weight`` are read.
    grid : surrogate3d.solvers._records.Grid
        ``z_edge``, ``dx`` and ``dy`` are read.
    beam : surrogate3d.solvers._records.Beam
        Direction, rays per column and axis, reach, ``edge_slot`` and ``kept`` are read.
    slabs : surrogate3d.solvers._records.Slabs
        The horizontally uniform layers from ``top`` up and below ``bottom`` (those also
        conservative), which rays cross without walking their cells (:func:`uniform_slabs`).
    tables : surrogate3d.solvers._records.BeamTables
        ``ray_xy``, ``source``, ``ray_cum`` and ``ray_trans`` are written: the ray tables let
        a photon find its starting block without re-tracing the ray (sources in units of
        one column's incident flux in the band); ``direct`` is added to, per column;
        ``work`` is scratch (the beam left and the optical depth of conservative cells
        not yet applied).
    tallies : surrogate3d.solvers._records.Tallies
        The solar-weighted absorbed direct flux of every cell is added to ``cell``.
    """
    kext, ssa_g, alb, weights = optics.kext, optics.ssa_g, optics.albedo, optics.band_weight
    z_edge, dx, dy = grid.z_edge, grid.dx, grid.dy
    ux, uy, uz, nsub, edge_slot, kept = beam.ux, beam.uy, beam.uz, beam.nsub, beam.edge_slot, beam.kept
    reach = (beam.reach_x, beam.reach_y)
    ray_xy, source, ray_cum, ray_trans = tables.ray_xy, tables.source, tables.ray_cum, tables.ray_trans
    direct, work, cell, scale = tables.direct, tables.work, tallies.cell, tallies.scale
    nb, nz, ny, nx = kext.shape
    nray = nx * ny * nsub * nsub
    wray = 1.0 / (nsub * nsub)
    mu0 = -uz
    top, bottom = slabs.top, slabs.bottom
    lx, ly = nx * dx, ny * dy
    above = (z_edge[nz] - z_edge[top]) / mu0  # path length through the uniform layers on top
    trans, pending = work[:nb], work[nb:2 * nb]
    _uniform_layer_absorption(weights, slabs, direct, cell, scale)
    for r in range(nray):
        x, y = ray_entry(r, nx, ny, nsub, dx, dy, (uniform(state), uniform(state)), reach)
        ray_xy[r, 0], ray_xy[r, 1] = x, y
        _enter_top_slab(trans, pending, source, r, ray_cum, ray_trans, kept, slabs, wray)
        iz = top - 1
        if iz >= bottom:
            # --- walk the cells of the layers between the uniform slabs
            x0, y0, z0 = wrap_into(x + above * ux, lx), wrap_into(y + above * uy, ly), z_edge[top]
            ix, iy = min(int(x0 / dx), nx - 1), min(int(y0 / dy), ny - 1)
            sx, dtx, tmx, sy, dty, tmy, tmz = descent_start(x0, y0, z0, ix, iy, iz, ux, uy, uz, dx, dy, z_edge)
            t = 0.0
            while True:
                tn = min(tmx, tmy, tmz)
                for b in range(nb):
                    k = float(kext[b, iz, iy, ix])
                    if k > 0.0:
                        w = float(ssa_g[b, iz, iy, ix, 0])
                        if w == 1.0:
                            # A conservative cell absorbs nothing and scatters all it removes, so
                            # its source only telescopes: one exponential for a run of such cells.
                            pending[b] += k * (tn - t)
                            continue
                        _apply_pending(trans, pending, source, b, r)
                        t_out = trans[b] * math.exp(-k * (tn - t))
                        removed = trans[b] - t_out
                        a = weights[b] * (1.0 - w) * removed
                        cell[iz, iy, ix] += np.int64(a * scale + 0.5)
                        direct[1, b, iy, ix] += a
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
                    if iz < bottom:
                        break
        for b in range(nb):
            _apply_pending(trans, pending, source, b, r)
        _cross_bottom_slab(trans, source, r, ray_cum, ray_trans, kept, slabs)
        if bottom > 0 or top == 0:
            # Where it lands: the column it was aimed at, up to round-off.
            ix = min(int(wrap_into(x + reach[0], lx) / dx), nx - 1)
            iy = min(int(wrap_into(y + reach[1], ly) / dy), ny - 1)
        for b in range(nb):
            _apply_pending(trans, pending, source, b, r)
            albedo = alb[b, iy, ix]
            source[b, r] += albedo * trans[b]
            direct[0, b, iy, ix] += weights[b] * trans[b]
            direct[2, b, iy, ix] += weights[b] * (1.0 - albedo) * trans[b]


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
def locate_source_3d(r, band, target, u, kext, ssa_g, z_edge, dx, dy, ux, uy, uz, czi, ray_xy, ray_cum, ray_trans):
    """Find where the scattered energy of ray ``r`` passes ``target``.

    The block holding the point comes from the ray's cumulative tables ``ray_cum`` and
    ``ray_trans`` (:class:`~surrogate3d.solvers._records.BeamTables`), kept at the layer
    edges ``czi`` (``Beam.table_edges``); only that block is re-traced (the ray entering
    the top at ``ray_xy[r]``).  ``kext`` and ``ssa_g`` are those of
    :class:`~surrogate3d.solvers._records.Optics`, ``z_edge``, ``dx``, ``dy`` those of
    :class:`~surrogate3d.solvers._records.Grid`, ``(ux, uy, uz)`` the beam's direction.
    The arrays come one by one, not as records, because this call is made for every photon
    and every field of a record crosses it: the records made the 3D solver 10 % slower.

    Returns ``(kind, x, y, z, ix, iy, iz)``: kind 0 is a scattering point in the atmosphere
    (position [m] sampled exactly from the attenuated beam inside the cell, using the
    uniform number ``u``), kind 1 a reflection point on the surface.
    """
    nz, ny, nx = kext.shape[1], kext.shape[2], kext.shape[3]
    ncz = czi.shape[0] - 1
    x0, y0 = ray_xy[r, 0], ray_xy[r, 1]
    lx, ly = nx * dx, ny * dy
    row = ray_cum[band, r]
    if target < row[ncz]:
        j = 0
        while j < ncz - 1 and row[j + 1] <= target:
            j += 1
        cz = ncz - 1 - j
        z = z_edge[czi[cz + 1]]
        path = (z_edge[nz] - z) / -uz
        x = wrap_into(x0 + path * ux, lx)
        y = wrap_into(y0 + path * uy, ly)
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
    path = (z_edge[nz] - z_edge[0]) / -uz
    x = wrap_into(x0 + path * ux, lx)
    y = wrap_into(y0 + path * uy, ly)
    return 1, x, y, z_edge[0], min(int(x / dx), nx - 1), min(int(y / dy), ny - 1), 0


@njit(**KERNEL)
def locate_source_column(col, band, target, u, props, alb, z_edge, mu0):
    """Independent-column version of :func:`locate_source_3d` (vertical column ``col``).

    ``props`` is :attr:`~surrogate3d.solvers._records.Optics.column_props`, ``alb`` the
    surface albedo, ``z_edge`` the layer edges [m], ``mu0`` the cosine of the solar zenith
    angle.  Returns ``(kind, z, iz)``.
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


def uniform_slabs(kext, ssa, z_edge, mu0):
    """The horizontally uniform layers the direct beam crosses without walking their cells.

    Every path through a layer whose cells all have one extinction ``k`` and albedo crosses
    the optical depth ``k dz / mu0`` (Beer-Lambert law), so a ray's transmission through a
    slab of such layers is known beforehand.  Above the highest non-uniform layer (clear
    air over the clouds) the beam is the same everywhere, and so are the slab's scattered
    source and its absorption per cell; below the lowest one only conservative layers
    qualify, where a ray's loss is all scattered.

    Parameters
    ----------
    kext, ssa : ndarray (nband, nz, ny, nx)
        Extinction [m-1] and single-scattering albedo, as the kernels trace them.
    z_edge : ndarray (nz + 1,)
        Layer edges [m].
    mu0 : float
        Cosine of the solar zenith angle.

    Returns
    -------
    surrogate3d.solvers._records.Slabs
        ``(top, bottom, top_transmission, top_source, bottom_transmission, top_absorption)``:
        every layer from ``top`` up is uniform in every band, every layer below ``bottom <=
        top`` uniform and conservative.  Per band (nband, nz + 1) and unit incident beam:
        the transmission from the domain top down to edge ``k >= top`` and the energy
        scattered above it; the transmission from edge ``bottom`` down to edge ``k <=
        bottom``; and (nband, nz) the absorption of layer ``k >= top``.
    """
    nb, nz = kext.shape[:2]
    flat_k = np.asarray(kext, dtype=np.float64).reshape(nb, nz, -1)
    flat_w = np.asarray(ssa, dtype=np.float64).reshape(nb, nz, -1)
    uniform = ((flat_k.min(axis=2) == flat_k.max(axis=2)) & (flat_w.min(axis=2) == flat_w.max(axis=2))).all(axis=0)
    conservative = uniform & (flat_w.min(axis=2) == 1.0).all(axis=0)
    top = nz
    while top > 0 and uniform[top - 1]:
        top -= 1
    bottom = 0
    while bottom < top and conservative[bottom]:
        bottom += 1
    k, w = flat_k[:, :, 0], flat_w[:, :, 0]
    tau = k * (np.diff(np.asarray(z_edge, dtype=np.float64)) / mu0)
    top_t, top_s = np.ones((nb, nz + 1)), np.zeros((nb, nz + 1))
    absorbed = np.zeros((nb, nz))
    for layer in range(nz - 1, top - 1, -1):
        removed = top_t[:, layer + 1] * -np.expm1(-tau[:, layer])
        top_t[:, layer] = top_t[:, layer + 1] - removed
        top_s[:, layer] = top_s[:, layer + 1] + w[:, layer] * removed
        absorbed[:, layer] = (1.0 - w[:, layer]) * removed
    bottom_t = np.ones((nb, nz + 1))
    for layer in range(bottom - 1, -1, -1):
        bottom_t[:, layer] = bottom_t[:, layer + 1] * np.exp(-tau[:, layer])
    return Slabs(int(top), int(bottom), top_t, top_s, bottom_t, absorbed)
