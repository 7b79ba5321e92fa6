"""Speed of the 3D Monte Carlo solver in the working tree against a git revision.

The speed of these virtual machines drifts by tens of percent within minutes, even
between two processes running side by side, so two separate benchmark runs cannot resolve
a change of a few percent.  This script loads the solver of ``--against`` (exported from
git into a temporary package with another name) next to the working tree's, runs the two
in turn in one process on the shared benchmark scene (one thread, alternating which goes
first) and prints every pair and the geometric mean of the paired speed ratios with its
standard error.  Both must give the same kind of numbers, and with an unchanged random
stream identical ones, which it reports too.

Usage: python benchmarks/compare_revisions.py [--against REV] [--photons N] [--pairs K]
"""

import argparse
import importlib
import io
import math
import re
import subprocess
import sys
import tarfile
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(Path(__file__).resolve().parent))
from bench_montecarlo import SHARED, convert  # noqa: E402

from surrogate3d.solvers import solve_monte_carlo  # noqa: E402


def export_revision(rev):
    """The package of git revision ``rev`` as the importable package ``surrogate3d_<sha>``.

    Kept in the temporary directory under the commit's hash, so that its compiled kernels
    are cached for the next comparison against the same commit.
    """
    sha = subprocess.run(["git", "-C", str(ROOT), "rev-parse", "--short=10", rev], check=True,
                         capture_output=True, text=True).stdout.strip()
    name = f"surrogate3d_{sha}"
    home = Path(tempfile.gettempdir()) / "surrogate3d-revisions"
    if not (home / name).is_dir():
        archive = subprocess.run(["git", "-C", str(ROOT), "archive", sha, "surrogate3d"], check=True,
                                 capture_output=True).stdout
        home.mkdir(parents=True, exist_ok=True)
        staging = Path(tempfile.mkdtemp(dir=home))
        with tarfile.open(fileobj=io.BytesIO(archive)) as tar:
            tar.extractall(staging, filter="data")
        for path in (staging / "surrogate3d").rglob("*.py"):
            path.write_text(re.sub(r"\bsurrogate3d\b", name, path.read_text()))
        (staging / "surrogate3d").rename(home / name)  # complete, or not there at all
        staging.rmdir()
    sys.path.insert(0, str(home))
    return sha, importlib.import_module(f"{name}.solvers").solve_monte_carlo


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--against", default="HEAD", help="git revision to compare with (default HEAD)")
    parser.add_argument("--photons", type=int, default=300_000)
    parser.add_argument("--pairs", type=int, default=12)
    parser.add_argument("--scene", default=str(SHARED))
    args = parser.parse_args(argv)
    scene, zenith, azimuth = convert(args.scene)
    sha, solve_old = export_revision(args.against)
    print(f"compiling or loading both solvers (revision {sha} and the working tree)", flush=True)
    for solve in (solve_old, solve_monte_carlo):
        solve(scene, zenith, azimuth, photons=2000, seed=0, threads=1)
    logs, same = [], True
    for k in range(args.pairs):
        seconds, toa = {}, {}
        order = ("old", "new") if k % 2 == 0 else ("new", "old")
        for which in order:
            solve = solve_old if which == "old" else solve_monte_carlo
            t0 = time.process_time()
            out = solve(scene, zenith, azimuth, photons=args.photons, seed=k, threads=1)
            seconds[which] = time.process_time() - t0
            toa[which] = out.toa_upward_flux.values
        same = same and np.array_equal(toa["old"], toa["new"])
        logs.append(math.log(seconds["old"] / seconds["new"]))
        print(f"pair {k + 1:2d}: {sha} {args.photons / seconds['old']:9.0f} photons/s, working tree "
              f"{args.photons / seconds['new']:9.0f}, ratio {seconds['old'] / seconds['new']:.3f}", flush=True)
    mean, se = float(np.mean(logs)), float(np.std(logs, ddof=1) / math.sqrt(len(logs)))
    print(f"working tree over {sha}: {math.exp(mean):.3f} times as fast (log standard error {se:.3f})")
    print("identical top-of-domain fluxes" if same else "the two give different numbers (a changed random stream "
          "or physics): compare their domain means before trusting the ratio")
    return 0


if __name__ == "__main__":
    sys.exit(main())
