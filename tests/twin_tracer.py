"""A plain analog Monte Carlo tracer: the statistical twin of the production kernel.

Nothing in it is clever: photons of equal weight enter the top of the domain at uniformly
random points along the solar beam (independent columns: in a uniformly random column),
walk the grid cell by cell with periodic horizontal wrap (Amanatides and Woo 1987), fly
exponential free paths, are absorbed at a collision with probability ``1 - omega`` and
otherwise scattered by the Henyey-Greenstein phase function (Henyey and Greenstein 1941),
and at the Lambertian surface are absorbed with probability ``1 - A`` and otherwise
reflected.  A photon reaching the surface unscattered counts as direct flux.  Every tally
is a count, so the twin shares with the production kernel only the random-number streams
and the sampling of directions (each tested against its own reference in
``test_montecarlo_kernels.py``): no direct beam, no source tables, no majorant blocks, no
clear-air shortcuts, no weights, no roulette, no expected-value tallies.

Used by ``tests/solvers/test_twin.py`` and ``benchmarks/bench_plain_tracer.py``.
"""

import math

import numpy as np
from numba import njit

from surrogate3d.scenes.model import spacing
from surrogate3d.solvers._geometry import periodic_step
from surrogate3d.solvers._rng import seed_stream, uniform, uniform_open
from surrogate3d.solvers._transport import hg_cosine, lambertian_up, random_azimuth, rotate
from surrogate3d.solvers.sun import beam_direction

#: Tallies per column, in the order of the ``columns`` array of :func:`trace_batch`.
TALLIES = ("toa_upward_flux", "surface_downward_direct_flux", "surface_downward_diffuse_flux",
           "surface_upward_flux", "atmosphere_absorption", "surface_absorption")
TOA, DIRECT, DIFFUSE, UP, ATM, SFC = range(6)


@njit(cache=True)
def _axis_walk(u, i, d, x):
    """Cell step, distance between faces and distance to the next face along one axis."""
    if u > 0.0:
        return 1, d / u, ((i + 1) * d - x) / u
    if u < 0.0:
        return -1, -d / u, (i * d - x) / u
    return 0, math.inf, math.inf


@njit(cache=True)
def _wrapped(pos, length):
    return pos - math.floor(pos / length) * length


@njit(cache=True)
def _pick(cdf, u):
    k = 0
    while k < cdf.size - 1 and cdf[k] <= u:
        k += 1
    return k


