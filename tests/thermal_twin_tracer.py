"""A plain analog thermal Monte Carlo tracer in pure Python: the statistical twin of the thermal kernel.

Nothing in it is clever, and it shares no code with the kernel: photons of equal weight
are emitted by the cells (power ``4 pi k_a B dz`` per unit column area), the surface
(``eps pi B``) and a lit top (``pi B``) in proportion to their power over every
(interval, source) pair, with exact Planck band radiances; they fly exponential free paths
of the total extinction cell by cell (periodic sides, or confined to their column), are
absorbed at a collision with probability ``k_a / k_ext`` or scattered by the
Henyey-Greenstein phase function, absorbed by the surface with probability ``eps`` or
reflected in a Lambertian direction, and leave at the top.  Every tally is a count of
photons: net absorption is what was absorbed minus the exact emission.  No net exchange,
no weights, no roulette, no temperature table, no shared random streams.

Used by ``tests/solvers/test_thermal_montecarlo.py``.
"""

import bisect
import math
import random

import numpy as np

from surrogate3d.scenes.planck import planck_band_radiance


def _isotropic(rng):
    mu = 2.0 * rng.random() - 1.0
    phi = 2.0 * math.pi * rng.random()
    s = math.sqrt(max(0.0, 1.0 - mu * mu))
    return s * math.cos(phi), s * math.sin(phi), mu


def _lambertian(rng, sign):
    mu = math.sqrt(rng.random())
    phi = 2.0 * math.pi * rng.random()
    s = math.sqrt(max(0.0, 1.0 - mu * mu))
    return s * math.cos(phi), s * math.sin(phi), sign * max(mu, 1e-12)


def _scatter(rng, g, u):
    """New direction after Henyey-Greenstein scattering (Henyey and Greenstein 1941) of direction u."""
    xi = rng.random()
    if abs(g) < 1e-6:
        mu = 2.0 * xi - 1.0
    else:
        mu = (1.0 + g * g - ((1.0 - g * g) / (1.0 - g + 2.0 * g * xi)) ** 2) / (2.0 * g)
    mu = min(1.0, max(-1.0, mu))
    phi = 2.0 * math.pi * rng.random()
    # An orthonormal basis (e1, e2, u): the new direction is mu u + sin(theta)(cos phi e1 + sin phi e2).
    ux, uy, uz = u
    if abs(uz) < 0.9:
        e1 = (-uy, ux, 0.0)
    else:
        e1 = (0.0, -uz, uy)
    norm = math.sqrt(sum(c * c for c in e1))
    e1 = tuple(c / norm for c in e1)
    e2 = (uy * e1[2] - uz * e1[1], uz * e1[0] - ux * e1[2], ux * e1[1] - uy * e1[0])
    s = math.sqrt(max(0.0, 1.0 - mu * mu))
    new = [mu * u[i] + s * (math.cos(phi) * e1[i] + math.sin(phi) * e2[i]) for i in range(3)]
    if new[2] == 0.0:
        new[2] = 1e-12
    return tuple(new)


