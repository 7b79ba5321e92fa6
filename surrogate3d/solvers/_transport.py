"""Photon transport kernels for the solar Monte Carlo solver (numba).

Photons start where the deterministic direct beam scatters (or is reflected by the
surface) and are traced until they leave the top of the domain or are absorbed:

* free paths are sampled exactly by null-collision (delta) tracking against a majorant
  that is constant in blocks of cells, so clear-air cells are crossed a block at a time
  (Woodcock et al. 1965; Villefranque et al. 2019); in independent-column mode the
  photon stays in its column and walks its layers one by one (no null collisions);
* Henyey-Greenstein scattering (Henyey and Greenstein 1941), Lambertian surface;
* absorption by weight, ``w (1 - omega)`` per collision and ``w (1 - A)`` per surface
  hit, while the weight is above a threshold; below it an unbiased Russian roulette
  keeps the photon with probability ``omega`` (or ``A``) at unchanged weight and
  otherwise books its whole weight as absorbed where it stopped.  The expected tallies
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
N_TALLIES = 5
TWO_PI = 2.0 * math.pi


@njit(cache=True, inline="always")
def hg_cosine(g, xi):
    """Scattering-angle cosine sampled from the Henyey-Greenstein phase function."""
    if abs(g) < 1e-6:
        return 2.0 * xi - 1.0
    s = (1.0 - g * g) / (1.0 - g + 2.0 * g * xi)
    mu = (1.0 + g * g - s * s) / (2.0 * g)
    return min(1.0, max(-1.0, mu))


@njit(cache=True, inline="always")
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


@njit(cache=True, inline="always")
def lambertian_up(state):
    """Upward direction from a Lambertian (cosine-weighted) distribution."""
    mu = math.sqrt(uniform(state))
    phi = TWO_PI * uniform(state)
    s = math.sqrt(max(0.0, 1.0 - mu * mu))
    return s * math.cos(phi), s * math.sin(phi), max(mu, 1e-12)


@njit(cache=True, inline="always")
def _not_flat(uz):
    # A photon exactly parallel to the layers would never cross a face.
    if uz == 0.0:
        return 1e-12
    return uz


@njit(cache=True, inline="always")
def _cell_index(pos, step, lo, hi):
    i = int(pos / step)
    if i < lo:
        return lo
    if i > hi:
        return hi
    return i


@njit(cache=True)
def transport_3d(state, b, w, x, y, z, ux, uy, uz, props, alb, z_edge, dx, dy,
                 kmaj, cxe, cye, czi, bx, by, z_to_cz, iz0, thresh, max_events, col, cell):
    """Trace one photon in 3D from (x, y, z) in fine layer ``iz0``; returns its scattering events.

    ``props`` is float32 (nband, nz, ny, nx, 4) holding extinction, single-scattering
    albedo and asymmetry per cell (packed so that one cache line serves a collision).
    """
    nb, nz, ny, nx = props.shape[0], props.shape[1], props.shape[2], props.shape[3]
    ncz, ncy, ncx = kmaj.shape[1], kmaj.shape[2], kmaj.shape[3]
    cx = min(int(x / dx), nx - 1) // bx
    cy = min(int(y / dy), ny - 1) // by
    cz = z_to_cz[iz0]
    events = 0
    uz = _not_flat(uz)
    tau = -math.log(uniform_open(state))
    while True:
        tx = math.inf
        if ux > 0.0:
            tx = (cxe[cx + 1] - x) / ux
        elif ux < 0.0:
            tx = (cxe[cx] - x) / ux
        ty = math.inf
        if uy > 0.0:
            ty = (cye[cy + 1] - y) / uy
        elif uy < 0.0:
            ty = (cye[cy] - y) / uy
        if uz > 0.0:
            tz = (z_edge[czi[cz + 1]] - z) / uz
        else:
            tz = (z_edge[czi[cz]] - z) / uz
        if tx <= ty and tx <= tz:
            t, axis = max(tx, 0.0), 0
        elif ty <= tz:
            t, axis = max(ty, 0.0), 1
        else:
            t, axis = max(tz, 0.0), 2
        k = kmaj[b, cz, cy, cx]
        if k * t > tau:
            s = tau / k
            x += s * ux
            y += s * uy
            z += s * uz
            tau = -math.log(uniform_open(state))
            ix = _cell_index(x, dx, cx * bx, min((cx + 1) * bx, nx) - 1)
            iy = _cell_index(y, dy, cy * by, min((cy + 1) * by, ny) - 1)
            iz = czi[cz]
            while iz < czi[cz + 1] - 1 and z >= z_edge[iz + 1]:
                iz += 1
            cellp = props[b, iz, iy, ix]
            kf = cellp[0]
            if kf < k and uniform(state) * k >= kf:
                continue  # null collision
            events += 1
            om = cellp[1]
            if w >= thresh:
                a = w * (1.0 - om)
                cell[iz, iy, ix] += a
                col[b, ATM_ABS, iy, ix] += a
                w -= a
                if w <= 0.0:
                    return events
            elif uniform(state) >= om:
                cell[iz, iy, ix] += w
                col[b, ATM_ABS, iy, ix] += w
                return events
            if events >= max_events:
                cell[iz, iy, ix] += w
                col[b, ATM_ABS, iy, ix] += w
                return events
            mu = hg_cosine(cellp[2], uniform(state))
            ux, uy, uz = rotate(ux, uy, uz, mu, TWO_PI * uniform(state))
            uz = _not_flat(uz)
            continue
        tau -= k * t
        if axis == 0:
            y += t * uy
            z += t * uz
            if ux > 0.0:
                cx += 1
                if cx == ncx:
                    cx = 0
                x = cxe[cx]
            else:
                cx -= 1
                if cx < 0:
                    cx = ncx - 1
                x = cxe[cx + 1]
        elif axis == 1:
            x += t * ux
            z += t * uz
            if uy > 0.0:
                cy += 1
                if cy == ncy:
                    cy = 0
                y = cye[cy]
            else:
                cy -= 1
                if cy < 0:
                    cy = ncy - 1
                y = cye[cy + 1]
        else:
            x += t * ux
            y += t * uy
            ix = _cell_index(x, dx, cx * bx, min((cx + 1) * bx, nx) - 1)
            iy = _cell_index(y, dy, cy * by, min((cy + 1) * by, ny) - 1)
            if uz > 0.0:
                if cz == ncz - 1:
                    col[b, TOA_UP, iy, ix] += w
                    return events
                cz += 1
                z = z_edge[czi[cz]]
            elif cz > 0:
                cz -= 1
                z = z_edge[czi[cz + 1]]
            else:
                z = z_edge[0]
                col[b, SFC_DOWN, iy, ix] += w
                albedo = alb[b, iy, ix]
                if w >= thresh:
                    a = w * (1.0 - albedo)
                    col[b, SFC_ABS, iy, ix] += a
                    w -= a
                    if w <= 0.0:
                        return events
                elif uniform(state) >= albedo:
                    col[b, SFC_ABS, iy, ix] += w
                    return events
                col[b, SFC_UP, iy, ix] += w
                ux, uy, uz = lambertian_up(state)
                tau = -math.log(uniform_open(state))


@njit(cache=True)
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
        k = column[iz, 0]
        if k * t > tau:
            z += (tau / k) * uz
            tau = -math.log(uniform_open(state))
            events += 1
            om = column[iz, 1]
            if w >= thresh:
                a = w * (1.0 - om)
                cell[iz, iy, ix] += a
                col[b, ATM_ABS, iy, ix] += a
                w -= a
                if w <= 0.0:
                    return events
            elif uniform(state) >= om:
                cell[iz, iy, ix] += w
                col[b, ATM_ABS, iy, ix] += w
                return events
            if events >= max_events:
                cell[iz, iy, ix] += w
                col[b, ATM_ABS, iy, ix] += w
                return events
            mu = hg_cosine(column[iz, 2], uniform(state))
            ux, uy, uz = rotate(ux, uy, uz, mu, TWO_PI * uniform(state))
            uz = _not_flat(uz)
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
            col[b, SFC_DOWN, iy, ix] += w
            albedo = alb[b, iy, ix]
            if w >= thresh:
                a = w * (1.0 - albedo)
                col[b, SFC_ABS, iy, ix] += a
                w -= a
                if w <= 0.0:
                    return events
            elif uniform(state) >= albedo:
                col[b, SFC_ABS, iy, ix] += w
                return events
            col[b, SFC_UP, iy, ix] += w
            ux, uy, uz = lambertian_up(state)
            tau = -math.log(uniform_open(state))


@njit(cache=True)
def _run_batch(batch, full_3d, seed, batch_size, cdf, band_weight, nrays, props, alb, z_edge,
               dx, dy, ux0, uy0, uz0, nsub, kmaj, cxe, cye, czi, bx, by, z_to_cz, roulette, max_events,
               col, cell):
    """Trace one batch of photons into the slot tallies ``col`` and ``cell``; returns events.

    ``props`` has the 3D layout (nband, nz, ny, nx, 4) when ``full_3d``, else the column
    layout (nband, ny, nx, nz, 4).
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
            kind, x, y, z, ix, iy, iz = locate_source_3d(r, b, target, props, alb, z_edge, dx, dy,
                                                         ux0, uy0, uz0, nsub, v)
            if kind == 0:
                events += 1
                mu = hg_cosine(props[b, iz, iy, ix, 2], uniform(state))
                ux, uy, uz = rotate(ux0, uy0, uz0, mu, TWO_PI * uniform(state))
            else:
                ux, uy, uz = lambertian_up(state)
            events += transport_3d(state, b, w, x, y, z, ux, uy, uz, props, alb, z_edge, dx, dy,
                                   kmaj, cxe, cye, czi, bx, by, z_to_cz, iz, thresh, max_events, col, cell)
        else:
            kind, z, iz = locate_source_column(r, b, target, props, alb, z_edge, mu0, v)
            ix = r % nx
            iy = r // nx
            if kind == 0:
                events += 1
                mu = hg_cosine(props[b, iy, ix, iz, 2], uniform(state))
                ux, uy, uz = rotate(ux0, uy0, uz0, mu, TWO_PI * uniform(state))
            else:
                ux, uy, uz = lambertian_up(state)
            events += transport_column(state, b, w, z, ux, uy, uz, iz, ix, iy, props, alb, z_edge,
                                       thresh, max_events, col, cell)
    return events


@njit(cache=True, parallel=True)
def run_batches(first_batch, n_batches, wave, full_3d, seed, batch_size, cdf, band_weight, nrays,
                props, alb, z_edge, dx, dy, ux0, uy0, uz0, nsub, kmaj, cxe, cye, czi, bx, by,
                z_to_cz, roulette, max_events, col_sum, col_sumsq, band_sumsq, cell_sum):
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
                                        props, alb, z_edge, dx, dy, ux0, uy0, uz0, nsub, kmaj,
                                        cxe, cye, czi, bx, by, z_to_cz, roulette, max_events,
                                        col_slots[i], cell_slots[i])
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