@njit(cache=True)
def trace_batch(state, photons, band_cdf, kext, ssa, asym, alb, z_edge, dx, dy, ux0, uy0, uz0, independent,
                columns, cells):
    """Trace ``photons`` photons; add counts to ``columns`` (6, ny, nx) and ``cells`` (nz, ny, nx).

    ``kext``, ``ssa``, ``asym`` are (nband, nz, ny, nx), ``alb`` (nband, ny, nx); a photon's
    band is drawn from the cumulative solar weights ``band_cdf``.  With ``independent`` the
    photon keeps its column and only its vertical motion counts.  Returns the events.
    """
    nb, nz, ny, nx = kext.shape
    lx, ly = nx * dx, ny * dy
    events = 0
    for _ in range(photons):
        b = _pick(band_cdf, uniform(state))
        x, y, z = uniform(state) * lx, uniform(state) * ly, z_edge[nz]
        ux, uy, uz = ux0, uy0, uz0
        ix, iy, iz = min(int(x / dx), nx - 1), min(int(y / dy), ny - 1), nz - 1
        scattered = False
        alive = True
        while alive:
            tau = -math.log(uniform_open(state))
            if independent:
                sx, ddx, tmx, sy, ddy, tmy = 0, math.inf, math.inf, 0, math.inf, math.inf
            else:
                sx, ddx, tmx = _axis_walk(ux, ix, dx, x)
                sy, ddy, tmy = _axis_walk(uy, iy, dy, y)
            tmz = ((z_edge[iz + 1] if uz > 0.0 else z_edge[iz]) - z) / uz
            t = 0.0
            while True:
                tn = min(tmx, tmy, tmz)
                k = kext[b, iz, iy, ix]
                if k * (tn - t) > tau:
                    s = t + tau / k
                    if not independent:
                        x, y = _wrapped(x + s * ux, lx), _wrapped(y + s * uy, ly)
                    z = min(max(z + s * uz, z_edge[iz]), z_edge[iz + 1])
                    events += 1
                    if uniform(state) >= ssa[b, iz, iy, ix]:
                        columns[ATM, iy, ix] += 1.0
                        cells[iz, iy, ix] += 1.0
                        alive = False
                        break
                    scattered = True
                    mu = hg_cosine(asym[b, iz, iy, ix], uniform(state))
                    cp, sp = random_azimuth(state)
                    ux, uy, uz = rotate(ux, uy, uz, mu, cp, sp)
                    if uz == 0.0:
                        uz = 1e-12
                    break
                tau -= k * (tn - t)
                t = tn
                if tn == tmx:
                    ix = periodic_step(ix, sx, nx)
                    tmx += ddx
                elif tn == tmy:
                    iy = periodic_step(iy, sy, ny)
                    tmy += ddy
                elif uz > 0.0:
                    iz += 1
                    if iz == nz:
                        columns[TOA, iy, ix] += 1.0
                        alive = False
                        break
                    tmz = (z_edge[iz + 1] - z) / uz
                else:
                    iz -= 1
                    if iz >= 0:
                        tmz = (z_edge[iz] - z) / uz
                        continue
                    columns[DIFFUSE if scattered else DIRECT, iy, ix] += 1.0
                    if uniform(state) >= alb[b, iy, ix]:
                        columns[SFC, iy, ix] += 1.0
                        alive = False
                        break
                    columns[UP, iy, ix] += 1.0
                    scattered = True
                    if not independent:
                        x, y = _wrapped(x + t * ux, lx), _wrapped(y + t * uy, ly)
                    iz, z = 0, z_edge[0]
                    ux, uy, uz = lambertian_up(state)
                    break
    return events


def twin_fluxes(scene, zenith, azimuth, photons, *, batches=20, seed=1, independent_columns=False):
    """Column fluxes of ``scene`` from the plain analog tracer, as fractions of the incident flux.

    Returns ``(mean, se, domain_se, cells, photons_per_column)``: dicts of per-column means
    and standard errors (from the spread between batches) and of the domain-mean standard
    errors, for every name of :data:`TALLIES`, the absorbed fraction per cell, and the
    photons each column received on average (a tally is a count divided by it).
    """
    def values(name, dtype):
        return np.ascontiguousarray(scene[name].values, dtype=dtype)

    kext, ssa, asym = values("extinction", np.float32), values("single_scattering_albedo", np.float32), \
        values("asymmetry_parameter", np.float32)
    alb, z_edge = values("surface_albedo", np.float64), values("z_edge", np.float64)
    weights = values("solar_weight", np.float64)
    band_cdf = np.cumsum(weights / weights.sum())
    dx, dy = spacing(scene)
    ux, uy, uz = beam_direction(zenith, azimuth)
    nb, nz, ny, nx = kext.shape
    per_batch = -(-photons // batches)
    columns = np.zeros((batches, 6, ny, nx))
    cells = np.zeros((nz, ny, nx))
    state = np.zeros(16, np.uint64)
    for b in range(batches):
        seed_stream(state, seed, b)
        trace_batch(state, per_batch, band_cdf, kext, ssa, asym, alb, z_edge, dx, dy, ux, uy, uz,
                              independent_columns, columns[b], cells)
    columns *= nx * ny / per_batch  # each column receives per_batch / (nx ny) photons on average
    mean = columns.mean(axis=0)
    se = columns.std(axis=0, ddof=1) / math.sqrt(batches)
    domain_se = columns.mean(axis=(2, 3)).std(axis=0, ddof=1) / math.sqrt(batches)
    names = dict(enumerate(TALLIES))
    return ({names[i]: mean[i] for i in names}, {names[i]: se[i] for i in names},
            {names[i]: float(domain_se[i]) for i in names}, cells * nx * ny / (per_batch * batches),
            per_batch * batches / (nx * ny))
