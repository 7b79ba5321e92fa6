"""CPU per unit noise of the 800 m surface downward flux: working tree against a git revision.

Runs the 3D solver of the working tree and of ``--against`` (loaded side by side as
``compare_revisions.py`` does) in turn, one thread, ``--runs`` independent seeds each,
alternating which goes first, on the shared benchmark scene.  For every 800 m host column
(8 x 8 cells) it takes the variance over the runs of the surface downward flux (direct +
diffuse) and prints, over the host columns, the median and mean of

    (CPU seconds x variance) of the working tree / (CPU seconds x variance) of the revision,

the figure of merit of issue 18 (below 1.10 passes), with a bootstrap standard error (runs
resampled, 400 draws), the mean CPU seconds of each and the load average.  A revision
whose direct beam is noise-free but biased (a fixed lattice) shows only its noise here.

Usage: python benchmarks/bench_direct_noise.py [--against REV] [--runs K] [--photons N]
       [--rays-per-column R]
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


def cpu_variance_ratio(cpu_new, down_new, cpu_old, down_old):
    """Median and mean over host columns of (CPU x variance over runs), new over old."""
    ratio = (np.mean(cpu_new) * down_new.var(axis=0, ddof=1)) / (np.mean(cpu_old) * down_old.var(axis=0, ddof=1))
    return float(np.median(ratio)), float(np.mean(ratio))


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--against", default="55e49a7")
    parser.add_argument("--runs", type=int, default=8)
    parser.add_argument("--photons", type=int, default=1_000_000)
    parser.add_argument("--rays-per-column", type=int, default=None, help="the working tree's (default: its own)")
    parser.add_argument("--scene", default=str(SHARED))
    args = parser.parse_args(argv)
    scene, zenith, azimuth = convert(args.scene)
    sha, solve_old = export_revision(args.against)
    options = {} if args.rays_per_column is None else {"rays_per_column": args.rays_per_column}
    for solve in (solve_old, solve_monte_carlo):
        solve(scene, zenith, azimuth, photons=2000, seed=0, threads=1)  # compile or load
    cpu = {"old": [], "new": []}
    down = {"old": [], "new": []}
    loads = []
    for k in range(args.runs):
        for which in (("old", "new") if k % 2 == 0 else ("new", "old")):
            solve, extra = (solve_old, {}) if which == "old" else (solve_monte_carlo, options)
            started = time.process_time()
            out = solve(scene, zenith, azimuth, photons=args.photons, seed=1000 + k, threads=1, **extra)
            cpu[which].append(time.process_time() - started)
            down[which].append(host_means(out.surface_downward_direct_flux.values
                                          + out.surface_downward_diffuse_flux.values))
        loads.append(os.getloadavg()[0])
        print(f"run {k + 1:2d}: {sha} {cpu['old'][-1]:.2f} CPU s, working tree {cpu['new'][-1]:.2f} CPU s, "
              f"load {loads[-1]:.2f}", flush=True)
    down = {key: np.array(value) for key, value in down.items()}
    median, mean = cpu_variance_ratio(cpu["new"], down["new"], cpu["old"], down["old"])
    rng = np.random.default_rng(0)
    draws = []
    for _ in range(400):
        a, b = rng.integers(0, args.runs, args.runs), rng.integers(0, args.runs, args.runs)
        draws.append(cpu_variance_ratio(np.array(cpu["new"])[a], down["new"][a], np.array(cpu["old"])[b],
                                        down["old"][b]))
    draws = np.array(draws)
    print(f"CPU s per run: working tree {np.mean(cpu['new']):.3f}, {sha} {np.mean(cpu['old']):.3f} "
          f"(ratio {np.mean(cpu['new']) / np.mean(cpu['old']):.3f}); load average {min(loads):.2f} to {max(loads):.2f}")
    print(f"variance of the 800 m surface downward flux, median over host columns: working tree "
          f"{np.median(down['new'].var(axis=0, ddof=1)):.3e}, {sha} {np.median(down['old'].var(axis=0, ddof=1)):.3e}")
    print(f"CPU x variance, working tree over {sha}: median {median:.3f} +- {draws[:, 0].std():.3f}, "
          f"mean {mean:.3f} +- {draws[:, 1].std():.3f} (bootstrap over runs)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
