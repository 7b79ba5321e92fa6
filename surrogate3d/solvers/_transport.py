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

import numpy as np
from numba import get_thread_id, njit, prange

from ._geometry import axis_start, direct_beam_batch, locate_source_3d, locate_source_column
from ._kernel import KERNEL
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
def _absorb_in_cell(cell, scale, col, b, iz, iy, ix, a):
    _deposit(cell, scale, iz, iy, ix, a)
    _add(col, b, ATM_ABS, iy, ix, cell, a)


@njit(cache=True, inline="always", error_model="numpy")
def _collide(state, w, om, g, iz, iy, ix, b, thresh, events, max_events, ux, uy, uz, col, cell, scale):
    """Absorption (by weight, or expected value and roulette) and Henyey-Greenstein scattering.

    Returns ``(alive, w, ux, uy, uz)``.
    """
    if om < 1.0:
        a = w * (1.0 - om)
        q = ABSORPTION_QUANTUM * w
        if a >= q:
            _absorb_in_cell(cell, scale, col, b, iz, iy, ix, a)
        elif uniform(state) * q < a:
            _absorb_in_cell(cell, scale, col, b, iz, iy, ix, q)
        if w >= thresh:
            w -= a
            if w <= 0.0:
                return False, w, ux, uy, uz
        elif uniform(state) >= om:
            return False, w, ux, uy, uz
    if events >= max_events:
        _absorb_in_cell(cell, scale, col, b, iz, iy, ix, w)
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
def _tentative(state, w, b, iz, iy, ix, k_major, kext, ssa_g, thresh, events, max_events, ux, uy, uz, col, cell, scale):
    """A tentative collision of delta tracking in cell (iz, iy, ix): null with probability
    ``1 - k / k_major``, else real (absorption and scattering by :func:`_collide`).

    Returns ``(real, alive, w, ux, uy, uz)``.
    """
    kf = kext[b, iz, iy, ix]
    if kf < k_major and uniform(state) * k_major >= kf:
        return False, True, w, ux, uy, uz
    alive, w, ux, uy, uz = _collide(state, w, ssa_g[b, iz, iy, ix, 0], ssa_g[b, iz, iy, ix, 1], iz, iy, ix, b,
                                    thresh, events + 1, max_events, ux, uy, uz, col, cell, scale)
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


