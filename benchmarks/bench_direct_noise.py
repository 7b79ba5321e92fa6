"""CPU per unit noise of the 800 m surface downward flux: working tree against a git revision.

The figure of merit of issue 18 is, per 800 m host column (8 x 8 cells) of the shared
benchmark scene, ``CPU seconds x variance`` of the surface downward flux (direct +
diffuse) of the working tree's 3D solver over the same of ``--against`` (loaded side by
side as ``compare_revisions.py`` does), median over the host columns; below 1.10 passes.
Both solvers run in one process, one thread, in turn, alternating which goes first.  The
product is measured in two factors, each from paired runs:

- CPU: ``--runs`` pairs of full runs of ``--photons`` photons (the default batch size);
- variance: ``--calls`` pairs of runs of two batches of that batch size each (the
  variance of a run of ``n`` batches is the per-batch variance over ``n``, for both
  solvers alike), which gives per-column variances from ``--calls - 1`` degrees of
  freedom instead of ``--runs - 1``.

It prints both factors and their product with bootstrap standard errors (pairs resampled,
400 draws), the same figure from the full runs alone (the protocol of the 2026-12-04 entry
of SPEED_LOG.md: noisy, about +-0.25 for 8 runs), and the load average.  A revision
whose direct beam is noise-free but biased (a fixed lattice) shows only its noise here.

Usage: python benchmarks/bench_direct_noise.py [--against REV] [--runs K] [--calls M]
       [--photons N] [--rays-per-column R]
"""

import argparse
import os
import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
from bench_montecarlo import SHARED, convert, host_means  # noqa: E402
from compare_revisions import export_revision  # noqa: E402

from surrogate3d.solvers import solve_monte_carlo  # noqa: E402
from surrogate3d.solvers.montecarlo import default_batch_size  # noqa: E402


def median_ratio(new, old):
    """Median over host columns of the ratio of the variances over runs (axis 0), new over old."""
    return float(np.median(new.var(axis=0, ddof=1) / old.var(axis=0, ddof=1)))


def paired(solvers, scene, zenith, azimuth, runs, seed0, **kwargs):
    """CPU seconds and 800 m host means of the surface downward flux of ``runs`` pairs of runs."""
    cpu = {name: [] for name in solvers}
    down = {name: [] for name in solvers}
    for k in range(runs):
        for name in (list(solvers) if k % 2 == 0 else list(solvers)[::-1]):
            solve, extra = solvers[name]
            started = time.process_time()
            out = solve(scene, zenith, azimuth, seed=seed0 + k, threads=1, **kwargs, **extra)
            cpu[name].append(time.process_time() - started)
            down[name].append(host_means(out.surface_downward_direct_flux.values
                                         + out.surface_downward_diffuse_flux.values))
    return ({name: np.array(v) for name, v in cpu.items()}, {name: np.array(v) for name, v in down.items()})


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--against", default="55e49a7")
    parser.add_argument("--runs", type=int, default=8, help="pairs of full runs (CPU)")
    parser.add_argument("--calls", type=int, default=200, help="pairs of two-batch runs (variance)")
    parser.add_argument("--photons", type=int, default=1_000_000)
    parser.add_argument("--rays-per-column", type=int, default=None, help="the working tree's (default: its own)")
    parser.add_argument("--scene", default=str(SHARED))
    args = parser.parse_args(argv)
    scene, zenith, azimuth = convert(args.scene)
    sha, solve_old = export_revision(args.against)
    options = {} if args.rays_per_column is None else {"rays_per_column": args.rays_per_column}
    solvers = {"new": (solve_monte_carlo, options), "old": (solve_old, {})}
    for solve, extra in solvers.values():
        solve(scene, zenith, azimuth, photons=2000, seed=0, threads=1, **extra)  # compile or load
    loads = [os.getloadavg()[0]]
    cpu, down = paired(solvers, scene, zenith, azimuth, args.runs, 1000, photons=args.photons)
    loads.append(os.getloadavg()[0])
    batch = default_batch_size(args.photons)
    _, two = paired(solvers, scene, zenith, azimuth, args.calls, 5000, photons=2 * batch, batch_size=batch)
    loads.append(os.getloadavg()[0])

    cpu_ratio = cpu["new"].mean() / cpu["old"].mean()
    var_ratio = median_ratio(two["new"], two["old"])
    rng = np.random.default_rng(0)
    draws = []
    for _ in range(400):
        a, b = rng.integers(0, args.runs, args.runs), rng.integers(0, args.calls, args.calls)
        draws.append((cpu["new"][a].mean() / cpu["old"][a].mean(), median_ratio(two["new"][b], two["old"][b]),
                      median_ratio(down["new"][a], down["old"][a]) * cpu["new"][a].mean() / cpu["old"][a].mean()))
    se = np.array(draws).std(axis=0)
    print(f"load average {min(loads):.2f} to {max(loads):.2f}")
    print(f"CPU s per run of {args.photons} photons ({args.runs} pairs): working tree {cpu['new'].mean():.3f}, "
          f"{sha} {cpu['old'].mean():.3f}; ratio {cpu_ratio:.3f} +- {se[0]:.3f}")
    print(f"per-batch variance of the 800 m surface downward flux ({args.calls} pairs of 2-batch runs), median over "
          f"host columns: working tree {np.median(two['new'].var(axis=0, ddof=1)) * 2:.3e}, {sha} "
          f"{np.median(two['old'].var(axis=0, ddof=1)) * 2:.3e}; median ratio {var_ratio:.3f} +- {se[1]:.3f}")
    print(f"CPU x variance, working tree over {sha}: {cpu_ratio * var_ratio:.3f} +- "
          f"{cpu_ratio * var_ratio * np.hypot(se[0] / cpu_ratio, se[1] / var_ratio):.3f}")
    print(f"the same from the {args.runs} full runs alone (median over host columns): "
          f"{median_ratio(down['new'], down['old']) * cpu_ratio:.3f} +- {se[2]:.3f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
