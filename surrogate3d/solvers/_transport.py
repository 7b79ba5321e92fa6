"""Photon transport kernels for the solar Monte Carlo solver (numba).

Photons start where the deterministic direct beam scatters (or is reflected by the
surface) and are traced until they leave the top of the domain or are absorbed:

* free paths are sampled exactly: the photon walks the cells one by one, but crosses a
  cube of clear air around its cell in one step, tracked against the largest clear-air
  extinction with null collisions (delta tracking; Woodcock et al. 1965, the majorant idea
  of Villefranque et al. 2019); in independent-column mode the photon stays in its column
  and walks its layers one by one;
* Henyey-Greenstein scattering (Henyey and Greenstein 1941), Lambertian surface;
* absorption by weight, ``w (1 - omega)`` per collision and ``w (1 - A)`` per surface
  hit, while the weight is above a threshold; below it (and in nearly conservative
  cells, omega > 0.9999) an unbiased Russian roulette keeps the photon with probability
  ``omega`` (or ``A``) at unchanged weight and otherwise books its whole weight as
  absorbed where it stopped.  The expected tallies
  equal those of absorption by weight, and every photon's weight ends up in exactly one
  of: reflected at the top, absorbed in a cell, absorbed at the surface.  Energy
  therefore closes exactly in every run.

Column tallies, per band: 0 upward at the top, 1 diffuse downward at the surface,
2 upward at the surface, 3 absorbed in the atmospheric column, 4 absorbed at the surface.
"""

import math

import numpy as np
from numba import njit, prange

from ._geometry import locate_source_3d, locate_source_column
from ._rng import seed_stream, uniform, uniform_open

TOA_UP, SFC_DOWN, SFC_UP, ATM_ABS, SFC_ABS = 0, 1, 2, 3, 4
#: Above this single-scattering albedo the roulette books absorption: a weighted deposit of
#: less than 1e-4 of the weight at every collision would cost a memory write each for a
#: negligible variance gain.  Both estimators are unbiased.
WEIGHTED_ABSORPTION_MAX_ALBEDO = 0.9999
N_TALLIES = 5
TWO_PI = 2.0 * math.pi


@njit(cache=True, inline="always", error_model="numpy")
def hg_cosine(g, xi):
    """Scattering-angle cosine sampled from the Henyey-Greenstein phase function."""
    if abs(g) < 1e-6:
        return 2.0 * xi - 1.0
    s = (1.0 - g * g) / (1.0 - g + 2.0 * g * xi)
    mu = (1.0 + g * g - s * s) / (2.0 * g)
    return min(1.0, max(-1.0, mu))


@njit(cache=True, inline="always", error_model="numpy")
def rotate(ux, uy, uz, mu, phi):
    """Direction at polar cosine ``mu`` and azimuth ``phi`` about (ux, uy, uz)."""
    sint = math.sqrt(max(0.0, 1.0 - mu * mu))
    cp = math.cos(phi)
    sp = math.sin(phi)
    if abs(uz) > 0.99999:
        sign = 1.0 if uz > 0.0 else -1.0
        return sint * cp, sint * sp * sign, mu * uz
    den = math.sqrt(1.0 - uz * uz)
    nx = sint * (ux * uz * cp - uy * sp) / den + ux * mu
    ny = sint * (uy * uz * cp + ux * sp) / den + uy * mu
    nz = -sint * cp * den + uz * mu
    norm = 1.0 / math.sqrt(nx * nx + ny * ny + nz * nz)
    return nx * norm, ny * norm, nz * norm


@njit(cache=True, inline="always", error_model="numpy")
def lambertian_up(state):
    """Upward direction from a Lambertian (cosine-weighted) distribution."""
    mu = math.sqrt(uniform(state))
    phi = TWO_PI * uniform(state)
    s = math.sqrt(max(0.0, 1.0 - mu * mu))
    return s * math.cos(phi), s * math.sin(phi), max(mu, 1e-12)


@njit(cache=True, inline="always", error_model="numpy")
def _not_flat(uz):
    # A photon exactly parallel to the layers would never cross a face.
    if uz == 0.0:
        return 1e-12
    return uz


