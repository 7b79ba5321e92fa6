"""A plain analog tracer on the shared benchmark scene, side by side with our solver.

Our solver traces only scattered light (the direct beam is exact and deterministic), so
its photons per second are not those of a plain tracer, whose photons all start at the
domain top and include the unscattered ones.  This script times a plain compiled
cell-by-cell analog tracer with the same physics on the same scene and machine (one
thread): photons enter the top at uniform random positions along the solar beam, walk
the grid cell by cell with periodic horizontal wrap (Amanatides and Woo 1987), have
exact exponential free paths, Henyey-Greenstein scattering (Henyey and Greenstein 1941),
absorption by weight with Russian roulette below a tenth of the starting weight, and a
Lambertian surface, with single-precision optical properties as in ours.  It prints, for
both tracers, photons per second per core and the CPU seconds needed for a 0.5 % standard
error of the surface downward (direct + diffuse) flux averaged over 800 m host columns
(8 x 8 cells), with the standard error from batch-to-batch (plain tracer) or run-to-run
(ours) spread (``cpu_for_relative_se``).  It also prints ours as incident-photon equivalents
(traced photons over the scattered fraction of the incident light, which is what a plain
tracer's photons carry on average).  The two tracers take turns (a quarter of the plain
tracer's photons, then one of our runs), because the speed of these machines drifts by
tens of percent within minutes; the geometric mean of the paired speed ratios is the
figure to compare.

Usage: python benchmarks/bench_plain_tracer.py [--photons N] [--ours-photons N] [--runs K] [--json FILE]
"""

import argparse
import json
import math
import sys
import time
from pathlib import Path

import numpy as np
from numba import njit

sys.path.insert(0, str(Path(__file__).resolve().parent))
from bench_montecarlo import SHARED, convert, host_means, cpu_for_relative_se  # noqa: E402

from surrogate3d.scenes.model import spacing  # noqa: E402
from surrogate3d.solvers import solve_monte_carlo  # noqa: E402
from surrogate3d.solvers._geometry import periodic_step  # noqa: E402
from surrogate3d.solvers._kernel import KERNEL  # noqa: E402
from surrogate3d.solvers._rng import seed_stream, uniform, uniform_open  # noqa: E402
from surrogate3d.solvers._transport import hg_cosine, lambertian_up, random_azimuth, rotate  # noqa: E402
from surrogate3d.solvers.sun import beam_direction  # noqa: E402

ROULETTE_WEIGHT = 0.1


@njit(cache=True, inline="always")
def _axis_walk(u, i, d, x):
    """Cell step, distance between faces and distance to the next face along one axis."""
    if u > 0.0:
        return 1, d / u, ((i + 1) * d - x) / u
    if u < 0.0:
        return -1, -d / u, (i * d - x) / u
    return 0, math.inf, math.inf


@njit(cache=True, inline="always")
def _moved(x, y, z, t, ux, uy, uz, lx, ly):
    """The point a distance ``t`` along the direction, wrapped into the domain."""
    x, y = x + t * ux, y + t * uy
    return x - math.floor(x / lx) * lx, y - math.floor(y / ly) * ly, z + t * uz


