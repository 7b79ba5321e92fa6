"""Photon transport kernels for the solar Monte Carlo solver (numba).

Photons start where their batch's direct beam scatters (or is reflected by the
surface) and are traced until they leave the top of the domain or are absorbed:

* free paths are sampled exactly: in 3D by delta tracking over a grid of majorant blocks,
  with one-step crossings of clear-air cubes of blocks and of the clear slabs above and
  below the clouds (Woodcock et al. 1965; the majorant grid of Villefranque et al. 2019);
  in independent-column mode the photon stays in its column and walks its layers one by one;
* Henyey-Greenstein scattering (Henyey and Greenstein 1941), Lambertian surface;
* absorption by weight, ``w (1 - omega)`` per collision and ``w (1 - A)`` per surface
  hit, while the weight is at least a threshold; below it the expected absorption
  ``w (1 - omega)`` (or ``w (1 - A)``) is still tallied, and an unbiased Russian roulette
  then keeps the photon with probability ``omega`` (or ``A``) at unchanged weight.  Every
  collision in an absorbing cell thus adds to that cell's absorption, so even a nearly
  conservative cloud gets a tally (and a standard error) in every column it absorbs in;
  energy closes in expectation, not in every run.

Column tallies of a batch, per band, in a flat (nband, 5 ny nx) slot (:func:`slot_index`):
planes of the upward flux at the top (column ``j`` at ``j``), of the absorption in the
atmospheric column and of the direct flux reaching the surface, then the surface's pairs
(diffuse flux reaching it, flux it absorbs) side by side.  A photon leaving at the top
touches one line of a plane of 8 bytes per column, a surface hit one line of the 16-byte
pairs.  The upward flux at the surface is what reaches it minus what it absorbs, and is
formed per batch when the batches are summed (:func:`run_batches`, whose sums are
(..., 6) in the order :data:`SUM_NAMES`).

Every batch is a complete, independent estimate: in 3D it traces its own direct beam with
stratified random rays (:func:`surrogate3d.solvers._geometry.direct_beam_batch`) and its
photons start from that beam's scattering source.  The spread between batches then
measures the noise of every tally, the direct beam's included.
"""

import math
from collections import namedtuple

import numpy as np
from numba import get_thread_id, njit, prange

from ._geometry import RAYS_PER_STRATUM, axis_start, direct_beam_batch, locate_source_3d, locate_source_column
from ._kernel import KERNEL
from ._records import BeamTables, Photon, Survival, Tallies
from ._rng import seed_stream, uniform, uniform_open

TOA_UP, ATM_ABS, SFC_DIR, SFC_DOWN, SFC_ABS = 0, 1, 2, 3, 4
#: Smallest absorption tallied at a collision, relative to the photon's weight.  A smaller
#: expected absorption ``a`` is tallied as this quantum ``q`` with probability ``a / q``:
#: unbiased, and in nearly conservative cloud it writes to the tallies at one collision in
#: a hundred (every write is a cache miss in the cell tallies) instead of every collision.
ABSORPTION_QUANTUM = 0.01
N_TALLIES = 5
#: The column sums of :func:`run_batches`, in order.
SUM_NAMES = ("toa_upward", "surface_downward_direct", "surface_downward_diffuse", "surface_upward",
             "atmosphere_absorbed", "surface_absorbed")


@njit(cache=True, inline="always", error_model="numpy")
def slot_index(tally, j, ncol):
    """Index of ``tally`` of column ``j`` (``iy * nx + ix``, of ``ncol``) in a batch slot."""
    if tally < SFC_DOWN:
        return tally * ncol + j
    return 3 * ncol + 2 * j + (tally - SFC_DOWN)


@njit(cache=True, inline="always", error_model="numpy")
def _add(col, b, tally, iy, ix, columns, v):
    # Add v to a tally of column (iy, ix); ``columns`` is any array ending in (ny, nx).
    ny, nx = columns.shape[-2], columns.shape[-1]
    col[b, slot_index(tally, iy * nx + ix, ny * nx)] += v


@njit(cache=True, inline="always", error_model="numpy")
def hg_cosine(g, xi):
    """Scattering-angle cosine sampled from the Henyey-Greenstein phase function."""
    if abs(g) < 1e-6:
        return 2.0 * xi - 1.0
    half_over_g = 0.5 / g  # computed alongside s, which keeps one division off the chain
    s = (1.0 - g * g) / (1.0 - g + 2.0 * g * xi)
    mu = (1.0 + g * g - s * s) * half_over_g
    return min(1.0, max(-1.0, mu))


@njit(cache=True, inline="always", error_model="numpy")
def random_azimuth(state):
    """Cosine and sine of a uniform random azimuth, without trigonometric functions.

    A point uniform in the unit disk (by rejection from its square) has a uniform polar
    angle ``phi``, and ``(a^2 - b^2) / s, 2ab / s`` are the cosine and sine of ``2 phi``
    (von Neumann 1951).
    """
    while True:
        a = 2.0 * uniform(state) - 1.0
        c = 2.0 * uniform(state) - 1.0
        s = a * a + c * c
        if 0.0 < s <= 1.0:
            inv = 1.0 / s
            return (a * a - c * c) * inv, 2.0 * a * c * inv


