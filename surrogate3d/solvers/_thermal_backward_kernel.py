"""Backward (adjoint) Monte Carlo kernels for the longwave fluxes at a column's boundaries (numba).

The flux through a horizontal face is ``pi`` times the mean radiance over cosine-weighted
directions.  So, for every column, rays start at random points of the column's surface
(surface downward flux: directions up) or of its top (upward flux at the top: directions
down) and are traced backward along the paths photons would have come by, on the cell
grid of :mod:`surrogate3d.solvers._thermal_kernel` (periodic sides in 3D, the column's own
layers for independent columns).  Along a ray the emission reaching the start point is
added deterministically: a segment of length ``s`` in a cell of absorption coefficient
``k_a`` and Planck radiance ``B`` adds ``w B (1 - exp(-k_a s))`` and leaves the weight
``w exp(-k_a s)`` (exact for cells of uniform properties).  Only what is random stays
random: the start, the direction, the spectral interval, the scattering distances and
directions (Henyey-Greenstein; its phase function depends on the angle only, so it is the
same backward), the Lambertian reflections at the surface (``w eps B_s`` added, ``w (1 -
eps)`` goes on) and the Russian roulette of low weights.  A ray leaving the top adds ``w
B_top`` (0 with cold space).

Every ray's radiance is formed relative to the radiance ``B_ref`` of the cell where it
starts: the shares of the weight left in the cells, the surface and space add up to 1 on
every complete path, so

    L = B_ref + sum over the deposits a_j of a_j (B_j - B_ref),

the same number as the plain sum; but a ray ended by the roulette (or the cap on
scattering events) then stands for ``B_ref`` instead of 0 where it stops, so the roulette
adds noise only where temperatures differ, and an isothermal enclosure gives exact
fluxes with no noise at all.

Draws, in order (the plain twin in ``tests/thermal_backward_twin.py`` draws the same): once
per batch the shift of the spectral offsets (:func:`_run_batch`); per ray the start point
(x, then y) and the direction (:func:`~surrogate3d.solvers._transport.lambertian_up`,
negated for rays from the top), then along the path a scattering optical depth (``-log``
of :func:`~surrogate3d.solvers._rng.uniform_open`) at the start and after every
scattering or reflection, a Henyey-Greenstein cosine and an azimuth at every scattering,
a direction at every reflection, and one uniform at every roulette.
"""

import math
from collections import namedtuple

import numpy as np
from numba import njit, prange

from ._kernel import KERNEL
from ._rng import seed_stream, uniform, uniform_open
from ._thermal_kernel import _search, table_radiance
from ._transport import cross_side, hg_cosine, lambertian_up, next_face, random_azimuth, rotate

#: The fluxes a batch estimates per column, in order.
TARGETS = ("surface_downward_flux", "toa_upward_flux")
SURFACE_DOWN, TOA_UP = 0, 1
#: The golden ratio's fractional part: the step of the columns' spectral offsets.
GOLDEN = 0.5 * (math.sqrt(5.0) - 1.0)

BackwardRun = namedtuple("BackwardRun", ["full_3d", "seed", "rays", "roulette", "max_events"])
BackwardRun.__doc__ = """Settings of a run: 3D (else independent columns), random seed, rays per
column, flux and batch, roulette weight (a ray starts with weight 1), scattering events after
which a ray takes the radiance of the cell where it is."""


@njit(**KERNEL)
def ray_radiance(state, n, x, y, z, ux, uy, uz, ix, iy, iz, b_ref, full_3d, roulette, max_events, medium,
                 boundaries, planck):
    """Radiance [W m-2 sr-1] of interval ``n`` arriving at (x, y, z) in cell (iz, iy, ix) from
    the direction ``-(ux, uy, uz)``, by tracing the ray along (ux, uy, uz); returns it and
    the scattering events.

    ``b_ref`` is the radiance the result is formed relative to (module docstring).  In 3D
    the ray walks the cells with periodic sides, in independent-column mode only the layers
    of its column (``x``, ``y``, ``ux``, ``uy`` then do not matter).  Weights below
    ``roulette`` go on to Russian roulette.
    """
    gas = medium.gas[n]
    cloud = medium.cloud[medium.band_of[n]]
    radiance = planck.radiance[n]
    t0, inv_dt = planck.t0, planck.inv_dt
    temperature, z_edge, dx, dy = medium.temperature, medium.z_edge, medium.dx, medium.dy
    nz, ny, nx = temperature.shape
    if uz == 0.0:
        uz = 1e-12  # a ray parallel to the layers would never cross a face
    w = 1.0
    total = b_ref
    tau = -math.log(uniform_open(state))
    events = 0
    while True:
        t, axis = next_face(x, y, z, ux, uy, uz, ix, iy, iz, dx, dy, z_edge, full_3d)
        props = cloud[iz, iy, ix]
        k_abs = gas[iz] + props[0]
        k_sca = props[1]
        scattered = k_sca * t > tau
        s = tau / k_sca if scattered else t
        if k_abs > 0.0:
            a = -w * math.expm1(-k_abs * s)
            total += a * (table_radiance(radiance, t0, inv_dt, temperature[iz, iy, ix]) - b_ref)
            w -= a
        if scattered:
            x += s * ux
            y += s * uy
            z += s * uz
            events += 1
            if events >= max_events:
                return total + w * (table_radiance(radiance, t0, inv_dt, temperature[iz, iy, ix]) - b_ref), events
            mu = hg_cosine(props[2], uniform(state))
            cp, sp = random_azimuth(state)
            ux, uy, uz = rotate(ux, uy, uz, mu, cp, sp)
            if uz == 0.0:
                uz = 1e-12
            tau = -math.log(uniform_open(state))
        else:
            tau -= k_sca * t
            if axis < 2:
                x, y, z, ix, iy = cross_side(axis, t, x, y, z, ux, uy, uz, ix, iy, nx, ny, dx, dy)
            else:
                x += t * ux
                y += t * uy
                if uz > 0.0:
                    iz += 1
                    if iz == nz:
                        t_top = boundaries.top_temperature
                        b_top = table_radiance(radiance, t0, inv_dt, t_top) if t_top > 0.0 else 0.0
                        return total + w * (b_top - b_ref), events
                    z = z_edge[iz]
                else:
                    z = z_edge[iz]
                    iz -= 1
                    if iz < 0:
                        iz = 0
                        a = boundaries.emissivity[iy, ix] * w
                        if a > 0.0:
                            b_sfc = table_radiance(radiance, t0, inv_dt, boundaries.surface_temperature[iy, ix])
                            total += a * (b_sfc - b_ref)
                            w -= a
                            if w <= 0.0:
                                return total, events
                        ux, uy, uz = lambertian_up(state)
                        tau = -math.log(uniform_open(state))
        if w < roulette:
            if uniform(state) * roulette < w:
                w = roulette
            else:
                return total, events


