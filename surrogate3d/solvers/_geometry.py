"""Ray geometry on the periodic cell grid and the direct beam (numba kernels).

The direct solar beam is attenuated along exact slant paths (Beer-Lambert law) through
the cells, with periodic horizontal wrap.  Every batch of photons traces its own direct
beam: ``nsub x nsub`` parallel rays land in every surface column, one at a uniformly
random point of each of the column's ``nsub x nsub`` equal strata (stratified random
sampling).  The random points are drawn per *tile* position, not per column: the columns
form a periodic pattern of ``tile x tile`` tiles, and all columns at the same place in
their tile (``ix % tile``, ``iy % tile``) have their rays at the same points of their
strata.  Parallel rays at the same place in their columns cross the same sequence of
cell faces, so each such family is traced once per batch, as a list of segments (layer,
column offset, length; :func:`trace_segments`), and every column's ray is read off the
list.  Every column still sees a ray at a uniformly random point of each stratum, so
every batch's direct flux is an unbiased estimate for every column, whatever the cloud
edges do inside it, and the columns of one tile (an 800 m host column of 100 m cells, for
instance) have independent errors; a column under a horizontally uniform sky still
receives exactly ``exp(-tau/mu0)``.  Energy removed from the beam in a cell is split into
absorption, ``(1 - omega) dE``, and a scattering source, ``omega dE``, from which the
batch's Monte Carlo photons start; the direct beam reaching the surface is absorbed,
``(1 - A) T``, or reflected into a Lambertian source, ``A T``.  Horizontally uniform
layers above the clouds (and uniform conservative layers below them) are crossed without
walking their cells (:func:`uniform_slabs`).
"""

import math

import numpy as np
from numba import njit

from ._kernel import KERNEL
from ._records import Slabs
from ._rng import uniform

INF = math.inf
#: Rays per stratum of a column: a random point and its mirror image through the stratum's
#: centre (antithetic variates).
RAYS_PER_STRATUM = 2


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


def max_segments(nz_walked, height, ux, uy, uz, dx, dy):
    """Most segments a ray can have across ``nz_walked`` layers of total ``height`` [m]:
    one per layer, plus one per x or y face crossed along its horizontal travel (at most
    ``floor(travel / d) + 1`` on each axis), plus a margin for ties at cell corners."""
    path = height / -uz
    return int(nz_walked + math.floor(path * abs(ux) / dx) + math.floor(path * abs(uy) / dy) + 4)


@njit(cache=True)
def trace_segments(ox, oy, ux, uy, uz, dx, dy, nx, ny, z_edge, top, bottom, edge_slot, cells, lengths):
    """The cells a direct-beam ray crosses between edges ``top`` and ``bottom``, relative to its column.

    The ray lands on the surface at the point ``(ox dx, oy dy)`` of column (0, 0), ``ox``
    and ``oy`` in [0, 1).  Every parallel ray landing at the same point of its own column
    (iy0, ix0) crosses the same cells shifted by (iy0, ix0) with periodic wrap, along the
    same lengths, so this one list serves them all.  The walk is incremental (Amanatides
    and Woo 1987), the same walk as :func:`locate_source_3d`'s.

    Parameters
    ----------
    ox, oy : float
        Landing point in the column, fractions of its sides.
    ux, uy, uz : float
        Direction of travel (``uz < 0``).
    dx, dy : float
        Cell size [m].
    nx, ny : int
        Columns along x and y.
    z_edge : float64 (nz + 1,)
        Layer edges [m].
    top, bottom : int
        The ray is walked from edge ``top`` down to edge ``bottom`` (the layers in between).
    edge_slot : int64 (nz + 1,)
        Slot of the per-ray tables at every layer edge (-1 where none is kept).
    cells : int32 (>= n, 4)
        Written: per segment the layer, the column offsets along y and x (in ``[0, ny)``
        and ``[0, nx)``, to add to the landing column's indices modulo ``ny`` and ``nx``)
        and the table slot of the layer edge the segment ends on (-1: none, or not on an edge).
    lengths : float64 (>= n,)
        Written: the length of every segment [m].

    Returns
    -------
    int
        ``n``, the number of segments.
    """
    lx, ly = nx * dx, ny * dy
    iz = top - 1
    if iz < bottom:
        return 0
    z0 = z_edge[top]
    path = (z0 - z_edge[0]) / -uz
    x0, y0 = wrap_into(ox * dx - path * ux, lx), wrap_into(oy * dy - path * uy, ly)
    ix, iy = min(int(x0 / dx), nx - 1), min(int(y0 / dy), ny - 1)
    sx, dtx, tmx, sy, dty, tmy, tmz = descent_start(x0, y0, z0, ix, iy, iz, ux, uy, uz, dx, dy, z_edge)
    t = 0.0
    n = 0
    while True:
        tn = min(tmx, tmy, tmz)
        cells[n, 0], cells[n, 1], cells[n, 2], cells[n, 3] = iz, iy, ix, -1
        lengths[n] = tn - t
        t = tn
        ix, iy, iz, tmx, tmy, tmz, axis = descent_cross(ix, iy, iz, sx, sy, dtx, dty, tmx, tmy, tmz, nx, ny, z0, uz,
                                                        z_edge)
        if axis == 2:
            cells[n, 3] = edge_slot[iz + 1]
        n += 1
        if iz < bottom or n == cells.shape[0]:
            return n


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