@njit(cache=True, inline="always", error_model="numpy")
def rotate(ux, uy, uz, mu, cp, sp):
    """Direction at polar cosine ``mu`` and azimuth (cosine ``cp``, sine ``sp``) about (ux, uy, uz)."""
    sint = math.sqrt(max(0.0, 1.0 - mu * mu))
    if abs(uz) > 0.99999:
        sign = 1.0 if uz > 0.0 else -1.0
        return sint * cp, sint * sp * sign, mu * uz
    den = math.sqrt(1.0 - uz * uz)
    f = sint / den
    nx = f * (ux * uz * cp - uy * sp) + ux * mu
    ny = f * (uy * uz * cp + ux * sp) + uy * mu
    nz = -sint * cp * den + uz * mu
    # No renormalisation: rounding changes |u| by a random walk of ~1e-16 per event,
    # and a square root and a division here would lengthen every collision.
    return nx, ny, nz


@njit(cache=True, inline="always", error_model="numpy")
def lambertian_up(state):
    """Upward direction from a Lambertian (cosine-weighted) distribution."""
    mu = math.sqrt(uniform(state))
    cp, sp = random_azimuth(state)
    s = math.sqrt(max(0.0, 1.0 - mu * mu))
    return s * cp, s * sp, max(mu, 1e-12)


@njit(cache=True, inline="always", error_model="numpy")
def _not_flat(uz):
    # A photon exactly parallel to the layers would never cross a face.
    if uz == 0.0:
        return 1e-12
    return uz


@njit(cache=True, inline="always", error_model="numpy")
def _deposit(cell, scale, iz, iy, ix, a):
    # Fixed point: integer sums do not depend on the order of the deposits, so every thread
    # can keep one tally array and the total is the same for any number of threads.
    cell[iz, iy, ix] += np.int64(a * scale + 0.5)


@njit(cache=True, inline="always", error_model="numpy")
def _absorb_in_cell(tallies, b, iz, iy, ix, a):
    _deposit(tallies.cell, tallies.scale, iz, iy, ix, a)
    _add(tallies.col, b, ATM_ABS, iy, ix, tallies.cell, a)


@njit(cache=True, inline="always", error_model="numpy")
def _collide(state, w, om, g, iz, iy, ix, b, events, survival, ux, uy, uz, tallies):
    """Absorption (by weight, or expected value and roulette) and Henyey-Greenstein scattering
    of a photon of weight ``w`` at its ``events``-th collision, in cell (iz, iy, ix) of
    single-scattering albedo ``om`` and asymmetry ``g``.

    Returns ``(alive, w, ux, uy, uz)``.
    """
    if om < 1.0:
        a = w * (1.0 - om)
        q = ABSORPTION_QUANTUM * w
        if a >= q:
            _absorb_in_cell(tallies, b, iz, iy, ix, a)
        elif uniform(state) * q < a:
            _absorb_in_cell(tallies, b, iz, iy, ix, q)
        if w >= survival.threshold:
            w -= a
            if w <= 0.0:
                return False, w, ux, uy, uz
        elif uniform(state) >= om:
            return False, w, ux, uy, uz
    if events >= survival.max_events:
        _absorb_in_cell(tallies, b, iz, iy, ix, w)
        return False, w, ux, uy, uz
    mu = hg_cosine(g, uniform(state))
    cp, sp = random_azimuth(state)
    ux, uy, uz = rotate(ux, uy, uz, mu, cp, sp)
    return True, w, ux, uy, _not_flat(uz)


@njit(cache=True, inline="always", error_model="numpy")
def _surface(state, w, b, iy, ix, thresh, alb, col):
    """Diffuse arrival at the Lambertian surface: tally, absorb, reflect.  Returns ``(alive, w)``."""
    _add(col, b, SFC_DOWN, iy, ix, alb, w)
    albedo = alb[b, iy, ix]
    a = w * (1.0 - albedo)
    _add(col, b, SFC_ABS, iy, ix, alb, a)
    if w >= thresh:
        w -= a
        return w > 0.0, w
    return uniform(state) < albedo, w


@njit(cache=True, inline="always", error_model="numpy")
def next_face(x, y, z, ux, uy, uz, ix, iy, iz, dx, dy, z_edge, full_3d):
    """Distance [m] to the face of cell ``(iz, iy, ix)`` a flight in direction ``u`` reaches first,
    and its axis (0: x, 1: y, 2: z; only z when not ``full_3d``), at least 0 (the cell-by-cell
    walks of the thermal kernels)."""
    t = ((z_edge[iz + 1] if uz > 0.0 else z_edge[iz]) - z) / uz
    axis = 2
    if full_3d:
        if ux != 0.0:
            tx = ((ix + 1) * dx - x if ux > 0.0 else ix * dx - x) / ux
            if tx < t:
                t, axis = tx, 0
        if uy != 0.0:
            ty = ((iy + 1) * dy - y if uy > 0.0 else iy * dy - y) / uy
            if ty < t:
                t, axis = ty, 1
    return max(t, 0.0), axis


@njit(cache=True, inline="always", error_model="numpy")
def cross_side(axis, t, x, y, z, ux, uy, uz, ix, iy, nx, ny, dx, dy):
    """Fly ``t`` [m] to the x (``axis`` 0) or y (1) face of the cell and into the next column of
    the periodic grid: ``(x, y, z, ix, iy)`` after the crossing, the position set exactly on
    the face (the cell-by-cell walks of the thermal kernels)."""
    if axis == 0:
        y += t * uy
        z += t * uz
        if ux > 0.0:
            ix += 1
            if ix == nx:
                ix = 0
            x = ix * dx
        else:
            x = ix * dx
            ix -= 1
            if ix < 0:
                ix = nx - 1
                x = nx * dx
    else:
        x += t * ux
        z += t * uz
        if uy > 0.0:
            iy += 1
            if iy == ny:
                iy = 0
            y = iy * dy
        else:
            y = iy * dy
            iy -= 1
            if iy < 0:
                iy = ny - 1
                y = ny * dy
    return x, y, z, ix, iy