@njit(cache=True, inline="always", error_model="numpy")
def _cell_index(pos, step, lo, hi):
    i = int(pos / step)
    if i < lo:
        return lo
    if i > hi:
        return hi
    return i


@njit(cache=True, inline="always", error_model="numpy")
def _collide(state, w, om, g, iz, iy, ix, b, thresh, events, max_events, ux, uy, uz, col, cell):
    """Absorption (by weight, or roulette) and Henyey-Greenstein scattering.

    Returns ``(alive, w, ux, uy, uz)``.
    """
    if w >= thresh and om <= WEIGHTED_ABSORPTION_MAX_ALBEDO:
        a = w * (1.0 - om)
        cell[iz, iy, ix] += a
        col[b, ATM_ABS, iy, ix] += a
        w -= a
        if w <= 0.0:
            return False, w, ux, uy, uz
    elif uniform(state) >= om:
        cell[iz, iy, ix] += w
        col[b, ATM_ABS, iy, ix] += w
        return False, w, ux, uy, uz
    if events >= max_events:
        cell[iz, iy, ix] += w
        col[b, ATM_ABS, iy, ix] += w
        return False, w, ux, uy, uz
    mu = hg_cosine(g, uniform(state))
    ux, uy, uz = rotate(ux, uy, uz, mu, TWO_PI * uniform(state))
    return True, w, ux, uy, _not_flat(uz)


@njit(cache=True, inline="always", error_model="numpy")
def _surface(state, w, b, iy, ix, thresh, alb, col):
    """Diffuse arrival at the Lambertian surface: tally, absorb, reflect.  Returns ``(alive, w)``."""
    col[b, SFC_DOWN, iy, ix] += w
    albedo = alb[b, iy, ix]
    if w >= thresh:
        a = w * (1.0 - albedo)
        col[b, SFC_ABS, iy, ix] += a
        w -= a
        if w <= 0.0:
            return False, w
    elif uniform(state) >= albedo:
        col[b, SFC_ABS, iy, ix] += w
        return False, w
    col[b, SFC_UP, iy, ix] += w
    return True, w


@njit(cache=True, inline="always", error_model="numpy")
def _wrap(pos, length):
    # A loop, not %, which is slow and rarely needed: flights seldom cross the domain.
    while pos >= length:
        pos -= length
    while pos < 0.0:
        pos += length
    return pos