@njit(**KERNEL)
def _run_batch(state, batch, run, medium, boundaries, planck, cdf, out):
    """Estimate batch number ``batch`` of both fluxes of every column into ``out`` (2, ny, nx)
    [W m-2], drawing from the stream ``state`` (seeded here from the run's seed and the batch
    number); returns the scattering events.

    Per column and flux, ray ``i`` of ``m`` takes its interval at ``(i + o) / m`` of the
    flux's cumulative spectral proposal ``cdf[flux]`` (systematic sampling: every column
    covers the spectrum evenly) and carries ``pi cdf[flux, -1] / (m q_n)``, ``q_n`` the
    proposal of its interval ``n``.  The offset of column ``c`` (``iy nx + ix``) is ``o =
    frac(U + c GOLDEN)``, ``U`` uniform and drawn once per batch: uniform in every column, so
    every column's estimate is unbiased, and spread evenly over neighbouring columns (a
    Kronecker sequence, randomly shifted), so a block of columns covers the spectrum more
    evenly than independent offsets would, even with one ray per column and batch.
    """
    seed_stream(state, run.seed, batch)
    temperature, z_edge, dx, dy = medium.temperature, medium.z_edge, medium.dx, medium.dy
    nz, ny, nx = temperature.shape
    radiance, t0, inv_dt = planck.radiance, planck.t0, planck.inv_dt
    m = run.rays
    shift = uniform(state)
    events = 0
    for iy in range(ny):
        for ix in range(nx):
            offset = shift + (iy * nx + ix) * GOLDEN
            offset -= math.floor(offset)
            for flux in range(2):
                row = cdf[flux]
                total = row[-1]
                iz = 0 if flux == SURFACE_DOWN else nz - 1
                z = z_edge[0] if flux == SURFACE_DOWN else z_edge[nz]
                acc = 0.0
                for i in range(m):
                    n = _search(row, (i + offset) / m * total)
                    q = row[n] - row[n - 1] if n > 0 else row[0]
                    x = (ix + uniform(state)) * dx
                    y = (iy + uniform(state)) * dy
                    ux, uy, uz = lambertian_up(state)
                    if flux == TOA_UP:
                        uz = -uz
                    b_ref = table_radiance(radiance[n], t0, inv_dt, temperature[iz, iy, ix])
                    value, k = ray_radiance(state, n, x, y, z, ux, uy, uz, ix, iy, iz, b_ref, run.full_3d,
                                            run.roulette, run.max_events, medium, boundaries, planck)
                    acc += value / q
                    events += k
                out[flux, iy, ix] = math.pi * total * acc / m
    return events


@njit(cache=True, parallel=True)
def run_batches(n_batches, run, medium, boundaries, planck, cdf, values):
    """Run batches ``0 .. n_batches - 1``, in parallel, batch ``b`` into ``values[b]``
    ((nbatch, 2, ny, nx) [W m-2]); returns the scattering events.

    Every batch seeds its own stream and writes only its own slot, so the results do not
    depend on the number of threads.
    """
    # 128 bytes for each 32-byte stream state: a state, written at every draw, then never
    # shares a cache line with another thread's.
    states = np.zeros((n_batches, 16), dtype=np.uint64)
    events = np.zeros(n_batches, dtype=np.int64)
    for b in prange(n_batches):
        events[b] = _run_batch(states[b], b, run, medium, boundaries, planck, cdf, values[b])
    return events.sum()