@njit(cache=True, inline="always", error_model="numpy")
def _wrap(pos, length):
    # A loop, not %, which is slow and rarely needed: flights seldom cross the domain.
    while pos >= length:
        pos -= length
    while pos < 0.0:
        pos += length
    return pos


@njit(cache=True, inline="always", error_model="numpy")
def _wrap_far(pos, length):
    # Flights across a clear slab can be many domain lengths long.
    if 0.0 <= pos < length:
        return pos
    pos -= length * math.floor(pos / length)
    return pos if pos < length else 0.0


@njit(cache=True, inline="always", error_model="numpy")
def _inverse(u):
    # Only used where u != 0 (the sign branches guard every use).
    return 1.0 / u if u != 0.0 else 0.0


@njit(cache=True, inline="always", error_model="numpy")
def _clamp(i, lo, hi):
    if i < lo:
        return lo
    if i > hi:
        return hi
    return i


@njit(cache=True, inline="always", error_model="numpy")
def _interval_in(z, edges, lo, hi):
    # The interval (layer, or block row) of the rising ``edges`` holding z, from lo to hi.
    i = lo
    while i < hi and z >= edges[i + 1]:
        i += 1
    return i


@njit(cache=True, inline="always", error_model="numpy")
def _leave_cube(u, ib, r, size):
    """Block index and face coordinate after leaving the cube of radius ``r`` around
    block ``ib`` along an axis of direction cosine ``u`` (block size ``size``)."""
    if u > 0.0:
        ib += r + 1
        return ib, ib * size
    ib -= r + 1
    return ib, (ib + 1) * size


@njit(cache=True, inline="always", error_model="numpy")
def _block_near(pos, inv_size, ib, r):
    # The block under pos, kept inside the cube of radius r around ib against round-off.
    return _clamp(int(math.floor(pos * inv_size)), ib - r, ib + r)


@njit(cache=True, inline="always", error_model="numpy")
def _periodic(ib, pos, n, length):
    # Back into the periodic domain: a cube is at most half the domain, so one shift does.
    if ib >= n:
        return ib - n, pos - length
    if ib < 0:
        return ib + n, pos + length
    return ib, pos


@njit(cache=True, inline="always", error_model="numpy")
def _tentative(state, w, b, iz, iy, ix, k_major, optics, events, survival, ux, uy, uz, tallies):
    """A tentative collision of delta tracking in cell (iz, iy, ix): null with probability
    ``1 - k / k_major``, else real (absorption and scattering by :func:`_collide`).

    Returns ``(real, alive, w, ux, uy, uz)``.
    """
    kf = optics.kext[b, iz, iy, ix]
    if kf < k_major and uniform(state) * k_major >= kf:
        return False, True, w, ux, uy, uz
    ssa_g = optics.ssa_g
    alive, w, ux, uy, uz = _collide(state, w, ssa_g[b, iz, iy, ix, 0], ssa_g[b, iz, iy, ix, 1], iz, iy, ix, b,
                                    events + 1, survival, ux, uy, uz, tallies)
    return True, alive, w, ux, uy, uz


@njit(cache=True, inline="always", error_model="numpy")
def _fine_cell(x, ib, b_cells, inv_d):
    # The cell under x, kept inside block ib against round-off.
    return _clamp(int(x * inv_d), ib * b_cells, ib * b_cells + b_cells - 1)


@njit(cache=True, inline="always", error_model="numpy")
def _boundary(state, w, b, iy, ix, up, thresh, alb, col):
    """A photon reaching the top (tallied, gone) or the surface (:func:`_surface`, and a
    Lambertian direction if reflected).  Returns ``(alive, w, ux, uy, uz)``."""
    if up:
        _add(col, b, TOA_UP, iy, ix, alb, w)
        return False, w, 0.0, 0.0, 1.0
    alive, w = _surface(state, w, b, iy, ix, thresh, alb, col)
    if not alive:
        return False, w, 0.0, 0.0, 1.0
    ux, uy, uz = lambertian_up(state)
    return True, w, ux, uy, uz


@njit(cache=True, inline="always", error_model="numpy")
def _next_block(ib, step, n, origin, length):
    """The next block along an axis (periodic), and the walk's origin shifted with a wrap so
    that positions computed from it stay inside the domain."""
    ib += step
    if ib == n:
        return 0, origin - length
    if ib < 0:
        return n - 1, origin + length
    return ib, origin


@njit(cache=True, inline="always", error_model="numpy")
def _face(u, ib, size):
    # The face through which a walk along direction cosine u has just entered block ib.
    return ib * size if u > 0.0 else (ib + 1) * size


@njit(cache=True, inline="always", error_model="numpy")
def _face_distance(u, iu, ib, r, size, pos):
    # Distance along the flight to the face of the cube of radius r around block ib.
    if u > 0.0:
        return ((ib + r + 1) * size - pos) * iu
    if u < 0.0:
        return ((ib - r) * size - pos) * iu
    return math.inf


