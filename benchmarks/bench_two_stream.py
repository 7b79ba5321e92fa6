"""Speed of the delta-Eddington column solver: columns per second on one core.

Solves 16384 columns x 40 layers x 2 bands (random cloudy and clear layers) several
times with ``delta_eddington`` and with ``solve_scene`` (the same columns as a
128 x 128 scene), and prints the best rates in columns/s and column-layer solves/s (one
band of one layer of one column is one solve). ``--json FILE`` also writes the figures.

    .venv/bin/python benchmarks/bench_two_stream.py [--columns N] [--layers N] [--repeat N] [--json FILE]
"""

import argparse
import json
import os
import platform
import time

# One core, as the figure is quoted per core; set before numpy loads its BLAS.
for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import numpy as np  # noqa: E402

from surrogate3d._atomic import write_text_atomic  # noqa: E402
from surrogate3d.scenes import make_scene  # noqa: E402
from surrogate3d.solvers.two_stream import delta_eddington, solve_scene  # noqa: E402


def random_columns(ncol, nz, nband, seed=0):
    """Layer optics of shape (ncol, nband, nz): a cloud deck in half the columns, Rayleigh-like air elsewhere."""
    rng = np.random.default_rng(seed)
    shape = (ncol, nband, nz)
    tau = rng.uniform(0.0, 0.02, shape)
    ssa = np.full(shape, 1.0)
    g = np.zeros(shape)
    cloudy = rng.random(ncol) < 0.5
    deck = slice(nz // 4, nz // 2)
    tau[cloudy, :, deck] = rng.lognormal(0.0, 1.0, (cloudy.sum(), nband, nz // 2 - nz // 4))
    ssa[cloudy, :, deck] = rng.uniform(0.99, 1.0, (cloudy.sum(), nband, nz // 2 - nz // 4))
    g[cloudy, :, deck] = 0.85
    mu0 = np.full((ncol, nband), 0.6)
    albedo = rng.uniform(0.05, 0.3, (ncol, nband))
    return tau, ssa, g, mu0, albedo


def as_scene(tau, ssa, g, albedo, side):
    """The columns as a side x side scene with 100 m layers (band, z, y, x)."""
    ncol, nband, nz = tau.shape

    def grid(a):
        return np.moveaxis(a.reshape(side, side, nband, nz), (2, 3), (0, 1))

    return make_scene(grid(tau) / 100.0, grid(ssa), grid(g), np.arange(nz + 1) * 100.0, 100.0, 100.0,
                      surface_albedo=np.moveaxis(albedo.reshape(side, side, nband), 2, 0))


def best_time(func, repeat):
    """Best and median wall time, and best CPU time of this process (less disturbed by a busy machine)."""
    wall, cpu = [], []
    for _ in range(repeat):
        start, start_cpu = time.perf_counter(), time.process_time()
        func()
        wall.append(time.perf_counter() - start)
        cpu.append(time.process_time() - start_cpu)
    return min(wall), float(np.median(wall)), min(cpu)


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--columns", type=int, default=16384)
    parser.add_argument("--layers", type=int, default=40)
    parser.add_argument("--bands", type=int, default=2)
    parser.add_argument("--repeat", type=int, default=5)
    parser.add_argument("--json", metavar="FILE", help="also write the figures as JSON")
    args = parser.parse_args(argv)

    inputs = random_columns(args.columns, args.layers, args.bands)
    delta_eddington(*(a[:64] for a in inputs))  # warm-up
    best, median, cpu = best_time(lambda: delta_eddington(*inputs), args.repeat)
    solves = args.columns * args.bands * args.layers
    figures = {
        "benchmark": "two_stream",
        "columns": args.columns, "layers": args.layers, "bands": args.bands,
        "best_seconds": best, "median_seconds": median, "best_cpu_seconds": cpu,
        "columns_per_second": args.columns / best,
        "column_layer_solves_per_second": solves / best,
        "python": platform.python_version(), "numpy": np.__version__, "machine": platform.machine(),
    }
    print(f"delta_eddington: {args.columns} columns x {args.layers} layers x {args.bands} bands "
          f"in {best * 1e3:.1f} ms wall, {cpu * 1e3:.1f} ms CPU (best of {args.repeat})")
    print(f"  {figures['columns_per_second']:,.0f} columns/s (all bands)")
    print(f"  {figures['column_layer_solves_per_second']:,.0f} column-layer solves/s (per band)")
    side = int(round(np.sqrt(args.columns)))
    if side * side == args.columns:
        tau, ssa, g, _, albedo = inputs
        scene = as_scene(tau, ssa, g, albedo, side)
        scene_best, scene_median, scene_cpu = best_time(lambda: solve_scene(scene, 53.13, quiet=True), args.repeat)
        figures.update(scene_best_seconds=scene_best, scene_median_seconds=scene_median,
                       scene_best_cpu_seconds=scene_cpu,
                       scene_columns_per_second=args.columns / scene_best,
                       scene_column_layer_solves_per_second=solves / scene_best)
        print(f"solve_scene: {side} x {side} x {args.layers} scene, {args.bands} bands in "
              f"{scene_best * 1e3:.1f} ms wall, {scene_cpu * 1e3:.1f} ms CPU")
        print(f"  {figures['scene_columns_per_second']:,.0f} columns/s, "
              f"{figures['scene_column_layer_solves_per_second']:,.0f} column-layer solves/s")
    if args.json:
        write_text_atomic(args.json, json.dumps(figures, indent=2) + "\n")


if __name__ == "__main__":
    main()
