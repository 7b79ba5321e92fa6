"""How precise are the Monte Carlo standard errors themselves, and what do more batches cost?

Two independent runs of the 3D solver on the shared benchmark scene estimate every
column's standard error twice.  If a standard error is uncertain by a relative ``p``, the
log of the ratio of the two estimates has a spread of about ``sqrt(2) p``; so, per field,
``p`` is measured as the standard deviation of ``ln(se_a / se_b) / sqrt(2)`` over the
columns (and, robust to a few columns with very few photons, the same from the
interquartile range / 1.349).  For normal batch means the sample variance of ``n`` of them
follows a chi-square law with ``n - 1`` degrees of freedom, so ``p ~ 1 / sqrt(2 (n - 1))``
(from memory; any statistics text): 13 % for 32 batches, 5 % for 200.  The CPU seconds of
each run are printed beside (one thread).

Usage: python benchmarks/bench_standard_errors.py [--photons N] [--batches 32 200 ...]
"""

import argparse
import os
import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
from bench_montecarlo import SHARED, convert  # noqa: E402

from surrogate3d.archive import COLUMN_FLUXES  # noqa: E402
from surrogate3d.core.run_result import stderr_name  # noqa: E402
from surrogate3d.solvers import solve_monte_carlo  # noqa: E402

FIELDS = list(COLUMN_FLUXES) + ["surface_absorption"]


def precision(se_a, se_b):
    """Relative precision of one standard error from two independent estimates per column:
    ``(sd, robust)`` of ``ln(se_a / se_b) / sqrt(2)`` over the columns where both are > 0."""
    ok = (se_a > 0) & (se_b > 0)
    if ok.sum() < 10:
        return float("nan"), float("nan"), int(ok.sum())
    r = np.log(se_a[ok] / se_b[ok]) / np.sqrt(2.0)
    q75, q25 = np.percentile(r, [75, 25])
    return float(r.std()), float((q75 - q25) / 1.349), int(ok.sum())


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--photons", type=int, default=2_500_000)
    parser.add_argument("--batches", type=int, nargs="+", default=[32, 200])
    parser.add_argument("--scene", default=str(SHARED))
    args = parser.parse_args(argv)
    scene, zenith, azimuth = convert(args.scene)
    solve_monte_carlo(scene, zenith, azimuth, photons=2000, batch_size=1000, threads=1)  # compile or load
    print(f"shared scene, {args.photons} photons per run, one thread, load average {os.getloadavg()[0]:.2f}")
    print("| batches | CPU s per run | " + " | ".join(FIELDS) + " |")
    print("| --- | --- | " + " | ".join("---" for _ in FIELDS) + " |")
    for n in args.batches:
        runs, cpu = [], []
        for seed in (11, 12):
            started = time.process_time()
            runs.append(solve_monte_carlo(scene, zenith, azimuth, photons=args.photons, batches=n, seed=seed,
                                          threads=1))
            cpu.append(time.process_time() - started)
        got = int(runs[0].run_batches)
        cells = []
        for field in FIELDS:
            sd, robust, count = precision(runs[0][stderr_name(field)].values, runs[1][stderr_name(field)].values)
            cells.append(f"{100 * sd:.1f} % ({100 * robust:.1f} %)")
        expected = 100 / np.sqrt(2 * (got - 1))
        print(f"| {got} (formula {expected:.1f} %) | {np.mean(cpu):.2f} | " + " | ".join(cells) + " |")
    print("cells: relative precision of a column's standard error, sd over columns (from the interquartile range)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