@njit(cache=True, inline="always", error_model="numpy")
def _code(bcode, b, k, j, i):
    # The four-bit code of block (k, j, i): two per byte, the even block in the low half.
    return (bcode[b, k, j, i >> 1] >> ((i & 1) << 2)) & 15


#: What a 3D walk reads of the grid for one band, with the block sizes derived from it
#: (built once per photon: the step helpers take it instead of a dozen arguments).
_Blocks = namedtuple("_Blocks", ["zb", "kmaj", "bcode", "kclear", "slab_lo", "slab_hi", "nbx", "nby", "nbz",
                                 "bdx", "bdy", "inv_bdx", "inv_bdy", "lx", "ly"])


@njit(cache=True, inline="always", error_model="numpy")
def _blocks(grid, b):
    nbz, nby, nbx = grid.kmaj.shape[1], grid.kmaj.shape[2], grid.kmaj.shape[3]
    bdx, bdy = grid.bx * grid.dx, grid.by * grid.dy
    return _Blocks(grid.zb, grid.kmaj, grid.bcode, grid.kclear[b], grid.clear_below[b], grid.clear_above[b],
                   nbx, nby, nbz, bdx, bdy, 1.0 / bdx, 1.0 / bdy, nbx * bdx, nby * bdy)


@njit(cache=True, inline="always", error_model="numpy")
def _walk_blocks(blocks, b, code, x, y, z, ux, uy, uz, iux, iuy, iuz, ibx, iby, ibz, tau):
    """A run of single-block steps from block (ibz, iby, ibx) of code 0 or 1, walked
    incrementally (Amanatides and Woo 1987): each crossing adds one block's length to one
    axis' face distance, and the position is only brought up to date where the run ends.

    The run ends in a tentative collision (``axis`` 3: the optical depth ``tau`` is used
    up, at the rate ``k_major`` of the block it ends in), or on the face (``axis`` 0 x,
    1 y, 2 z) into a clear slab, out of the domain or into a cube of clear blocks
    (``code`` > 1).  Returns ``(x, y, z, ibx, iby, ibz, tau, axis, code, k_major)``.
    """
    zb, kmaj, bcode = blocks.zb, blocks.kmaj, blocks.bcode
    nbx, nby, lx, ly = blocks.nbx, blocks.nby, blocks.lx, blocks.ly
    k_major = kmaj[b, ibz, iby, ibx] if code == 0 else blocks.kclear
    sx, dtx, tmx = axis_start(ux, iux, ibx, blocks.bdx, x)
    sy, dty, tmy = axis_start(uy, iuy, iby, blocks.bdy, y)
    tmz = max(((zb[ibz + 1] if uz > 0.0 else zb[ibz]) - z) * iuz, 0.0)
    sz = 1 if uz > 0.0 else -1
    x0, y0, z0 = x, y, z
    t = 0.0
    while True:
        tn = min(tmx, tmy, tmz)
        d = k_major * (tn - t)
        if d > tau:
            t += tau / k_major
            axis = 3
            break
        tau -= d
        t = tn
        if tmx <= tmy and tmx <= tmz:
            ibx, x0 = _next_block(ibx, sx, nbx, x0, lx)
            tmx += dtx
            axis = 0
        elif tmy <= tmz:
            iby, y0 = _next_block(iby, sy, nby, y0, ly)
            tmy += dty
            axis = 1
        else:
            ibz += sz
            axis = 2
            if ibz < blocks.slab_lo or ibz >= blocks.slab_hi:
                break  # into a clear slab, or out of the domain
            tmz = ((zb[ibz + 1] if uz > 0.0 else zb[ibz]) - z0) * iuz
        code = _code(bcode, b, ibz, iby, ibx)
        if code == 0:
            k_major = kmaj[b, ibz, iby, ibx]
        elif code == 1:
            k_major = blocks.kclear
        else:
            break  # into a cube of clear blocks
    x = _face(ux, ibx, blocks.bdx) if axis == 0 else x0 + t * ux
    y = _face(uy, iby, blocks.bdy) if axis == 1 else y0 + t * uy
    z = (zb[ibz] if uz > 0.0 else zb[ibz + 1]) if axis == 2 else z0 + t * uz
    return x, y, z, ibx, iby, ibz, tau, axis, code, k_major


@njit(cache=True, inline="always", error_model="numpy")
def _cross_slab(state, blocks, x, y, z, ux, uy, uz, iuz, ibz, tau):
    """One step across the clear slab (above the highest or below the lowest cloud) that
    block row ``ibz`` belongs to, at the clear-air rate, whatever the horizontal travel.

    Returns ``(x, y, z, ibx, iby, ibz, tau, hit, z_lo, z_hi)``: ``hit`` says the step ends
    in a tentative collision inside the slab of block rows ``z_lo .. z_hi`` (a fresh
    ``tau`` drawn), else it ends on the slab's face, in block row ``ibz`` beyond it.
    """
    kc, zb, nbz = blocks.kclear, blocks.zb, blocks.nbz
    z_lo, z_hi = (0, blocks.slab_lo - 1) if ibz < blocks.slab_lo else (blocks.slab_hi, nbz - 1)
    z_face = zb[z_hi + 1] if uz > 0.0 else zb[z_lo]
    t = max((z_face - z) * iuz, 0.0)
    if kc * t > tau:
        s = tau / kc
        z += s * uz
        tau = -math.log(uniform_open(state))
    else:
        tau -= kc * t
        s = t
        z = z_face
    x = _wrap_far(x + s * ux, blocks.lx)
    y = _wrap_far(y + s * uy, blocks.ly)
    ibx = min(int(x * blocks.inv_bdx), blocks.nbx - 1)
    iby = min(int(y * blocks.inv_bdy), blocks.nby - 1)
    hit = s < t
    if not hit:
        ibz = z_hi + 1 if uz > 0.0 else z_lo - 1
    return x, y, z, ibx, iby, ibz, tau, hit, z_lo, z_hi