@njit(**KERNEL)
def transport_3d(state, b, w, x, y, z, ux, uy, uz, kext, ssa_g, alb, z_edge, dx, dy, grid, ix, iy, iz,
                 thresh, max_events, col, cell, scale):
    """Trace one photon in 3D from (x, y, z) in cell (iz, iy, ix); returns its scattering events.

    ``grid`` is the majorant grid ``(bx, by, bedge, zb, kmaj, bcode, kclear, clear_below,
    clear_above)``.  Free paths are sampled by delta tracking (Woodcock et al. 1965) over
    majorant blocks of ``bx x by`` columns and the layers ``bedge[k] .. bedge[k + 1] - 1``
    (block top heights ``zb``): inside block (k, j, i) tentative collisions come at rate
    ``kmaj[b, k, j, i]``, the largest extinction in the block (or at the clear-air rate
    ``kclear[b]`` where ``bcode[b, k, j, i] = 1``), and are real with probability
    ``kext / rate``, which is exact (Villefranque et al. 2019).  With blocks of one cell
    every tentative collision in cloud is real, and the walk is a plain cell-by-cell
    traversal.  Where ``bcode[b, k, j, i] = r + 1 > 1`` every block within ``r`` blocks is
    clear air, and the photon crosses that cube of blocks in one step at rate
    ``kclear[b]``.  Block rows below ``clear_below[b]`` and from ``clear_above[b]`` up are
    clear air in every column: the photon crosses such a slab in one step, whatever its
    horizontal travel.

    ``kext`` is the float32 extinction (nband, nz, ny, nx) and ``ssa_g`` the float32
    (nband, nz, ny, nx, 2) single-scattering albedo and asymmetry (see
    :func:`surrogate3d.solvers.montecarlo.tracking_arrays`).
    """
    bx, by, bedge, zb, kmaj, bcode, kclear, clear_below, clear_above = grid
    nz = kext.shape[1]
    nbz, nby, nbx = kmaj.shape[1], kmaj.shape[2], kmaj.shape[3]
    cell_walk = bx == 1 and by == 1 and nbz == nz
    bdx, bdy = bx * dx, by * dy
    inv_dx, inv_dy, inv_bdx, inv_bdy = 1.0 / dx, 1.0 / dy, 1.0 / bdx, 1.0 / bdy
    lx, ly = nbx * bdx, nby * bdy
    ibx, iby = ix // bx, iy // by
    ibz = 0
    while bedge[ibz + 1] <= iz:
        ibz += 1
    events = 0
    uz = _not_flat(uz)
    iux, iuy, iuz = _inverse(ux), _inverse(uy), 1.0 / uz
    tau = -math.log(uniform_open(state))
    kc = kclear[b]
    slab_lo, slab_hi = clear_below[b], clear_above[b]
    z_lo = z_hi = 0  # the clear-air layer range of the current slab or cube step
    while True:
        in_slab = ibz < slab_lo or ibz >= slab_hi
        clear_hit = False
        code = 2 if in_slab else _code(bcode, b, ibz, iby, ibx)
        if code < 2:
            # --- a run of single-block steps, walked incrementally (Amanatides and Woo 1987):
            # each crossing adds one block's length to one axis' face distance, and the
            # position is only brought up to date where the run ends.
            k_major = kmaj[b, ibz, iby, ibx] if code == 0 else kc
            sx, dtx, tmx = axis_start(ux, iux, ibx, bdx, x)
            sy, dty, tmy = axis_start(uy, iuy, iby, bdy, y)
            tmz = max(((zb[ibz + 1] if uz > 0.0 else zb[ibz]) - z) * iuz, 0.0)
            sz = 1 if uz > 0.0 else -1
            x0, y0, z0 = x, y, z
            t = 0.0
            while True:
                tn = min(tmx, tmy, tmz)
                d = k_major * (tn - t)
                if d > tau:
                    t += tau / k_major
                    axis = 3  # the run ends in a tentative collision, not on a face
                    break
                tau -= d
                t = tn
                if tmx <= tmy and tmx <= tmz:
                    ibx, x0 = _next_block(ibx, sx, nbx, x0, lx)
                    tmx += dtx
                    axis = 0  # the face the run stopped on, if it stops: 0 x, 1 y, 2 z
                elif tmy <= tmz:
                    iby, y0 = _next_block(iby, sy, nby, y0, ly)
                    tmy += dty
                    axis = 1
                else:
                    ibz += sz
                    axis = 2
                    if ibz < slab_lo or ibz >= slab_hi:
                        break  # into a clear slab, or out of the domain
                    tmz = ((zb[ibz + 1] if uz > 0.0 else zb[ibz]) - z0) * iuz
                code = _code(bcode, b, ibz, iby, ibx)
                if code == 0:
                    k_major = kmaj[b, ibz, iby, ibx]
                elif code == 1:
                    k_major = kc
                else:
                    break  # into a cube of clear blocks
            x = _face(ux, ibx, bdx) if axis == 0 else x0 + t * ux
            y = _face(uy, iby, bdy) if axis == 1 else y0 + t * uy
            z = (zb[ibz] if uz > 0.0 else zb[ibz + 1]) if axis == 2 else z0 + t * uz
            if axis == 3:
                tau = -math.log(uniform_open(state))
                # Handled here, not in the shared clear-air tail below: routing the hot
                # collision through that tail measured about 6 % slower.
                if cell_walk and code == 0:
                    real = True
                    alive, w, ux, uy, uz = _collide(state, w, ssa_g[b, ibz, iby, ibx, 0], ssa_g[b, ibz, iby, ibx, 1],
                                                    ibz, iby, ibx, b, thresh, events + 1, max_events, ux, uy, uz,
                                                    col, cell, scale)
                else:
                    ix, iy = _fine_cell(x, ibx, bx, inv_dx), _fine_cell(y, iby, by, inv_dy)
                    iz = _interval_in(z, z_edge, bedge[ibz], bedge[ibz + 1] - 1)
                    real, alive, w, ux, uy, uz = _tentative(state, w, b, iz, iy, ix, k_major, kext, ssa_g, thresh,
                                                            events, max_events, ux, uy, uz, col, cell, scale)
                if real:
                    events += 1
                    if not alive:
                        return events
                    iux, iuy, iuz = _inverse(ux), _inverse(uy), 1.0 / uz
                continue
            if 0 <= ibz < nbz:
                continue
        elif in_slab:
            # --- one step across a clear slab (above the highest or below the lowest cloud)
            z_lo, z_hi = (0, slab_lo - 1) if ibz < slab_lo else (slab_hi, nbz - 1)
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
            x = _wrap_far(x + s * ux, lx)
            y = _wrap_far(y + s * uy, ly)
            ibx = min(int(x * inv_bdx), nbx - 1)
            iby = min(int(y * inv_bdy), nby - 1)
            clear_hit = s < t
            if not clear_hit:
                ibz = z_hi + 1 if uz > 0.0 else z_lo - 1
                if 0 <= ibz < nbz:
                    continue
        else:
            # --- one step across the cube of clear blocks of radius r > 0
            r = code - 1
            z_lo = ibz - r if ibz > r else 0
            z_hi = ibz + r if ibz + r < nbz else nbz - 1
            tx = _face_distance(ux, iux, ibx, r, bdx, x)
            ty = _face_distance(uy, iuy, iby, r, bdy, y)
            tz = ((zb[z_hi + 1] if uz > 0.0 else zb[z_lo]) - z) * iuz
            t = max(min(tx, ty, tz), 0.0)
            if kc * t > tau:
                s = tau / kc
                x = _wrap(x + s * ux, lx)
                y = _wrap(y + s * uy, ly)
                z += s * uz
                tau = -math.log(uniform_open(state))
                ibx = min(int(x * inv_bdx), nbx - 1)
                iby = min(int(y * inv_bdy), nby - 1)
                clear_hit = True
            else:
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
                ibx, x = _periodic(ibx, x, nbx, lx)
                iby, y = _periodic(iby, y, nby, ly)
                if 0 <= ibz < nbz:
                    continue
        if clear_hit:
            # --- a tentative collision in clear air (slab or cube), at rate kc
            ibz = _interval_in(z, zb, z_lo, z_hi)
            ix, iy = _fine_cell(x, ibx, bx, inv_dx), _fine_cell(y, iby, by, inv_dy)
            iz = _interval_in(z, z_edge, bedge[ibz], bedge[ibz + 1] - 1)
            real, alive, w, ux, uy, uz = _tentative(state, w, b, iz, iy, ix, kc, kext, ssa_g, thresh, events,
                                                    max_events, ux, uy, uz, col, cell, scale)
            if real:
                events += 1
                if not alive:
                    return events
                iux, iuy, iuz = _inverse(ux), _inverse(uy), 1.0 / uz
            continue
        # --- out through the top, or onto the surface
        ix, iy = _fine_cell(x, ibx, bx, inv_dx), _fine_cell(y, iby, by, inv_dy)
        alive, w, ux, uy, uz = _boundary(state, w, b, iy, ix, ibz == nbz, thresh, alb, col)
        if not alive:
            return events
        ibz = 0
        z = zb[0]
        iux, iuy, iuz = _inverse(ux), _inverse(uy), 1.0 / uz
        tau = -math.log(uniform_open(state))


