"""A plain analog tracer on the shared benchmark scene, side by side with our solver.

Our solver traces only scattered light (every batch traces the direct beam with rays, and
its photons start where that beam scatters), so its photons per second are not those of a
plain tracer, whose photons all start at the domain top and include the unscattered ones.
This script times the plain compiled cell-by-cell analog tracer of ``tests/twin_tracer.py``
(the statistical twin the tests compare our kernel with: photons enter the top at uniform
random positions, walk the grid cell by cell with periodic wrap, exact exponential free
paths, Henyey-Greenstein scattering, analog absorption, Lambertian surface) on the same
scene and machine (one thread).  It prints, for both tracers, photons per second per core
and the CPU seconds needed for a 0.5 % standard error of the surface downward (direct +
diffuse) flux averaged over 800 m host columns (8 x 8 cells), with the standard error from
batch-to-batch (plain tracer) or run-to-run (ours) spread (``cpu_for_relative_se``).  It
also prints ours as incident-photon equivalents (traced photons over the scattered
fraction of the incident light, which is what a plain tracer's photons carry on average).
The two tracers take turns (a quarter of the plain tracer's photons, then one of our
runs), because the speed of these machines drifts by tens of percent within minutes; the
geometric mean of the paired speed ratios is the figure to compare.

Usage: python benchmarks/bench_plain_tracer.py [--photons N] [--ours-photons N] [--runs K] [--json FILE]
"""

import argparse
import json
import math
import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
sys.path.insert(0, str(HERE.parent / "tests"))
from bench_montecarlo import SHARED, convert, host_means, cpu_for_relative_se  # noqa: E402
from twin_tracer import DIFFUSE, DIRECT, TOA, trace_batch  # noqa: E402

from surrogate3d.scenes.model import spacing  # noqa: E402
from surrogate3d.solvers import solve_monte_carlo  # noqa: E402
from surrogate3d.solvers._rng import seed_stream  # noqa: E402
from surrogate3d.solvers.sun import beam_direction  # noqa: E402


def plain_tracer(scene, zenith, azimuth, photons, batches=32, seed=1, first_batch=0):
    """Per-batch surface downward and top upward fluxes per column, and the counts
    (batches ``first_batch`` to ``first_batch + batches - 1`` of the seed's streams)."""
    def values(name, dtype):
        return np.ascontiguousarray(scene[name].values, dtype=dtype)

    kext, ssa = values("extinction", np.float32), values("single_scattering_albedo", np.float32)
    asym, alb = values("asymmetry_parameter", np.float32), values("surface_albedo", np.float64)
    z_edge = values("z_edge", np.float64)
    band_cdf = np.array([1.0])
    dx, dy = spacing(scene)
    ux, uy, uz = beam_direction(zenith, azimuth)
    nb, nz, ny, nx = kext.shape
    per_batch = photons // batches
    tallies = np.zeros((batches, 6, ny, nx))
    cells = np.zeros((nz, ny, nx))
    state = np.zeros(16, np.uint64)
    seed_stream(state, seed + 1_000_003, 0)  # the warm-up call below uses its own stream
    trace_batch(state, 10, band_cdf, kext, ssa, asym, alb, z_edge, dx, dy, ux, uy, uz, False, tallies[0] * 0, cells)
    events = 0
    cpu = time.process_time()
    for b in range(batches):
        seed_stream(state, seed, first_batch + b)
        events += trace_batch(state, per_batch, band_cdf, kext, ssa, asym, alb, z_edge, dx, dy, ux, uy, uz, False,
                              tallies[b], cells)
    cpu = time.process_time() - cpu
    cols = nx * ny / per_batch
    return (tallies[:, DIRECT] + tallies[:, DIFFUSE]) * cols, tallies[:, TOA] * cols, per_batch * batches, events, cpu


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
    photons = events = 0
    cpu = 0.0
    for k in range(args.runs):
        d, u, n, e, t = plain_tracer(scene, zenith, azimuth, args.photons // args.runs, batches=per_turn,
                                     first_batch=k * per_turn)
        down.append(d)
        up.append(u)
        photons, events, cpu = photons + n, events + e, cpu + t
        t0 = time.process_time()
        out = solve_monte_carlo(scene, zenith, azimuth, photons=args.ours_photons, seed=200 + k, threads=1)
        ours_cpu.append(time.process_time() - t0)
        ours.append(host_means(out.surface_downward_direct_flux.values + out.surface_downward_diffuse_flux.values))
        direct.append(out)
        ratios.append((int(out.run_photons) / ours_cpu[-1]) / (n / t))
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
    ours_pps = int(out.run_photons) * args.runs / sum(ours_cpu)
    paired = math.exp(np.mean(np.log(ratios)))

    figures = {
        "plain_photons_per_second_per_core": photons / cpu,
        "plain_scattering_events_per_photon": events / photons,
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