@njit(cache=True, inline="always", error_model="numpy")
def _cross_cube(state, blocks, code, x, y, z, ux, uy, uz, iux, iuy, iuz, ibx, iby, ibz, tau):
    """One step across the cube of clear blocks of radius ``code - 1`` around block
    (ibz, iby, ibx), at the clear-air rate.

    Returns ``(x, y, z, ibx, iby, ibz, tau, hit, z_lo, z_hi)``: ``hit`` says the step ends
    in a tentative collision inside the cube, whose block rows are ``z_lo .. z_hi`` (a
    fresh ``tau`` drawn), else it ends on the cube's face, in block (ibz, iby, ibx) beyond it.
    """
    kc, zb, nbz = blocks.kclear, blocks.zb, blocks.nbz
    bdx, bdy, inv_bdx, inv_bdy = blocks.bdx, blocks.bdy, blocks.inv_bdx, blocks.inv_bdy
    r = code - 1
    z_lo = ibz - r if ibz > r else 0
    z_hi = ibz + r if ibz + r < nbz else nbz - 1
    tx = _face_distance(ux, iux, ibx, r, bdx, x)
    ty = _face_distance(uy, iuy, iby, r, bdy, y)
    tz = ((zb[z_hi + 1] if uz > 0.0 else zb[z_lo]) - z) * iuz
    t = max(min(tx, ty, tz), 0.0)
    if kc * t > tau:
        s = tau / kc
        x = _wrap(x + s * ux, blocks.lx)
        y = _wrap(y + s * uy, blocks.ly)
        z += s * uz
        tau = -math.log(uniform_open(state))
        ibx = min(int(x * inv_bdx), blocks.nbx - 1)
        iby = min(int(y * inv_bdy), blocks.nby - 1)
        return x, y, z, ibx, iby, ibz, tau, True, z_lo, z_hi
    tau -= kc * t
    x += t * ux
    y += t * uy
    z += t * uz
    if tx <= ty and tx <= tz:
        ibx, x = _leave_cube(ux, ibx, r, bdx)
        iby = _block_near(y, inv_bdy, iby, r)
        ibz = _interval_in(z, zb, z_lo, z_hi)
    elif ty <= tz:
        iby, y = _leave_cube(uy, iby, r, bdy)
        ibx = _block_near(x, inv_bdx, ibx, r)
        ibz = _interval_in(z, zb, z_lo, z_hi)
    else:
        ibx = _block_near(x, inv_bdx, ibx, r)
        iby = _block_near(y, inv_bdy, iby, r)
        if uz > 0.0:
            ibz = z_hi + 1
            z = zb[ibz]
        else:
            ibz = z_lo - 1
            z = zb[z_lo]
    ibx, x = _periodic(ibx, x, blocks.nbx, blocks.lx)
    iby, y = _periodic(iby, y, blocks.nby, blocks.ly)
    return x, y, z, ibx, iby, ibz, tau, False, z_lo, z_hi