@njit(**KERNEL)
def transport_column(state, b, w, z, ux, uy, uz, iz, ix, iy, props, alb, z_edge,
                     thresh, max_events, col, cell, scale):
    """Trace one photon confined to column (ix, iy) as if it extended to infinity horizontally.

    ``props`` is float32 (nband, ny, nx, nz, 3): a column's layers are contiguous.
    """
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
            alive, w, ux, uy, uz = _collide(state, w, cellp[1], cellp[2], iz, iy, ix, b, thresh, events,
                                            max_events, ux, uy, uz, col, cell, scale)
            if not alive:
                return events
            continue
        tau -= k * t
        if uz > 0.0:
            if iz == nz - 1:
                _add(col, b, TOA_UP, iy, ix, alb, w)
                return events
            iz += 1
            z = z_edge[iz]
        elif iz > 0:
            iz -= 1
            z = z_edge[iz + 1]
        else:
            z = z_edge[0]
            alive, w = _surface(state, w, b, iy, ix, thresh, alb, col)
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
def _run_batch(state, batch, full_3d, seed, batch_size, cdf, band_weight, kext, ssa_g, column_props, alb,
               z_edge, dx, dy, ux0, uy0, uz0, nsub, reach, slabs, edge_slot, kept, grid, czi, column_direct, ray_xy,
               source,
               ray_cum, ray_trans, work, roulette, max_events, col, cell, scale):
    """Trace one batch into the slot tallies ``col`` and the fixed-point cell tallies ``cell``
    (units of ``1 / scale``), drawing from the random stream ``state`` (uint64, seeded here
    for the batch); returns events.

    In 3D the batch first traces its own direct beam (:func:`direct_beam_batch`), with
    ray positions drawn from its stream, into ``ray_xy``, ``source``, ``ray_cum``,
    ``ray_trans`` and the cumulative table ``cdf``; ``reach`` is the beam's horizontal
    travel (x, y) [m] from the top to the surface and ``slabs`` the uniform layers it crosses
    without walking them (:func:`surrogate3d.solvers._geometry.uniform_slabs`).  Independent columns share the exact
    direct beam of every column: ``cdf`` holds its source.  ``column_direct`` (3, nband,
    ny, nx) holds the direct beam's surface, column-absorbed and surface-absorbed flux
    (zeroed scratch in 3D, filled here), which the batch adds to its tallies.

    3D tracing uses ``kext`` and ``ssa_g`` (see :func:`transport_3d`); independent-column
    tracing uses ``column_props``, float32 (nband, ny, nx, nz, 3) with each column's
    extinction, single-scattering albedo and asymmetry contiguous.
    """
    nb, ny, nx = alb.shape
    ncol = ny * nx
    seed_stream(state, seed, batch)
    if full_3d:
        direct_beam_batch(state, kext, ssa_g, alb, band_weight, z_edge, dx, dy, ux0, uy0, uz0, nsub, reach, slabs,
                          edge_slot, kept, ray_xy, source, ray_cum, ray_trans, column_direct, cell, scale, work)
        total = _cumulate(source, band_weight, cdf)
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
    thresh = roulette * w
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
        if full_3d:
            kind, x, y, z, ix, iy, iz = locate_source_3d(r, b, target, kext, alb, z_edge, dx, dy, ux0, uy0, uz0,
                                                         ray_xy, v, ssa_g, czi, ray_cum, ray_trans)
            if kind == 0:
                events += 1
                mu = hg_cosine(ssa_g[b, iz, iy, ix, 1], uniform(state))
                cp, sp = random_azimuth(state)
                ux, uy, uz = rotate(ux0, uy0, uz0, mu, cp, sp)
            else:
                ux, uy, uz = lambertian_up(state)
            events += transport_3d(state, b, w, x, y, z, ux, uy, uz, kext, ssa_g, alb, z_edge, dx, dy, grid,
                                   ix, iy, iz, thresh, max_events, col, cell, scale)
        else:
            kind, z, iz = locate_source_column(r, b, target, column_props, alb, z_edge, mu0, v)
            ix = r % nx
            iy = r // nx
            if kind == 0:
                events += 1
                mu = hg_cosine(column_props[b, iy, ix, iz, 2], uniform(state))
                cp, sp = random_azimuth(state)
                ux, uy, uz = rotate(ux0, uy0, uz0, mu, cp, sp)
            else:
                ux, uy, uz = lambertian_up(state)
            events += transport_column(state, b, w, z, ux, uy, uz, iz, ix, iy, column_props, alb, z_edge,
                                       thresh, max_events, col, cell, scale)
    return events