@njit(cache=True, error_model="numpy")
def transport_3d(state, b, w, x, y, z, ux, uy, uz, kext, ssa_g, alb, z_edge, dx, dy, skip, kclear, iz,
                 thresh, max_events, col, cell):
    """Trace one photon in 3D from (x, y, z) in layer ``iz``; returns its scattering events.

    ``kext`` is the float32 extinction (nband, nz, ny, nx), kept apart from the float32
    (nband, nz, ny, nx, 2) single-scattering albedo and asymmetry ``ssa_g`` that only
    collisions need, so that tracking touches as little memory as possible.

    The photon walks the cells one by one, except where ``skip`` (uint8, nband, nz, ny, nx)
    says that every cell within ``skip`` cells of the current one (a cube in index space)
    is clear air with extinction at most ``kclear[b]``: it then crosses that cube in one
    step, tracked against ``kclear[b]`` with null collisions, which is exact.
    """
    nz, ny, nx = kext.shape[1], kext.shape[2], kext.shape[3]
    lx, ly = nx * dx, ny * dy
    ix = min(int(x / dx), nx - 1)
    iy = min(int(y / dy), ny - 1)
    events = 0
    uz = _not_flat(uz)
    tau = -math.log(uniform_open(state))
    kc = kclear[b]
    while True:
        r = skip[b, iz, iy, ix]
        if r > 0:
            # --- one step across the clear cube around the current cell
            tx = math.inf
            if ux > 0.0:
                tx = ((ix + r + 1) * dx - x) / ux
            elif ux < 0.0:
                tx = ((ix - r) * dx - x) / ux
            ty = math.inf
            if uy > 0.0:
                ty = ((iy + r + 1) * dy - y) / uy
            elif uy < 0.0:
                ty = ((iy - r) * dy - y) / uy
            z_lo, z_hi = max(iz - r, 0), min(iz + r, nz - 1)
            if uz > 0.0:
                tz = (z_edge[z_hi + 1] - z) / uz
            else:
                tz = (z_edge[z_lo] - z) / uz
            t = max(min(tx, ty, tz), 0.0)
            if kc * t > tau:
                s = tau / kc
                x = _wrap(x + s * ux, lx)
                y = _wrap(y + s * uy, ly)
                z += s * uz
                tau = -math.log(uniform_open(state))
                ix = min(int(x / dx), nx - 1)
                iy = min(int(y / dy), ny - 1)
                while iz < z_hi and z >= z_edge[iz + 1]:
                    iz += 1
                while iz > z_lo and z < z_edge[iz]:
                    iz -= 1
                kf = kext[b, iz, iy, ix]
                if kf < kc and uniform(state) * kc >= kf:
                    continue  # null collision
                events += 1
                alive, w, ux, uy, uz = _collide(state, w, ssa_g[b, iz, iy, ix, 0], ssa_g[b, iz, iy, ix, 1],
                                                iz, iy, ix, b, thresh, events, max_events, ux, uy, uz, col, cell)
                if not alive:
                    return events
                continue
            tau -= kc * t
            nx_ = x + t * ux
            ny_ = y + t * uy
            z += t * uz
            if tx <= ty and tx <= tz:
                ix = ix + r + 1 if ux > 0.0 else ix - r - 1
                x = ix * dx if ux > 0.0 else (ix + 1) * dx
                y = ny_
                iy = min(max(int(math.floor(y / dy)), iy - r), iy + r)
                iz = _layer_in(z, z_edge, z_lo, z_hi)
            elif ty <= tz:
                iy = iy + r + 1 if uy > 0.0 else iy - r - 1
                y = iy * dy if uy > 0.0 else (iy + 1) * dy
                x = nx_
                ix = min(max(int(math.floor(x / dx)), ix - r), ix + r)
                iz = _layer_in(z, z_edge, z_lo, z_hi)
            else:
                x, y = nx_, ny_
                ix = min(max(int(math.floor(x / dx)), ix - r), ix + r)
                iy = min(max(int(math.floor(y / dy)), iy - r), iy + r)
                if uz > 0.0:
                    iz = z_hi + 1
                    z = z_edge[iz]
                else:
                    iz = z_lo - 1
                    z = z_edge[z_lo]
            # back into the periodic domain
            if ix >= nx:
                ix -= nx
                x -= lx
            elif ix < 0:
                ix += nx
                x += lx
            if iy >= ny:
                iy -= ny
                y -= ly
            elif iy < 0:
                iy += ny
                y += ly
            if iz == nz:
                col[b, TOA_UP, iy, ix] += w
                return events
            if iz < 0:
                iz = 0
                alive, w = _surface(state, w, b, iy, ix, thresh, alb, col)
                if not alive:
                    return events
                ux, uy, uz = lambertian_up(state)
                tau = -math.log(uniform_open(state))
            continue
        # --- walk cells one by one until a collision, a clear cube or a domain boundary
        if ux > 0.0:
            fx, step_x = ((ix + 1) * dx - x) / ux, dx / ux
        elif ux < 0.0:
            fx, step_x = (ix * dx - x) / ux, -dx / ux
        else:
            fx, step_x = math.inf, math.inf
        if uy > 0.0:
            fy, step_y = ((iy + 1) * dy - y) / uy, dy / uy
        elif uy < 0.0:
            fy, step_y = (iy * dy - y) / uy, -dy / uy
        else:
            fy, step_y = math.inf, math.inf
        inv_uz = 1.0 / uz
        fz = ((z_edge[iz + 1] if uz > 0.0 else z_edge[iz]) - z) * inv_uz
        s = 0.0
        while True:
            if fx <= fy and fx <= fz:
                face, axis = fx, 0
            elif fy <= fz:
                face, axis = fy, 1
            else:
                face, axis = fz, 2
            k = kext[b, iz, iy, ix]
            t = max(face - s, 0.0)
            if k * t > tau:
                s += tau / k
                x = _wrap(x + s * ux, lx)
                y = _wrap(y + s * uy, ly)
                z += s * uz
                tau = -math.log(uniform_open(state))
                events += 1
                alive, w, ux, uy, uz = _collide(state, w, ssa_g[b, iz, iy, ix, 0], ssa_g[b, iz, iy, ix, 1],
                                                iz, iy, ix, b, thresh, events, max_events, ux, uy, uz, col, cell)
                if not alive:
                    return events
                break
            tau -= k * t
            s = face
            if axis == 0:
                fx += step_x
                if ux > 0.0:
                    ix = ix + 1 if ix < nx - 1 else 0
                else:
                    ix = ix - 1 if ix > 0 else nx - 1
            elif axis == 1:
                fy += step_y
                if uy > 0.0:
                    iy = iy + 1 if iy < ny - 1 else 0
                else:
                    iy = iy - 1 if iy > 0 else ny - 1
            elif uz > 0.0:
                if iz == nz - 1:
                    col[b, TOA_UP, iy, ix] += w
                    return events
                iz += 1
                fz += (z_edge[iz + 1] - z_edge[iz]) * inv_uz
            else:
                if iz == 0:
                    x = _wrap(x + s * ux, lx)
                    y = _wrap(y + s * uy, ly)
                    z = z_edge[0]
                    alive, w = _surface(state, w, b, iy, ix, thresh, alb, col)
                    if not alive:
                        return events
                    ux, uy, uz = lambertian_up(state)
                    tau = -math.log(uniform_open(state))
                    break
                iz -= 1
                fz -= (z_edge[iz + 1] - z_edge[iz]) * inv_uz
            if skip[b, iz, iy, ix] > 0:
                # Entering clear air: move to the face just crossed, then take cube steps.
                x = _wrap(x + s * ux, lx)
                y = _wrap(y + s * uy, ly)
                z += s * uz
                if axis == 0:
                    x = ix * dx if ux > 0.0 else (ix + 1) * dx
                elif axis == 1:
                    y = iy * dy if uy > 0.0 else (iy + 1) * dy
                else:
                    z = z_edge[iz] if uz > 0.0 else z_edge[iz + 1]
                break