@njit(**KERNEL)
def _trace_batch(state, n, kext, ssa, asym, alb, z_edge, dx, dy, ux0, uy0, uz0, down, up):
    """Trace ``n`` photons of weight 1/n; add surface arrivals to ``down`` and top exits to
    ``up`` (ny, nx).  Returns (scattering events, cell crossings).

    After each new direction the walk is set up once (distances to the next face on each
    axis and the distance between faces), so a crossing costs a comparison, an addition and
    an extinction read (Amanatides and Woo 1987).
    """
    nz, ny, nx = kext.shape
    lx, ly = nx * dx, ny * dy
    events = crossings = 0
    w0 = 1.0 / n
    for _ in range(n):
        w = w0
        x, y, z = uniform(state) * lx, uniform(state) * ly, z_edge[nz]
        ux, uy, uz = ux0, uy0, uz0
        ix, iy, iz = min(int(x / dx), nx - 1), min(int(y / dy), ny - 1), nz - 1
        alive = True
        while alive:
            # A new direction (or the start): set up the walk from (x, y, z) in cell (ix, iy, iz).
            tau = -math.log(uniform_open(state))
            sx, ddx, tmx = _axis_walk(ux, ix, dx, x)
            sy, ddy, tmy = _axis_walk(uy, iy, dy, y)
            iuz = 1.0 / uz
            tmz = ((z_edge[iz + 1] if uz > 0.0 else z_edge[iz]) - z) * iuz
            t = 0.0
            while True:
                tn = min(tmx, tmy, tmz)
                k = kext[iz, iy, ix]
                d = k * (tn - t)
                if d > tau:
                    x, y, z = _moved(x, y, z, t + tau / k, ux, uy, uz, lx, ly)
                    events += 1
                    w *= ssa[iz, iy, ix]
                    if w < ROULETTE_WEIGHT * w0:
                        if uniform(state) >= 0.5:
                            alive = False
                            break
                        w *= 2.0
                    mu = hg_cosine(asym[iz, iy, ix], uniform(state))
                    cp, sp = random_azimuth(state)
                    ux, uy, uz = rotate(ux, uy, uz, mu, cp, sp)
                    if uz == 0.0:
                        uz = 1e-12
                    break
                tau -= d
                t = tn
                crossings += 1
                if tn == tmx:
                    ix = periodic_step(ix, sx, nx)
                    tmx += ddx
                elif tn == tmy:
                    iy = periodic_step(iy, sy, ny)
                    tmy += ddy
                elif uz > 0.0:
                    iz += 1
                    if iz == nz:
                        up[iy, ix] += w
                        alive = False
                        break
                    tmz += (z_edge[iz + 1] - z_edge[iz]) * iuz
                else:
                    iz -= 1
                    if iz < 0:
                        down[iy, ix] += w
                        w *= alb[iy, ix]
                        if w < ROULETTE_WEIGHT * w0:
                            if uniform(state) >= 0.5:
                                alive = False
                                break
                            w *= 2.0
                        x, y, _ = _moved(x, y, z, t, ux, uy, uz, lx, ly)
                        ix, iy, iz = min(int(x / dx), nx - 1), min(int(y / dy), ny - 1), 0
                        z = z_edge[0]
                        ux, uy, uz = lambertian_up(state)
                        break
                    tmz -= (z_edge[iz + 1] - z_edge[iz]) * iuz
    return events, crossings


