"""Are the benchmarks unbiased per column, and are their standard errors honest?

On the shared benchmark scene this script runs the 3D Monte Carlo solver with two
independent seeds and the plain analog tracer of ``tests/twin_tracer.py`` (photons from
the top, cell by cell, analog absorption: no direct beam, tables, blocks, weights or
roulette to share a bias with).  For every column field it prints the root mean square
of the per-column z-scores (difference over the combined standard error: 1 when the
errors are honest), the share of columns with |z| > 3 (0.27 % for normal deviates) and the
z-score of the domain means.  Columns whose combined standard error is at round-off level
(below 1e-12: a clear column's direct flux, which every ray gets to the last digits) are
compared separately: their largest difference is printed, and must be round-off too.  It then times ``--runs`` independent runs on one core and prints
the CPU seconds for a 0.5 % standard error of the 800 m host-column surface downward flux
(direct + diffuse), from their spread, as ``bench_montecarlo.py`` does.

Usage: python benchmarks/bench_unbiased.py [--photons N] [--twin-photons N] [--runs K] [--json FILE]
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
from bench_montecarlo import SHARED, convert, cpu_for_relative_se, host_means  # noqa: E402
from twin_tracer import TALLIES, twin_fluxes  # noqa: E402

from surrogate3d.solvers import solve_monte_carlo  # noqa: E402


ROUND_OFF = 1e-12


def z_statistics(a, sa, b, sb, domain_a, domain_sa, domain_b, domain_sb):
    """(rms z, share |z| > 3, columns compared, domain-mean z, largest difference where the
    combined error is round-off) of two estimates with standard errors."""
    combined = np.hypot(sa, sb)
    diff = a - b
    keep = combined > ROUND_OFF
    z = diff[keep] / combined[keep]
    dz = (domain_a - domain_b) / max(math.hypot(domain_sa, domain_sb), ROUND_OFF)
    exact = float(np.abs(diff[~keep]).max()) if (~keep).any() else 0.0
    return float(np.sqrt(np.mean(z**2))), float(np.mean(np.abs(z) > 3)), int(keep.sum()), float(dz), exact


def compare_runs(one, two):
    out = {}
    for name in TALLIES:
        out[name] = z_statistics(one[name].values, one[name + "_standard_error"].values,
                                 two[name].values, two[name + "_standard_error"].values,
                                 float(one[name].mean()), float(one[name + "_domain_mean_standard_error"]),
                                 float(two[name].mean()), float(two[name + "_domain_mean_standard_error"]))
    return out


def compare_twin(run, twin):
    mean, se, domain_se, _, per_column = twin
    out = {}
    for name in TALLIES:
        value = run[name].values
        # A twin tally is a count: its error is at least the Poisson error of the count our
        # value predicts (covers columns where the twin counted nothing).
        twin_se = np.maximum(se[name], np.sqrt(np.abs(value) / per_column))
        out[name] = z_statistics(value, run[name + "_standard_error"].values, mean[name], twin_se,
                                 float(run[name].mean()), float(run[name + "_domain_mean_standard_error"]),
                                 float(mean[name].mean()), domain_se[name])
    return out


def dense_direct(scene, zenith, azimuth, rays_per_axis=16):
    """Domain-mean direct flux from one direct beam of 16 x 16 stratified rays per column
    (its own noise is a few 1e-6 on the shared scene)."""
    run = solve_monte_carlo(scene, zenith, azimuth, photons=2, batch_size=1, seed=99, rays_per_column=rays_per_axis)
    return float(run.surface_downward_direct_flux.mean())


def print_table(title, rows):
    print(title)
    print(f"  {'field':32s} {'rms z':>7s} {'|z|>3':>7s} {'columns':>8s} {'domain z':>9s} {'exact max diff':>15s}")
    for name, (rms, beyond, n, dz, exact) in rows.items():
        print(f"  {name:32s} {rms:7.3f} {100 * beyond:6.2f}% {n:8d} {dz:+9.2f} {exact:15.1e}")


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--scene", default=str(SHARED))
    parser.add_argument("--photons", type=int, default=4_000_000, help="photons of each of our runs")
    parser.add_argument("--twin-photons", type=int, default=40_000_000, help="photons of the plain analog tracer")
    parser.add_argument("--runs", type=int, default=6, help="one-core runs of 1 million photons for the CPU figure")
    parser.add_argument("--json", metavar="FILE")
    args = parser.parse_args(argv)
    scene, zenith, azimuth = convert(args.scene)
    solve_monte_carlo(scene, zenith, azimuth, photons=2000, seed=0)  # compile or load the kernels

    one = solve_monte_carlo(scene, zenith, azimuth, photons=args.photons, seed=1)
    two = solve_monte_carlo(scene, zenith, azimuth, photons=args.photons, seed=2)
    seeds = compare_runs(one, two)
    print_table(f"ours ({args.photons} photons, seed 1) against ours (seed 2):", seeds)
    converged = dense_direct(scene, zenith, azimuth)
    for run, label in ((one, "seed 1"), (two, "seed 2")):
        mean = float(run.surface_downward_direct_flux.mean())
        se = float(run.surface_downward_direct_flux_domain_mean_standard_error)
        print(f"domain-mean direct flux, {label}: {mean:.6f} +- {se:.6f}; 16 x 16 rays per column: "
              f"{converged:.6f}; z = {(mean - converged) / se:+.2f}")
    started = time.process_time()
    twin = twin_fluxes(scene, zenith, azimuth, args.twin_photons, batches=40, seed=3)
    twin_cpu = time.process_time() - started
    against_twin = compare_twin(one, twin)
    print_table(f"ours (seed 1) against the plain analog tracer ({args.twin_photons} photons, "
                f"{twin_cpu:.0f} CPU s):", against_twin)

    down, cpu = [], []
    for k in range(args.runs):
        started = time.process_time()
        out = solve_monte_carlo(scene, zenith, azimuth, photons=1_000_000, seed=100 + k, threads=1)
        cpu.append(time.process_time() - started)
        down.append(host_means(out.surface_downward_direct_flux.values + out.surface_downward_diffuse_flux.values))
    down = np.array(down)
    rel_se = down.std(axis=0, ddof=1) / down.mean(axis=0)
    cpu_half = cpu_for_relative_se(np.mean(cpu), rel_se, args.runs - 1)
    print(f"CPU seconds per 1 million photons (one core): {np.mean(cpu):.2f}")
    print(f"CPU seconds for a 0.5 % standard error of the 800 m surface downward flux: {cpu_half:.2f}")
    if args.json:
        Path(args.json).write_text(json.dumps({"ours_against_ours": seeds, "ours_against_twin": against_twin,
                                               "cpu_seconds_per_million_photons": float(np.mean(cpu)),
                                               "cpu_seconds_for_0.5pct_se_800m_surface_downward": cpu_half},
                                              indent=2))
    return 0


if __name__ == "__main__":
    sys.exit(main())