@njit(cache=True, parallel=True)
def run_batches(first_batch, n_batches, wave, full_3d, seed, batch_size, cdf, band_weight, kext, ssa_g,
                column_props, alb, z_edge, dx, dy, ux0, uy0, uz0, nsub, reach, slabs, edge_slot, kept, grid, czi,
                column_direct, roulette, max_events, col_sum, spread, cell_fixed, scale):
    """Run batches ``first_batch .. first_batch + n_batches - 1`` and add them to the sums.

    Batches run in waves of ``wave`` slots, in parallel within a wave; the slots are then
    added in batch order, so the sums do not depend on the number of threads.
    ``col_sum`` (nband, ny, nx, 6) receives the batch tallies (in the order
    :data:`SUM_NAMES`).  ``spread`` (3, ncol + 1, 6) receives, for the band-summed batch
    tallies of every column and (last row) their domain means, the sums of their
    deviations from batch 0's values, of the squared deviations, and batch 0's values.
    Cell absorption needs no batch-to-batch variance: every thread adds it to its own int64
    array ``cell_fixed[thread]`` (nthread, nz, ny, nx), in units of ``1 / scale``; integer
    sums make the total independent of which thread ran which batch.  In 3D ``cdf`` is
    unused (every batch builds its own table); for independent columns it is the shared
    (nband * ncol,) table.  Returns the scattering events.
    """
    nb, ny, nx = alb.shape
    ncol = ny * nx
    nthreads = cell_fixed.shape[0]
    col_slots = np.empty((wave, nb, N_TALLIES * ncol))  # every batch zeroes its slot
    slot_events = np.zeros(wave, dtype=np.int64)
    # 128 bytes for each 32-byte stream state: a state, written at every draw, then never
    # shares a cache line with another thread's.
    states = np.zeros((wave, 16), dtype=np.uint64)
    # Per thread, the scratch of the batch it runs: its direct beam's per-ray tables.
    nray = ncol * nsub * nsub if full_3d else 1
    ncz = czi.shape[0] - 1
    sources = np.empty((nthreads, nb, nray))
    cums = np.empty((nthreads, nb, nray, ncz + 1))
    transs = np.empty((nthreads, nb, nray, ncz + 1))
    cdfs = np.empty((nthreads, nb * nray))
    xys = np.empty((nthreads, nray, 2))
    directs = np.empty((nthreads, 3, nb, ny, nx))
    works = np.empty((nthreads, 2 * nb + 16))
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
            table = cdfs[thread] if full_3d else cdf
            direct = directs[thread] if full_3d else column_direct
            if full_3d:
                direct[:] = 0.0
            slot_events[i] = _run_batch(states[i], start + i, full_3d, seed, batch_size, table, band_weight,
                                        kext, ssa_g, column_props, alb, z_edge, dx, dy, ux0, uy0, uz0, nsub,
                                        reach, slabs, edge_slot, kept, grid, czi, direct, xys[thread], sources[thread],
                                        cums[thread], transs[thread], works[thread], roulette, max_events,
                                        col_slots[i], cell_fixed[thread], scale)
        for i in range(n):
            cs = col_slots[i]
            first = start + i == 0
            domain[:] = 0.0
            for j in range(ncol):
                values[:] = 0.0
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