def twin_thermal(gas, intervals, cloud_extinction, cloud_ssa, cloud_g, air_temperature, surface_temperature,
                 surface_emissivity, z_edge, dx, dy, *, independent_columns=False, top_temperature=None,
                 photons=20000, batches=20, seed=1):
    """Broadband column fluxes and cell net absorption by analog Monte Carlo.

    Arguments as :func:`surrogate3d.solvers.thermal_montecarlo.solve_thermal_monte_carlo`
    (arrays of full shape).  Returns ``(mean, se, domain_se)``: dicts over
    ``surface_downward_flux``, ``surface_upward_flux``, ``toa_upward_flux``,
    ``atmosphere_net_absorption`` (ny, nx) and ``cell_net_absorption`` (nz, ny, nx), of the
    means and standard errors from the spread between batches, and the domain-mean
    standard errors of the column fields.
    """
    rng = random.Random(seed)
    nz, ny, nx = air_temperature.shape
    low, high = intervals.wavenumber_low, intervals.wavenumber_high
    band = intervals.band
    nint = low.size
    dz = np.diff(z_edge)
    k_abs = gas[:, :, None, None] + (cloud_extinction * (1.0 - cloud_ssa))[band]
    k_sca = (cloud_extinction * cloud_ssa)[band]
    asym = cloud_g[band]
    b_air = planck_band_radiance(air_temperature[None], low[:, None, None, None], high[:, None, None, None])
    b_sfc = planck_band_radiance(surface_temperature[None], low[:, None, None], high[:, None, None])
    emitted_cells = (4.0 * np.pi * k_abs * b_air * dz[None, :, None, None])
    emitted_sfc = surface_emissivity[None] * np.pi * b_sfc
    parts = [emitted_cells.reshape(nint, -1), emitted_sfc.reshape(nint, -1)]
    if top_temperature is not None:
        b_top = planck_band_radiance(top_temperature, low, high)
        parts.append(np.repeat((np.pi * b_top)[:, None], ny * nx, axis=1))
    power = np.concatenate(parts, axis=1)          # (nint, nsource)
    nsource = power.shape[1]
    cdf = list(np.cumsum(power.ravel()))
    total = cdf[-1]
    per_batch = -(-photons // batches)
    w = total / per_batch
    ncell = nz * ny * nx

    arrival = np.zeros((batches, ny, nx))
    reflected = np.zeros((batches, ny, nx))
    leaving = np.zeros((batches, ny, nx))
    absorbed = np.zeros((batches, nz, ny, nx))
    for batch in range(batches):
        for _ in range(per_batch):
            pick = min(bisect.bisect_right(cdf, rng.random() * total), len(cdf) - 1)
            n, source = divmod(pick, nsource)
            if source < ncell:
                iz, rest = divmod(source, ny * nx)
                iy, ix = divmod(rest, nx)
                x, y = (ix + rng.random()) * dx, (iy + rng.random()) * dy
                z = z_edge[iz] + rng.random() * dz[iz]
                u = _isotropic(rng)
            elif source < ncell + ny * nx:
                iy, ix = divmod(source - ncell, nx)
                x, y, z, iz = (ix + rng.random()) * dx, (iy + rng.random()) * dy, z_edge[0], 0
                u = _lambertian(rng, 1.0)
            else:
                iy, ix = divmod(source - ncell - ny * nx, nx)
                x, y, z, iz = (ix + rng.random()) * dx, (iy + rng.random()) * dy, z_edge[nz], nz - 1
                u = _lambertian(rng, -1.0)
            tau = -math.log(1.0 - rng.random())
            while True:
                ux, uy, uz = u
                faces = [((z_edge[iz + 1] if uz > 0 else z_edge[iz]) - z) / uz]
                if not independent_columns:
                    faces.append(((ix + 1) * dx - x) / ux if ux > 0 else (ix * dx - x) / ux if ux < 0 else math.inf)
                    faces.append(((iy + 1) * dy - y) / uy if uy > 0 else (iy * dy - y) / uy if uy < 0 else math.inf)
                t = max(min(faces), 0.0)
                ka, ks = k_abs[n, iz, iy, ix], k_sca[n, iz, iy, ix]
                ke = ka + ks
                if ke * t > tau:
                    s = tau / ke
                    x, y, z = x + s * ux, y + s * uy, z + s * uz
                    if rng.random() * ke < ka:
                        absorbed[batch, iz, iy, ix] += w
                        break
                    u = _scatter(rng, asym[n, iz, iy, ix], u)
                    tau = -math.log(1.0 - rng.random())
                    continue
                tau -= ke * t
                x, y, z = x + t * ux, y + t * uy, z + t * uz
                axis = faces.index(min(faces))
                if axis == 1:
                    # Onto the face just crossed, seen from the next cell (periodic sides).
                    ix = (ix + (1 if ux > 0 else -1)) % nx
                    x = ix * dx if ux > 0 else (ix + 1) * dx
                elif axis == 2:
                    iy = (iy + (1 if uy > 0 else -1)) % ny
                    y = iy * dy if uy > 0 else (iy + 1) * dy
                elif uz > 0:
                    if iz == nz - 1:
                        leaving[batch, iy, ix] += w
                        break
                    iz += 1
                    z = z_edge[iz]
                elif iz > 0:
                    iz -= 1
                    z = z_edge[iz + 1]
                else:
                    z = z_edge[0]
                    arrival[batch, iy, ix] += w
                    if rng.random() < surface_emissivity[iy, ix]:
                        break
                    reflected[batch, iy, ix] += w
                    u = _lambertian(rng, 1.0)
                    tau = -math.log(1.0 - rng.random())

    cell_emission = emitted_cells.sum(axis=0)
    values = {
        "surface_downward_flux": arrival,
        "surface_upward_flux": emitted_sfc.sum(axis=0)[None] + reflected,
        "toa_upward_flux": leaving,
        "atmosphere_net_absorption": (absorbed - cell_emission[None]).sum(axis=1),
        "cell_net_absorption": absorbed - cell_emission[None],
    }
    mean = {k: v.mean(axis=0) for k, v in values.items()}
    se = {k: v.std(axis=0, ddof=1) / math.sqrt(batches) for k, v in values.items()}
    domain_se = {k: float(v.mean(axis=(1, 2)).std(ddof=1) / math.sqrt(batches)) for k, v in values.items()
                 if v.ndim == 3}
    return mean, se, domain_se