@njit(cache=True, inline="always", error_model="numpy")
def _layer_in(z, z_edge, lo, hi):
    iz = lo
    while iz < hi and z >= z_edge[iz + 1]:
        iz += 1
    return iz


@njit(cache=True, error_model="numpy")
def transport_column(state, b, w, z, ux, uy, uz, iz, ix, iy, props, alb, z_edge,
                     thresh, max_events, col, cell):
    """Trace one photon confined to column (ix, iy) as if it extended to infinity horizontally.

    ``props`` is float32 (nband, ny, nx, nz, 4): a column's layers are contiguous.
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
                                            max_events, ux, uy, uz, col, cell)
            if not alive:
                return events
            continue
        tau -= k * t
        if uz > 0.0:
            if iz == nz - 1:
                col[b, TOA_UP, iy, ix] += w
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


@njit(cache=True, error_model="numpy")
def _run_batch(batch, full_3d, seed, batch_size, cdf, band_weight, nrays, kext, ssa_g, column_props, alb,
               z_edge, dx, dy, ux0, uy0, uz0, nsub, skip, kclear, czi, ray_cum, ray_trans,
               roulette, max_events, col, cell):
    """Trace one batch of photons into the slot tallies ``col`` and ``cell``; returns events.

    3D tracing uses ``kext`` and ``ssa_g`` (see :func:`transport_3d`); independent-column
    tracing uses ``column_props``, float32 (nband, ny, nx, nz, 4) with each column's
    extinction, single-scattering albedo and asymmetry contiguous.
    """
    nx = alb.shape[2]
    state = np.empty(4, dtype=np.uint64)
    seed_stream(state, seed, batch)
    total = cdf[-1]
    w = total / batch_size
    thresh = roulette * w
    mu0 = -uz0
    events = 0
    for _ in range(batch_size):
        u = uniform(state) * total
        k = np.searchsorted(cdf, u, side="right")
        if k >= cdf.shape[0]:
            k = cdf.shape[0] - 1
        below = cdf[k - 1] if k > 0 else 0.0
        b = k // nrays
        r = k - b * nrays
        target = (u - below) / band_weight[b]
        v = uniform(state)
        if full_3d:
            kind, x, y, z, ix, iy, iz = locate_source_3d(r, b, target, kext, alb, z_edge, dx, dy, ux0, uy0, uz0,
                                                         nsub, v, ssa_g, czi, ray_cum, ray_trans)
            if kind == 0:
                events += 1
                mu = hg_cosine(ssa_g[b, iz, iy, ix, 1], uniform(state))
                ux, uy, uz = rotate(ux0, uy0, uz0, mu, TWO_PI * uniform(state))
            else:
                ux, uy, uz = lambertian_up(state)
            events += transport_3d(state, b, w, x, y, z, ux, uy, uz, kext, ssa_g, alb, z_edge, dx, dy,
                                   skip, kclear, iz, thresh, max_events, col, cell)
        else:
            kind, z, iz = locate_source_column(r, b, target, column_props, alb, z_edge, mu0, v)
            ix = r % nx
            iy = r // nx
            if kind == 0:
                events += 1
                mu = hg_cosine(column_props[b, iy, ix, iz, 2], uniform(state))
                ux, uy, uz = rotate(ux0, uy0, uz0, mu, TWO_PI * uniform(state))
            else:
                ux, uy, uz = lambertian_up(state)
            events += transport_column(state, b, w, z, ux, uy, uz, iz, ix, iy, column_props, alb, z_edge,
                                       thresh, max_events, col, cell)
    return events


@njit(cache=True, parallel=True)
def run_batches(first_batch, n_batches, wave, full_3d, seed, batch_size, cdf, band_weight, nrays,
                kext, ssa_g, column_props, alb, z_edge, dx, dy, ux0, uy0, uz0, nsub, skip, kclear, czi,
                ray_cum, ray_trans, roulette, max_events, col_sum, col_sumsq, band_sumsq, cell_sum):
    """Run batches ``first_batch .. first_batch + n_batches - 1`` and add them to the sums.

    Batches run in waves of ``wave`` slots, in parallel within a wave; the slots are then
    added in batch order, so the sums do not depend on the number of threads.
    ``col_sum`` (nband, 5, ny, nx) and ``cell_sum`` (nz, ny, nx) receive the batch tallies,
    ``col_sumsq`` (5, ny, nx) the squares of the band-summed batch tallies and
    ``band_sumsq`` (nband, 5, ny, nx) the squares per band.  Returns the scattering events.
    """
    nb, ny, nx = alb.shape
    nz = cell_sum.shape[0]
    col_slots = np.zeros((wave, nb, N_TALLIES, ny, nx))
    cell_slots = np.zeros((wave, nz, ny, nx))
    slot_events = np.zeros(wave, dtype=np.int64)
    ncol = N_TALLIES * ny * nx
    ncell = nz * ny * nx
    total_events = 0
    csum = col_sum.reshape(nb, ncol)
    csq = col_sumsq.reshape(ncol)
    bsq = band_sumsq.reshape(nb, ncol)
    esum = cell_sum.reshape(ncell)
    for start in range(first_batch, first_batch + n_batches, wave):
        n = min(wave, first_batch + n_batches - start)
        for i in prange(n):
            col_slots[i, :, :, :, :] = 0.0
            cell_slots[i, :, :, :] = 0.0
            slot_events[i] = _run_batch(start + i, full_3d, seed, batch_size, cdf, band_weight, nrays,
                                        kext, ssa_g, column_props, alb, z_edge, dx, dy, ux0, uy0, uz0, nsub,
                                        skip, kclear, czi, ray_cum, ray_trans, roulette,
                                        max_events, col_slots[i], cell_slots[i])
        for i in range(n):
            cs = col_slots[i].reshape(nb, ncol)
            for j in range(ncol):
                acc = 0.0
                for b in range(nb):
                    v = cs[b, j]
                    csum[b, j] += v
                    bsq[b, j] += v * v
                    acc += v
                csq[j] += acc * acc
            es = cell_slots[i].reshape(ncell)
            for j in range(ncell):
                esum[j] += es[j]
            total_events += slot_events[i]
    return total_events
