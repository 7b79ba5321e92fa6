"""Time the scene generator on a 128 x 128 x 40 grid (target: under 2 s per scene on one core).

    .venv/bin/python benchmarks/bench_scene_generation.py [--nx 128 --ny 128 --nz 40]
        [--repeat 5] [--regime NAME ...] [--json FILE]

Prints the best and median wall time per regime (after one warm-up call that pays for
imports), and writes them as JSON with --json.
"""

import argparse
import json
import os
import platform
import statistics
import time

from surrogate3d._atomic import write_text_atomic
from surrogate3d.scenes.generator import generate_scene
from surrogate3d.scenes.regimes import REGIMES


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--nx", type=int, default=128)
    parser.add_argument("--ny", type=int, default=128)
    parser.add_argument("--nz", type=int, default=40)
    parser.add_argument("--repeat", type=int, default=5)
    parser.add_argument("--regime", action="append", choices=list(REGIMES))
    parser.add_argument("--json", metavar="FILE")
    args = parser.parse_args(argv)
    regimes = args.regime or list(REGIMES)
    grid = {"nx": args.nx, "ny": args.ny, "nz": args.nz}

    start = time.perf_counter()
    generate_scene(regimes[0], 0, **grid)
    first_call = time.perf_counter() - start

    rows = []
    print(f"scene generation, {args.nx} x {args.ny} x {args.nz} cells, {args.repeat} repeats "
          f"(first call incl. imports: {first_call:.2f} s)")
    print(f"{'regime':<28} {'best [s]':>9} {'median [s]':>11}")
    for name in regimes:
        times = []
        for seed in range(args.repeat):
            start = time.perf_counter()
            generate_scene(name, seed, **grid)
            times.append(time.perf_counter() - start)
        rows.append({"regime": name, "best_s": min(times), "median_s": statistics.median(times)})
        print(f"{name:<28} {min(times):9.3f} {statistics.median(times):11.3f}")
    worst = max(r["median_s"] for r in rows)
    print(f"slowest median: {worst:.3f} s (target < 2 s)")
    if args.json:
        write_text_atomic(args.json, json.dumps({
            "benchmark": "scene_generation", "grid": grid, "repeat": args.repeat, "first_call_s": first_call,
            "results": rows, "slowest_median_s": worst, "python": platform.python_version(),
            "cpu_count": os.cpu_count()}, indent=2) + "\n")


if __name__ == "__main__":
    main()