def tile_sides(nx, ny, tile):
    """Columns per side ``(gx, gy)`` of the tiles of the direct beam's ray families: the
    largest divisors of ``nx`` and ``ny`` not above ``tile`` (the tiles fill the domain)."""
    return (max(d for d in range(1, min(tile, nx) + 1) if nx % d == 0),
            max(d for d in range(1, min(tile, ny) + 1) if ny % d == 0))


def sweep_tables(kext, ssa, bottom, top, gx, gy):
    """The cells the direct beam sweeps (the layers between the uniform slabs), by place in the tiles.

    Parameters
    ----------
    kext, ssa : ndarray (nband, nz, ny, nx)
        Extinction [m-1] and single-scattering albedo, as the kernels trace them.
    bottom, top : int
        The swept layers are ``bottom <= iz < top``.
    gx, gy : int
        Tile sides (:func:`tile_sides`).

    Returns
    -------
    conservative : float32 (nband, top - bottom, gy, gx, ny // gy, nx // gx)
        ``[b, iz - bottom, iy % gy, ix % gx, iy // gy, ix // gx]``: the extinction of the
        conservative cells, 0 in absorbing ones.  The columns at one place of their tiles
        are contiguous, so a family of rays reads its cells in order.
    absorbing_start : int64 (nband * (top - bottom) * gy * gx + 1,)
        Where the absorbing cells of every (band, layer, place in the tiles), in that order,
        start in the next two arrays.
    absorbing_cell : int32 (n, 2)
        Their ``(iy // gy, ix // gx)``.
    absorbing_optics : float64 (n, 2)
        Their extinction [m-1] and single-scattering albedo.
    """
    nb, nz, ny, nx = kext.shape
    nw = top - bottom

    def by_place(a):
        return np.ascontiguousarray(a[:, bottom:top].reshape(nb, nw, ny // gy, gy, nx // gx, gx)
                                    .transpose(0, 1, 3, 5, 2, 4))

    k, w = by_place(np.asarray(kext, dtype=np.float32)), by_place(np.asarray(ssa, dtype=np.float32))
    absorbing = (w < 1.0) & (k > 0.0)
    conservative = np.where(absorbing, np.float32(0.0), k)
    counts = absorbing.reshape(nb * nw * gy * gx, (ny // gy) * (nx // gx)).sum(axis=1)
    start = np.concatenate([[0], np.cumsum(counts)]).astype(np.int64)
    where = np.nonzero(absorbing)  # row-major: grouped by (band, layer, place), as start says
    cells = np.column_stack([where[4], where[5]]).astype(np.int32)
    optics = np.column_stack([k[where], w[where]]).astype(np.float64)
    return conservative, start, cells.reshape(-1, 2), optics.reshape(-1, 2)


@njit(**KERNEL)
def direct_beam_batch(state, optics, grid, beam, slabs, tables, tallies):
    """Trace one batch's direct beam along slant paths with periodic wrap.

    The columns form tiles of ``gy x gx`` (:func:`tile_sides`).  A *family* is one stratum
    of one place in the tiles: the batch draws one landing point uniformly in the family's
    stratum, the same for all its columns, traces it once (:func:`trace_segments`), and then
    sweeps the family's columns segment by segment (the same cells shifted, contiguous in
    ``beam.sweep_ext``), keeping every ray's transmission, source and the optical depth of
    conservative cells not yet applied; the family's absorbing cells are visited from the
    lists of absorbing cells (``beam.absorbing_*``), so the sweep of the conservative
    ones has no branch.

    Parameters
    ----------
    state : uint64 (4,)
        The batch's random stream: every family's landing point is drawn with two uniforms
        (x, then y), family by family.
    optics : surrogate3d.solvers._records.Optics
        ``ssa_g``, ``albedo`` and ``band_weight`` are read (``kext`` for its shape).
    grid : surrogate3d.solvers._records.Grid
        ``z_edge``, ``dx`` and ``dy`` are read.
    beam : surrogate3d.solvers._records.Beam
        Direction, rays per column and axis, tile sides, reach, ``edge_slot``, ``kept`` and
        the sweep tables (:func:`sweep_tables`) are read.
    slabs : surrogate3d.solvers._records.Slabs
        The horizontally uniform layers from ``top`` up and below ``bottom`` (those also
        conservative), which rays cross without walking their cells (:func:`uniform_slabs`).
    tables : surrogate3d.solvers._records.BeamTables
        ``ray_xy``, ``source``, ``ray_cum`` and ``ray_trans`` are written: the ray tables let
        a photon find its starting block without re-tracing the ray (sources in units of
        one column's incident flux in the band); ``direct`` is added to, per column;
        ``landing``, ``seg_cells`` and ``seg_lengths`` receive the families; ``sweep`` is
        scratch.
    tallies : surrogate3d.solvers._records.Tallies
        The solar-weighted absorbed direct flux of every cell is added to ``cell``.
    """
    ssa_g, alb, weights = optics.ssa_g, optics.albedo, optics.band_weight
    z_edge, dx, dy = grid.z_edge, grid.dx, grid.dy
    ux, uy, uz, nsub, edge_slot, kept = beam.ux, beam.uy, beam.uz, beam.nsub, beam.edge_slot, beam.kept
    ksub, a_start, a_cell, a_optics = beam.sweep_ext, beam.absorbing_start, beam.absorbing_cell, beam.absorbing_optics
    ray_xy, source, ray_cum, ray_trans = tables.ray_xy, tables.source, tables.ray_cum, tables.ray_trans
    landing, cells, lengths = tables.landing, tables.seg_cells, tables.seg_lengths
    direct, cell, scale = tables.direct, tallies.cell, tallies.scale
    nb, nz, ny, nx = optics.kext.shape
    gx, gy = beam.tile_x, beam.tile_y
    nqx, nqy = nx // gx, ny // gy
    per_column = RAYS_PER_STRATUM * nsub * nsub
    wray = 1.0 / per_column
    top, bottom = slabs.top, slabs.bottom
    top_t, top_s, bottom_t = slabs.top_transmission, slabs.top_source, slabs.bottom_transmission
    lx, ly = nx * dx, ny * dy
    sweep = tables.sweep[:, :nqy * nqx]
    pend, trans, src = sweep[0], sweep[1], sweep[2]
    # The kept edges run down from the top (slot 0): slots before ``above`` lie in the top
    # slab, slots from ``below`` on in the bottom one.
    above, below = 0, kept.shape[0]
    while above < kept.shape[0] and kept[above, 1] >= top:
        above += 1
    while below > 0 and kept[below - 1, 1] < bottom:
        below -= 1
    _uniform_layer_absorption(weights, slabs, direct, cell, scale)
    for m in range(gy * gx * per_column):
        s = m % per_column
        fx, fy = (m // per_column) % gx, (m // per_column) // gx
        if s % 2 == 0:
            u, v = uniform(state), uniform(state)
        else:
            u, v = 1.0 - u, 1.0 - v  # the antithetic partner: the stratum's point mirrored through its centre
        ox, oy = ((s // 2) % nsub + u) / nsub, ((s // 2) // nsub + v) / nsub
        landing[m, 0], landing[m, 1] = ox, oy
        nseg = trace_segments(ox, oy, ux, uy, uz, dx, dy, nx, ny, z_edge, top, bottom, edge_slot, cells, lengths)
        # Ray of the family's column number c = qy nqx + qx, (jy, jx) = (qy gy + fy, qx gx + fx):
        # r = r0 + qy row_step + qx col_step.
        r0, row_step, col_step = (fy * nx + fx) * per_column + s, gy * nx * per_column, gx * per_column
        x0 = wrap_into((fx + ox) * dx - beam.reach_x, lx)
        y = wrap_into((fy + oy) * dy - beam.reach_y, ly)
        for qy in range(nqy):
            x = x0
            for qx in range(nqx):
                r = r0 + qy * row_step + qx * col_step
                ray_xy[r, 0], ray_xy[r, 1] = x, y
                x += gx * dx
                if x >= lx:
                    x -= lx
            y += gy * dy
            if y >= ly:
                y -= ly
        for b in range(nb):
            t_top, s_top = wray * top_t[b, top], wray * top_s[b, top]
            for qy in range(nqy):
                for qx in range(nqx):
                    c = qy * nqx + qx
                    pend[c], trans[c], src[c] = 0.0, t_top, s_top
                    r = r0 + qy * row_step + qx * col_step
                    for j in range(above):
                        ray_cum[b, r, kept[j, 0]] = wray * top_s[b, kept[j, 1]]
                        ray_trans[b, r, kept[j, 0]] = wray * top_t[b, kept[j, 1]]
            for q in range(nseg):
                # --- segment q of every ray of the family: the same cells, shifted
                iz, length = cells[q, 0], lengths[q]
                py, px = (fy + cells[q, 1]) % gy, (fx + cells[q, 2]) % gx
                sy, sx = ((fy + cells[q, 1]) // gy) % nqy, ((fx + cells[q, 2]) // gx) % nqx
                place = ((b * (top - bottom) + iz - bottom) * gy + py) * gx + px
                for e in range(a_start[place], a_start[place + 1]):
                    # An absorbing cell: apply the conservative run before it, then split what
                    # the cell removes into absorption (in the cell and its column) and source.
                    qy2, qx2 = a_cell[e, 0], a_cell[e, 1]
                    qy, qx = qy2 - sy, qx2 - sx
                    if qy < 0:
                        qy += nqy
                    if qx < 0:
                        qx += nqx
                    c = qy * nqx + qx
                    t_in = trans[c]
                    if pend[c] > 0.0:
                        t_in *= math.exp(-pend[c])
                        src[c] += trans[c] - t_in
                        pend[c] = 0.0
                    t_out = t_in * math.exp(-a_optics[e, 0] * length)
                    removed = t_in - t_out
                    w = a_optics[e, 1]
                    a = weights[b] * (1.0 - w) * removed
                    iy, ix = qy2 * gy + py, qx2 * gx + px
                    cell[iz, iy, ix] += np.int64(a * scale + 0.5)
                    direct[1, b, iy, ix] += a  # the column the absorbing cell is in
                    src[c] += w * removed
                    trans[c] = t_out
                plane = ksub[b, iz - bottom, py, px]
                for qy in range(nqy):
                    # A conservative cell absorbs nothing and scatters all it removes, so its
                    # source only telescopes: one exponential for a run of such cells.
                    qy2 = qy + sy
                    if qy2 >= nqy:
                        qy2 -= nqy
                    row, acc = plane[qy2], pend[qy * nqx:(qy + 1) * nqx]
                    for qx in range(nqx - sx):
                        acc[qx] += length * row[qx + sx]
                    for qx in range(nqx - sx, nqx):
                        acc[qx] += length * row[qx + sx - nqx]
                j = cells[q, 3]
                if j >= 0:
                    for qy in range(nqy):
                        for qx in range(nqx):
                            c = qy * nqx + qx
                            t_out = trans[c] * math.exp(-pend[c])
                            src[c] += trans[c] - t_out
                            trans[c], pend[c] = t_out, 0.0
                            r = r0 + qy * row_step + qx * col_step
                            ray_cum[b, r, j] = src[c]
                            ray_trans[b, r, j] = t_out
            for qy in range(nqy):
                jy = qy * gy + fy
                for qx in range(nqx):
                    c = qy * nqx + qx
                    jx = qx * gx + fx
                    r = r0 + qy * row_step + qx * col_step
                    t_in = trans[c] * math.exp(-pend[c])
                    cum = src[c] + trans[c] - t_in
                    # --- the uniform conservative layers below: all they remove is scattered
                    for j in range(below, kept.shape[0]):
                        ray_cum[b, r, kept[j, 0]] = cum + t_in * (1.0 - bottom_t[b, kept[j, 1]])
                        ray_trans[b, r, kept[j, 0]] = t_in * bottom_t[b, kept[j, 1]]
                    t_sfc = t_in * bottom_t[b, 0]
                    albedo = alb[b, jy, jx]
                    source[b, r] = cum + t_in - t_sfc + albedo * t_sfc
                    direct[0, b, jy, jx] += weights[b] * t_sfc
                    direct[2, b, jy, jx] += weights[b] * (1.0 - albedo) * t_sfc


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