@njit(**KERNEL)
def transport_3d(state, photon, optics, grid, survival, tallies):
    """Trace one photon in 3D (a :class:`~surrogate3d.solvers._records.Photon`); returns
    its scattering events.

    Free paths are sampled by delta tracking (Woodcock et al. 1965) over the majorant
    blocks of ``grid`` (:class:`~surrogate3d.solvers._records.Grid`): inside a block,
    tentative collisions come at the block's largest extinction ``kmaj`` (or at the
    clear-air rate ``kclear`` where the block's code is 1), and are real with probability
    ``kext / rate``, which is exact (Villefranque et al. 2019).  With blocks of one cell
    every tentative collision in cloud is real, and the walk is a plain cell-by-cell
    traversal.  A step is one of three modes:

    * a run of single blocks (:func:`_walk_blocks`);
    * across a clear slab, the block rows clear in every column below the lowest and
      above the highest cloud (:func:`_cross_slab`), in one step whatever its horizontal
      travel;
    * across a cube of clear blocks (block code ``r + 1 > 1``: every block within ``r``
      blocks is clear air; :func:`_cross_cube`).

    ``optics`` (:class:`~surrogate3d.solvers._records.Optics`) gives the cells' ``kext``
    and ``ssa_g`` and the surface albedo; ``survival`` and ``tallies`` are the batch's.
    """
    b, w = photon.band, photon.weight
    x, y, z, ux, uy, uz = photon.x, photon.y, photon.z, photon.ux, photon.uy, photon.uz
    ix, iy, iz = photon.ix, photon.iy, photon.iz
    ssa_g, alb, z_edge = optics.ssa_g, optics.albedo, grid.z_edge
    bx, by, bedge = grid.bx, grid.by, grid.bedge
    blocks = _blocks(grid, b)
    zb, nbz, kc = blocks.zb, blocks.nbz, blocks.kclear
    cell_walk = bx == 1 and by == 1 and nbz == optics.kext.shape[1]
    inv_dx, inv_dy = 1.0 / grid.dx, 1.0 / grid.dy
    ibx, iby = ix // bx, iy // by
    ibz = 0
    while bedge[ibz + 1] <= iz:
        ibz += 1
    events = 0
    uz = _not_flat(uz)
    iux, iuy, iuz = _inverse(ux), _inverse(uy), 1.0 / uz
    tau = -math.log(uniform_open(state))
    z_lo = z_hi = 0  # the clear-air block rows of the current slab or cube step
    while True:
        in_slab = ibz < blocks.slab_lo or ibz >= blocks.slab_hi
        code = 2 if in_slab else _code(blocks.bcode, b, ibz, iby, ibx)
        if code < 2:
            x, y, z, ibx, iby, ibz, tau, axis, code, k_major = _walk_blocks(blocks, b, code, x, y, z, ux, uy, uz,
                                                                             iux, iuy, iuz, ibx, iby, ibz, tau)
            if axis == 3:
                tau = -math.log(uniform_open(state))
                # Handled here, not in the shared clear-air tail below: routing the hot
                # collision through that tail measured about 6 % slower.
                if cell_walk and code == 0:
                    real = True
                    alive, w, ux, uy, uz = _collide(state, w, ssa_g[b, ibz, iby, ibx, 0], ssa_g[b, ibz, iby, ibx, 1],
                                                    ibz, iby, ibx, b, events + 1, survival, ux, uy, uz, tallies)
                else:
                    ix, iy = _fine_cell(x, ibx, bx, inv_dx), _fine_cell(y, iby, by, inv_dy)
                    iz = _interval_in(z, z_edge, bedge[ibz], bedge[ibz + 1] - 1)
                    real, alive, w, ux, uy, uz = _tentative(state, w, b, iz, iy, ix, k_major, optics, events,
                                                            survival, ux, uy, uz, tallies)
                if real:
                    events += 1
                    if not alive:
                        return events
                    iux, iuy, iuz = _inverse(ux), _inverse(uy), 1.0 / uz
                continue
            hit = False
        elif in_slab:
            x, y, z, ibx, iby, ibz, tau, hit, z_lo, z_hi = _cross_slab(state, blocks, x, y, z, ux, uy, uz, iuz,
                                                                        ibz, tau)
        else:
            x, y, z, ibx, iby, ibz, tau, hit, z_lo, z_hi = _cross_cube(state, blocks, code, x, y, z, ux, uy, uz,
                                                                        iux, iuy, iuz, ibx, iby, ibz, tau)
        if hit:
            # --- a tentative collision in clear air (slab or cube), at rate kc
            ibz = _interval_in(z, zb, z_lo, z_hi)
            ix, iy = _fine_cell(x, ibx, bx, inv_dx), _fine_cell(y, iby, by, inv_dy)
            iz = _interval_in(z, z_edge, bedge[ibz], bedge[ibz + 1] - 1)
            real, alive, w, ux, uy, uz = _tentative(state, w, b, iz, iy, ix, kc, optics, events, survival, ux, uy,
                                                    uz, tallies)
            if real:
                events += 1
                if not alive:
                    return events
                iux, iuy, iuz = _inverse(ux), _inverse(uy), 1.0 / uz
            continue
        if 0 <= ibz < nbz:
            continue
        # --- out through the top, or onto the surface
        ix, iy = _fine_cell(x, ibx, bx, inv_dx), _fine_cell(y, iby, by, inv_dy)
        alive, w, ux, uy, uz = _boundary(state, w, b, iy, ix, ibz == nbz, survival.threshold, alb, tallies.col)
        if not alive:
            return events
        ibz = 0
        z = zb[0]
        iux, iuy, iuz = _inverse(ux), _inverse(uy), 1.0 / uz
        tau = -math.log(uniform_open(state))


@njit(**KERNEL)
def transport_column(state, photon, props, alb, z_edge, survival, tallies):
    """Trace one photon (a :class:`~surrogate3d.solvers._records.Photon`) confined to its
    column as if the column extended to infinity horizontally; returns its scattering events.

    ``props`` is :attr:`~surrogate3d.solvers._records.Optics.column_props` (a column's
    layers contiguous), ``alb`` the surface albedo, ``z_edge`` the layer edges [m]: three
    arrays, not the records, because the fields of a record all cross the call, and
    this call is made for every photon.
    """
    b, w, z, ux, uy, uz = photon.band, photon.weight, photon.z, photon.ux, photon.uy, photon.uz
    ix, iy, iz = photon.ix, photon.iy, photon.iz
    nz = props.shape[3]
    column = props[b, iy, ix]
    events = 0
    uz = _not_flat(uz)
    tau = -math.log(uniform_open(state))
    while True:
        if uz > 0.0:
            t = (z_edge[iz + 1] - z) / uz
        else:
            t = (z_edge[iz] - z) / uz
        t = max(t, 0.0)
        cellp = column[iz]
        k = cellp[0]
        if k * t > tau:
            z += (tau / k) * uz
            tau = -math.log(uniform_open(state))
            events += 1
            alive, w, ux, uy, uz = _collide(state, w, cellp[1], cellp[2], iz, iy, ix, b, events, survival, ux, uy,
                                            uz, tallies)
            if not alive:
                return events
            continue
        tau -= k * t
        if uz > 0.0:
            if iz == nz - 1:
                _add(tallies.col, b, TOA_UP, iy, ix, alb, w)
                return events
            iz += 1
            z = z_edge[iz]
        elif iz > 0:
            iz -= 1
            z = z_edge[iz + 1]
        else:
            z = z_edge[0]
            alive, w = _surface(state, w, b, iy, ix, survival.threshold, alb, tallies.col)
            if not alive:
                return events
            ux, uy, uz = lambertian_up(state)
            tau = -math.log(uniform_open(state))