def plain_tracer(scene, zenith, azimuth, photons, batches=32, seed=1, first_batch=0):
    """Per-batch surface downward and top upward fluxes per column, and the counts
    (batches ``first_batch`` to ``first_batch + batches - 1`` of the seed's streams)."""
    kext = np.ascontiguousarray(scene["extinction"].values[0], dtype=np.float32)
    ssa = np.ascontiguousarray(scene["single_scattering_albedo"].values[0], dtype=np.float32)
    asym = np.ascontiguousarray(scene["asymmetry_parameter"].values[0], dtype=np.float32)
    alb = np.ascontiguousarray(scene["surface_albedo"].values[0], dtype=np.float64)
    z_edge = np.ascontiguousarray(scene["z_edge"].values, dtype=np.float64)
    dx, dy = spacing(scene)
    ux, uy, uz = beam_direction(zenith, azimuth)
    ny, nx = alb.shape
    per_batch = photons // batches
    down = np.zeros((batches, ny, nx))
    up = np.zeros((batches, ny, nx))
    state = np.zeros(16, np.uint64)
    seed_stream(state, seed + 1_000_003, 0)  # the warm-up call below uses its own stream
    _trace_batch(state, 10, kext, ssa, asym, alb, z_edge, dx, dy, ux, uy, uz, down[0] * 0, up[0] * 0)
    events = crossings = 0
    cpu = time.process_time()
    for b in range(batches):
        seed_stream(state, seed, first_batch + b)
        e, c = _trace_batch(state, per_batch, kext, ssa, asym, alb, z_edge, dx, dy, ux, uy, uz, down[b], up[b])
        events, crossings = events + e, crossings + c
    cpu = time.process_time() - cpu
    cols = nx * ny
    return down * cols, up * cols, per_batch * batches, events, crossings, cpu


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--scene", default=str(SHARED))
    parser.add_argument("--photons", type=int, default=2_000_000, help="plain tracer photons")
    parser.add_argument("--ours-photons", type=int, default=1_000_000)
    parser.add_argument("--runs", type=int, default=4, help="independent runs of ours for its noise")
    parser.add_argument("--json", metavar="FILE")
    args = parser.parse_args(argv)
    scene, zenith, azimuth = convert(args.scene)

    # The two tracers take turns, a quarter of the plain tracer's photons then one of our
    # runs, so that both see the same drifts of the machine's speed; each pair gives a
    # ratio of speeds.
    solve_monte_carlo(scene, zenith, azimuth, photons=2000, seed=0, threads=1)
    per_turn = 8
    down, up, ours, ours_cpu, direct, ratios = [], [], [], [], [], []
    photons = events = crossings = 0
    cpu = 0.0
    for k in range(args.runs):
        d, u, n, e, c, t = plain_tracer(scene, zenith, azimuth, args.photons // args.runs, batches=per_turn,
                                        first_batch=k * per_turn)
        down.append(d)
        up.append(u)
        photons, events, crossings, cpu = photons + n, events + e, crossings + c, cpu + t
        t0 = time.process_time()
        out = solve_monte_carlo(scene, zenith, azimuth, photons=args.ours_photons, seed=200 + k, threads=1)
        ours_cpu.append(time.process_time() - t0)
        ours.append(host_means(out.surface_downward_direct_flux.values + out.surface_downward_diffuse_flux.values))
        direct.append(out)
        ratios.append((int(out.photons) / ours_cpu[-1]) / (n / t))
    down, up = np.concatenate(down), np.concatenate(up)
    host = np.array([host_means(d) for d in down])
    rel_se = host.std(axis=0, ddof=1) / math.sqrt(len(host)) / host.mean(axis=0)
    plain_cpu_half = cpu_for_relative_se(cpu, rel_se, len(host) - 1)
    ours = np.array(ours)
    ours_rel = ours.std(axis=0, ddof=1) / ours.mean(axis=0)
    ours_cpu_half = cpu_for_relative_se(np.mean(ours_cpu), ours_rel, args.runs - 1)
    out = direct[0]
    alb = scene["surface_albedo"].values[0]
    # The scattered fraction: incident light not absorbed unscattered at the surface nor in
    # the atmosphere (direct-beam absorption in the atmosphere is below 1e-3 here).
    scattered = 1.0 - float(((1.0 - alb) * out.surface_downward_direct_flux.values).mean())
    ours_pps = int(out.photons) * args.runs / sum(ours_cpu)
    paired = math.exp(np.mean(np.log(ratios)))

    figures = {
        "plain_photons_per_second_per_core": photons / cpu,
        "plain_scattering_events_per_photon": events / photons,
        "plain_cell_crossings_per_photon": crossings / photons,
        "plain_domain_mean_surface_downward_flux": float(down.mean()),
        "plain_domain_mean_surface_downward_flux_se": float(down.mean(axis=(1, 2)).std(ddof=1) / math.sqrt(len(down))),
        "plain_domain_mean_toa_upward_flux": float(up.mean()),
        "plain_cpu_seconds_for_0.5pct_se_800m_surface_downward": plain_cpu_half,
        "ours_photons_per_second_per_core": ours_pps,
        "ours_scattered_fraction": scattered,
        "ours_incident_photon_equivalents_per_second_per_core": ours_pps / scattered,
        "ours_domain_mean_surface_downward_flux": float(ours.mean()),
        "ours_domain_mean_toa_upward_flux": float(np.mean([float(o.toa_upward_flux.mean()) for o in direct])),
        "ours_cpu_seconds_for_0.5pct_se_800m_surface_downward": ours_cpu_half,
        "ours_over_plain_photons_per_second_paired": paired,
        "ours_over_plain_incident_photon_equivalents_paired": paired / scattered,
        "cpu_to_0.5pct_se_plain_over_ours": plain_cpu_half / ours_cpu_half,
    }
    width = max(map(len, figures))
    for key, value in figures.items():
        print(f"{key:<{width}}  {value:.4g}")
    if args.json:
        Path(args.json).write_text(json.dumps(figures, indent=2))
    return 0


if __name__ == "__main__":
    sys.exit(main())
