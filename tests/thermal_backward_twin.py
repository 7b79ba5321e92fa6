"""A plain-Python twin of the backward longwave kernel: same random stream, same numbers.

It draws the random numbers of :mod:`surrogate3d.solvers._thermal_backward_kernel` in the
documented order, with the stream and the direction helpers of the package (each tested
against its own reference in ``test_montecarlo_kernels.py``), but shares nothing else: the
cell walk is written anew (the distance to each face, the smallest wins, the cell index
from the face crossed), Planck radiances are interpolated in numpy, the deposits along the
ray are kept in a list and summed at the end as ``B_ref + sum a_j (B_j - B_ref)``.

Used by ``tests/solvers/test_thermal_backward.py``.
"""

import math

import numpy as np

from surrogate3d.solvers._rng import seed_stream, uniform, uniform_open
from surrogate3d.solvers._transport import hg_cosine, lambertian_up, random_azimuth, rotate


def _radiance(planck, n, temperature):
    """Linear interpolation in the table (the temperature clipped to its first row, as the kernel does)."""
    u = (temperature - planck.t0) * planck.inv_dt
    i = min(int(u) if u > 0.0 else 0, planck.radiance.shape[1] - 2)
    return planck.radiance[n, i] + (u - i) * (planck.radiance[n, i + 1] - planck.radiance[n, i])


def _ray(state, n, pos, u, cell, b_ref, full_3d, roulette, max_events, medium, boundaries, planck):
    """Radiance arriving at ``pos`` against direction ``u``: deposits (share of weight, radiance) summed."""
    nz, ny, nx = medium.temperature.shape
    band = medium.band_of[n]
    x, y, z = pos
    ux, uy, uz = u
    iz, iy, ix = cell
    if uz == 0.0:
        uz = 1e-12
    w = 1.0
    deposits = []
    events = 0
    tau = -math.log(uniform_open(state))
    while True:
        faces = {2: ((medium.z_edge[iz + 1] if uz > 0 else medium.z_edge[iz]) - z) / uz}
        if full_3d:
            if ux != 0.0:
                faces[0] = (((ix + 1) if ux > 0 else ix) * medium.dx - x) / ux
            if uy != 0.0:
                faces[1] = (((iy + 1) if uy > 0 else iy) * medium.dy - y) / uy
        # Ties go to z, then x, then y, as in the kernel.
        axis = min(faces, key=lambda k: (faces[k], (k + 1) % 3))
        t = max(faces[axis], 0.0)
        k_abs = medium.gas[n, iz] + medium.cloud[band, iz, iy, ix, 0]
        k_sca = medium.cloud[band, iz, iy, ix, 1]
        b_cell = _radiance(planck, n, medium.temperature[iz, iy, ix])
        if k_sca * t > tau:
            s = tau / k_sca
            if k_abs > 0.0:
                a = w * (1.0 - math.exp(-k_abs * s))
                deposits.append((a, b_cell))
                w -= a
            x, y, z = x + s * ux, y + s * uy, z + s * uz
            events += 1
            if events >= max_events:
                deposits.append((w, b_cell))
                break
            mu = hg_cosine(medium.cloud[band, iz, iy, ix, 2], uniform(state))
            cp, sp = random_azimuth(state)
            ux, uy, uz = rotate(ux, uy, uz, mu, cp, sp)
            if uz == 0.0:
                uz = 1e-12
            tau = -math.log(uniform_open(state))
        else:
            if k_abs > 0.0:
                a = w * (1.0 - math.exp(-k_abs * t))
                deposits.append((a, b_cell))
                w -= a
            tau -= k_sca * t
            x, y, z = x + t * ux, y + t * uy, z + t * uz
            if axis == 0:
                ix = (ix + (1 if ux > 0 else -1)) % nx
                x = ix * medium.dx if ux > 0 else (ix + 1) * medium.dx
            elif axis == 1:
                iy = (iy + (1 if uy > 0 else -1)) % ny
                y = iy * medium.dy if uy > 0 else (iy + 1) * medium.dy
            elif uz > 0 and iz == nz - 1:
                t_top = boundaries.top_temperature
                deposits.append((w, _radiance(planck, n, t_top) if t_top > 0.0 else 0.0))
                break
            elif uz > 0:
                iz += 1
                z = medium.z_edge[iz]
            elif iz > 0:
                iz -= 1
                z = medium.z_edge[iz + 1]
            else:
                z = medium.z_edge[0]
                a = boundaries.emissivity[iy, ix] * w
                if a > 0.0:
                    deposits.append((a, _radiance(planck, n, boundaries.surface_temperature[iy, ix])))
                    w -= a
                    if w <= 0.0:
                        break
                ux, uy, uz = lambertian_up(state)
                tau = -math.log(uniform_open(state))
        if w < roulette:
            if uniform(state) * roulette < w:
                w = roulette
            else:
                break
    return b_ref + sum(a * (b - b_ref) for a, b in deposits), events


def twin_batch(batch, run, medium, boundaries, planck, cdf):
    """Both fluxes of every column from batch ``batch`` (2, ny, nx) [W m-2] and the scattering
    events, as :func:`surrogate3d.solvers._thermal_backward_kernel.run_batches` computes them."""
    state = np.zeros(4, dtype=np.uint64)
    seed_stream(state, run.seed, batch)
    nz, ny, nx = medium.temperature.shape
    out = np.zeros((2, ny, nx))
    events = 0
    m = run.rays
    shift = uniform(state)
    golden = (math.sqrt(5.0) - 1.0) / 2.0
    for iy in range(ny):
        for ix in range(nx):
            offset = math.fmod(shift + (iy * nx + ix) * golden, 1.0)
            for flux in range(2):
                total = cdf[flux, -1]
                probability = np.diff(cdf[flux], prepend=0.0)
                values = []
                for i in range(m):
                    n = min(int(np.searchsorted(cdf[flux], (i + offset) / m * total, side="right")),
                            cdf.shape[1] - 1)
                    x = (ix + uniform(state)) * medium.dx
                    y = (iy + uniform(state)) * medium.dy
                    ux, uy, uz = lambertian_up(state)
                    iz = 0 if flux == 0 else nz - 1
                    start = (x, y, medium.z_edge[0] if flux == 0 else medium.z_edge[nz])
                    direction = (ux, uy, uz if flux == 0 else -uz)
                    b_ref = _radiance(planck, n, medium.temperature[iz, iy, ix])
                    value, k = _ray(state, n, start, direction, (iz, iy, ix), b_ref, run.full_3d, run.roulette,
                                    run.max_events, medium, boundaries, planck)
                    values.append(value / probability[n])
                    events += k
                out[flux, iy, ix] = math.pi * total * sum(values) / m
    return out, events