@njit(cache=True, inline="always", error_model="numpy")
def _next_above(cdf, k, last, u):
    """The first index after ``k`` (``cdf[k] <= u``) where the rising ``cdf`` exceeds ``u``,
    at most ``last``.  Galloping from ``k``: consecutive stratified photons draw nearby
    sources, so this touches a few neighbouring entries where a search of the whole rest
    of the table would jump across it."""
    lo, step = k, 1
    while lo + step <= last and cdf[lo + step] <= u:
        lo += step
        step *= 2
    hi = min(lo + step, last + 1)
    return min(lo + 1 + np.searchsorted(cdf[lo + 1:hi], u, side="right"), last)


@njit(cache=True, inline="always")
def _add_deviation(sums, sumsq, pivot, first, m, v):
    # Sums of a batch value's deviation from the first batch's, and of its square: the
    # variance from them does not lose the digits that sums of raw squares would.
    if first:
        pivot[m] = v
    d = v - pivot[m]
    sums[m] += d
    sumsq[m] += d * d


@njit(cache=True, inline="always")
def _cumulate(source, weights, cdf):
    # The cumulative table of the solar-weighted source over (band, ray); returns its total.
    nb, nray = source.shape
    total = 0.0
    for b in range(nb):
        for r in range(nray):
            total += source[b, r] * weights[b]
            cdf[b * nray + r] = total
    return total


@njit(**KERNEL)
def _run_batch(state, batch, run, optics, grid, beam, slabs, tables, tallies):
    """Trace batch number ``batch`` into ``tallies`` (its own column slot, and the cell
    tallies it shares with the other batches of its thread), drawing from the random stream
    ``state`` (uint64, seeded here for the batch); returns the scattering events.

    In 3D the batch first traces its own direct beam (:func:`direct_beam_batch`) into
    ``tables``, with ray positions drawn from its stream, crossing the uniform ``slabs``
    without walking them, and builds its cumulative table ``tables.cdf``.  Independent
    columns share the exact direct beam of every column (``tables.cdf`` and
    ``tables.direct`` are then ``beam.column_cdf`` and ``beam.column_direct``).  The batch
    adds the direct beam's surface, column-absorbed and surface-absorbed flux,
    ``tables.direct``, to its tallies.
    """
    band_weight, alb, cdf, column_direct = optics.band_weight, optics.albedo, tables.cdf, tables.direct
    batch_size = run.batch_size
    nb, ny, nx = alb.shape
    ncol = ny * nx
    col = tallies.col
    seed_stream(state, run.seed, batch)
    if run.full_3d:
        direct_beam_batch(state, optics, grid, beam, slabs, tables, tallies)
        total = _cumulate(tables.source, band_weight, cdf)
    else:
        total = cdf[-1]
    nrays = cdf.shape[0] // nb
    for b in range(nb):
        for j in range(ncol):
            col[b, slot_index(SFC_DIR, j, ncol)] += column_direct[0, b, j // nx, j % nx]
            col[b, slot_index(ATM_ABS, j, ncol)] += column_direct[1, b, j // nx, j % nx]
            col[b, slot_index(SFC_ABS, j, ncol)] += column_direct[2, b, j // nx, j % nx]
    if not total > 0.0:
        return 0
    w = total / batch_size
    survival = Survival(run.roulette * w, run.max_events)
    ux0, uy0, uz0 = beam.ux, beam.uy, beam.uz
    mu0 = -uz0
    events = 0
    last = cdf.shape[0] - 1
    k = 0
    for i in range(batch_size):
        # Stratified: photon i draws its source from the i-th of batch_size equal slices of
        # the source distribution.  Still unbiased, less noisy, and consecutive photons
        # start in neighbouring rays, whose cells are then already in the cache.
        u = (i + uniform(state)) / batch_size * total
        if k < last and cdf[k] <= u:
            k = _next_above(cdf, k, last, u)
        below = cdf[k - 1] if k > 0 else 0.0
        b = k // nrays
        r = k - b * nrays
        target = (u - below) / band_weight[b]
        v = uniform(state)
        if run.full_3d:
            kind, x, y, z, ix, iy, iz = locate_source_3d(r, b, target, v, optics.kext, optics.ssa_g, grid.z_edge,
                                                         grid.dx, grid.dy, ux0, uy0, uz0, beam.table_edges,
                                                         tables.ray_xy, tables.ray_cum, tables.ray_trans)
            if kind == 0:
                events += 1
                mu = hg_cosine(optics.ssa_g[b, iz, iy, ix, 1], uniform(state))
                cp, sp = random_azimuth(state)
                ux, uy, uz = rotate(ux0, uy0, uz0, mu, cp, sp)
            else:
                ux, uy, uz = lambertian_up(state)
            events += transport_3d(state, Photon(b, w, x, y, z, ux, uy, uz, ix, iy, iz), optics, grid, survival,
                                   tallies)
        else:
            kind, z, iz = locate_source_column(r, b, target, v, optics.column_props, alb, grid.z_edge, mu0)
            ix = r % nx
            iy = r // nx
            if kind == 0:
                events += 1
                mu = hg_cosine(optics.column_props[b, iy, ix, iz, 2], uniform(state))
                cp, sp = random_azimuth(state)
                ux, uy, uz = rotate(ux0, uy0, uz0, mu, cp, sp)
            else:
                ux, uy, uz = lambertian_up(state)
            events += transport_column(state, Photon(b, w, 0.0, 0.0, z, ux, uy, uz, ix, iy, iz),
                                       optics.column_props, alb, grid.z_edge, survival, tallies)
    return events


@njit(cache=True, parallel=True)
def run_batches(first_batch, n_batches, wave, run, optics, grid, beam, slabs, sums):
    """Run batches ``first_batch .. first_batch + n_batches - 1`` and add them to ``sums``.

    Batches run in waves of ``wave`` slots, in parallel within a wave; the slots are then
    added in batch order, so the sums do not depend on the number of threads.  ``sums``
    (:class:`~surrogate3d.solvers._records.RunSums`): ``col_sum`` receives the batch
    tallies; ``spread`` receives, for the band-summed batch tallies of every column and
    (last row) their domain means, the sums of their deviations from batch 0's values, of
    the squared deviations, and batch 0's values.  Cell absorption needs no
    batch-to-batch variance: every thread adds it to its own row of ``cell_fixed``;
    integer sums make the total independent of which thread ran which batch.  Returns
    the scattering events.
    """
    full_3d = run.full_3d
    col_sum, spread, cell_fixed, scale = sums.col_sum, sums.spread, sums.cell_fixed, sums.scale
    nb, ny, nx = optics.albedo.shape
    ncol = ny * nx
    nthreads = cell_fixed.shape[0]
    col_slots = np.empty((wave, nb, N_TALLIES * ncol))  # every batch zeroes its slot
    slot_events = np.zeros(wave, dtype=np.int64)
    # 128 bytes for each 32-byte stream state: a state, written at every draw, then never
    # shares a cache line with another thread's.
    states = np.zeros((wave, 16), dtype=np.uint64)
    # Per thread, the scratch of the batch it runs: its direct beam's per-ray tables.
    nray = ncol * RAYS_PER_STRATUM * beam.nsub * beam.nsub if full_3d else 1
    ncz = beam.table_edges.shape[0] - 1
    sources = np.empty((nthreads, nb, nray))
    cums = np.empty((nthreads, nb, nray, ncz + 1))
    transs = np.empty((nthreads, nb, nray, ncz + 1))
    cdfs = np.empty((nthreads, nb * nray))
    xys = np.empty((nthreads, nray, 2))
    directs = np.empty((nthreads, 3, nb, ny, nx))
    families = beam.tile_x * beam.tile_y * RAYS_PER_STRATUM * beam.nsub * beam.nsub if full_3d else 1
    segments = beam.max_segments if full_3d else 1
    landings = np.empty((nthreads, families, 2))
    seg_cells = np.empty((nthreads, segments, 4), dtype=np.int32)
    seg_lengths = np.empty((nthreads, segments))
    sweeps = np.empty((nthreads, 3, ncol if full_3d else 1))
    nsum = len(SUM_NAMES)
    total_events = 0
    csum = col_sum.reshape(nb, ncol * nsum)
    dev, devsq, pivot = spread[0].reshape(-1), spread[1].reshape(-1), spread[2].reshape(-1)
    values = np.zeros(nsum)
    domain = np.zeros(nsum)
    for start in range(first_batch, first_batch + n_batches, wave):
        n = min(wave, first_batch + n_batches - start)
        for i in prange(n):
            thread = get_thread_id()
            col_slots[i, :, :] = 0.0
            tables = BeamTables(xys[thread], sources[thread], cums[thread], transs[thread],
                                cdfs[thread] if full_3d else beam.column_cdf,
                                directs[thread] if full_3d else beam.column_direct, landings[thread],
                                seg_cells[thread], seg_lengths[thread], sweeps[thread])
            if full_3d:
                tables.direct[:] = 0.0
            slot_events[i] = _run_batch(states[i], start + i, run, optics, grid, beam, slabs, tables,
                                        Tallies(col_slots[i], cell_fixed[thread], scale))
        for i in range(n):
            cs = col_slots[i]
            first = start + i == 0
            for q in range(nsum):
                domain[q] = 0.0
            for j in range(ncol):
                # Element by element: in this parallel function a slice assignment would
                # become a parallel loop of its own, launched for every column of every batch.
                for q in range(nsum):
                    values[q] = 0.0
                for b in range(nb):
                    v0, v1 = cs[b, slot_index(TOA_UP, j, ncol)], cs[b, slot_index(SFC_DIR, j, ncol)]
                    v2, v5 = cs[b, slot_index(SFC_DOWN, j, ncol)], cs[b, slot_index(SFC_ABS, j, ncol)]
                    v4 = cs[b, slot_index(ATM_ABS, j, ncol)]
                    v3 = v1 + v2 - v5
                    m = j * nsum
                    csum[b, m] += v0
                    csum[b, m + 1] += v1
                    csum[b, m + 2] += v2
                    csum[b, m + 3] += v3
                    csum[b, m + 4] += v4
                    csum[b, m + 5] += v5
                    values[0] += v0
                    values[1] += v1
                    values[2] += v2
                    values[3] += v3
                    values[4] += v4
                    values[5] += v5
                for q in range(nsum):
                    _add_deviation(dev, devsq, pivot, first, j * nsum + q, values[q])
                    domain[q] += values[q]
            for q in range(nsum):
                _add_deviation(dev, devsq, pivot, first, ncol * nsum + q, domain[q] / ncol)
            total_events += slot_events[i]
    return total_events
