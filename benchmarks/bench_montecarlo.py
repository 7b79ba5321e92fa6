"""Speed and accuracy of the 3D Monte Carlo solver on the shared benchmark scene.

Reads ``../shared/bench/bench_cumulus_128.nc`` (128 x 128 x 40 cells of 100 m, one band,
surface albedo and sun angles in its attributes), converts it to the archive format and
prints: photons/s and scattering events/s per core (best of three runs), the parallel
speed-up on all cores next to that of a pure arithmetic loop (what the cores deliver),
peak memory of a run (the scene's arrays plus the growth of the resident set while the
solver runs) against the scene's own arrays, the domain-mean reflected, direct and
diffuse surface fluxes, and the CPU seconds needed for a 0.5 % standard error of the surface
downward flux averaged over 800 m host columns (8 x 8 cells), estimated from the spread
of independent runs.  It also times the same scene refined to 50 m cells (every cell cut
in 2 x 2 x 2), where the majorant blocks should keep the cost per photon nearly the same.

Usage: python benchmarks/bench_montecarlo.py [--photons N] [--runs K] [--majorant-block B] [--json FILE]
"""

import argparse
import gc
import json
import math
import os
import subprocess
import sys
import tempfile
import time
from contextlib import contextmanager
from pathlib import Path

import numpy as np
import xarray as xr
from numba import njit, prange

from surrogate3d.archive import read_scene, write_scene
from surrogate3d.scenes import make_scene
from surrogate3d.scenes.model import spacing
from surrogate3d.solvers import solve_monte_carlo

SHARED = Path(__file__).resolve().parents[2] / "shared" / "bench" / "bench_cumulus_128.nc"


def convert(path):
    """The shared scene in the archive format (its azimuth convention already matches ours)."""
    with xr.open_dataset(path) as ds:
        ds = ds.load()
    scene = make_scene(ds["extinction"].values[None], ds["single_scattering_albedo"].values[None],
                       ds["asymmetry_parameter"].values[None], ds["z_edges"].values, ds.attrs["dx_m"],
                       ds.attrs["dy_m"], surface_albedo=ds.attrs["surface_albedo"], band=["broadband"],
                       attrs={"regime": "shared_benchmark_cumulus", "seed": 7})
    return scene, float(ds.attrs["solar_zenith_angle_deg"]), float(ds.attrs["solar_azimuth_deg"])


def refined(scene):
    """The scene with every cell cut into 2 x 2 x 2 (same optics, half the spacing)."""
    def cut(name):
        return np.repeat(np.repeat(np.repeat(scene[name].values, 2, axis=1), 2, axis=2), 2, axis=3)

    z = scene["z_edge"].values
    z2 = np.sort(np.concatenate([z, 0.5 * (z[1:] + z[:-1])]))
    dx, dy = spacing(scene)
    return make_scene(cut("extinction"), cut("single_scattering_albedo"), cut("asymmetry_parameter"), z2,
                      dx / 2, dy / 2, surface_albedo=float(scene["surface_albedo"].values.mean()), band=["broadband"])


def _current_rss():
    with open("/proc/self/statm") as f:
        return int(f.read().split()[1]) * os.sysconf("SC_PAGE_SIZE")


# Runs in its own process, since the compiled kernels hold the interpreter lock: prints the
# largest resident set of process PID, sampled every millisecond until its stdin closes.
_WATCHER = """
import os, select, sys
pid, page, peak = sys.argv[1], os.sysconf("SC_PAGE_SIZE"), 0
while not select.select([sys.stdin], [], [], 0.001)[0]:
    with open(f"/proc/{pid}/statm") as f:
        peak = max(peak, int(f.read().split()[1]) * page)
print(peak)
"""


@contextmanager
def peak_rss_growth():
    """Yields a dict whose ``"bytes"`` is, on exit, the peak growth of the resident set over
    its size on entry.  (The peak resident set of the whole process would mostly show the
    compilers and libraries loaded before.)"""
    gc.collect()
    base = _current_rss()
    found = {"bytes": 0}
    watcher = subprocess.Popen([sys.executable, "-c", _WATCHER, str(os.getpid())], stdin=subprocess.PIPE,
                               stdout=subprocess.PIPE, text=True)
    try:
        yield found
    finally:
        out, _ = watcher.communicate("")
        found["bytes"] = max(0, int(out) - base)


def memory_growth(args):
    """Peak growth of the resident set [bytes] during one run on all cores, its result
    included, measured in a fresh process.  The C allocator keeps memory freed by earlier
    runs for later ones unless its threshold for returning large blocks to the system is
    fixed, so the child runs with ``MALLOC_MMAP_THRESHOLD_`` set; its warm-up run (which
    loads the compiled kernels) then leaves nothing behind that the measured run reuses."""
    child = [sys.executable, __file__, "--memory-child", "--scene", args.scene, "--photons", str(args.photons)]
    if args.majorant_block is not None:
        child += ["--majorant-block", str(args.majorant_block)]
    env = dict(os.environ, MALLOC_MMAP_THRESHOLD_=str(128 * 1024))
    return int(subprocess.run(child, env=env, check=True, capture_output=True, text=True).stdout.split()[-1])


def _memory_child(scene, zenith, azimuth, photons, opts):
    import numba

    solve_monte_carlo(scene, zenith, azimuth, photons=2000, seed=0, **opts)
    with peak_rss_growth() as growth:
        timed(scene, zenith, azimuth, photons, 2, numba.config.NUMBA_NUM_THREADS, **opts)
    print(growth["bytes"])


def timed(scene, zenith, azimuth, photons, seed, threads, **options):
    t_cpu, t_wall = time.process_time(), time.perf_counter()
    out = solve_monte_carlo(scene, zenith, azimuth, photons=photons, seed=seed, threads=threads, **options)
    return out, time.process_time() - t_cpu, time.perf_counter() - t_wall


@njit(parallel=True)
def _arithmetic(n, m):
    out = np.zeros(m)
    for j in prange(m):
        a = 1.0 + j
        for _ in range(n):
            a = math.sqrt(a * 1.0000001 + 1.0)
        out[j] = a
    return out


def arithmetic_reference(cores, n=20_000_000):
    """What the machine delivers now: the nanoseconds per step of a compute-bound loop on one
    core, and its speed-up on all cores (best of three).  The speed of these virtual
    machines drifts by tens of percent, so solver figures from different runs are best
    compared through this reference."""
    import numba

    _arithmetic(10, 8)
    best = {}
    for _ in range(3):
        for t in (1, cores):
            numba.set_num_threads(t)
            t0 = time.perf_counter()
            _arithmetic(n, 8)
            best[t] = min(best.get(t, math.inf), time.perf_counter() - t0)
    numba.set_num_threads(cores)
    return best[1] / (8 * n) * 1e9, best[1] / best[cores]


def cpu_for_relative_se(cpu, rel_se, df, target=0.005):
    """CPU seconds for a relative standard error ``target`` in a typical host column.

    ``rel_se`` holds per-column relative standard errors from ``df`` degrees of freedom,
    reached with ``cpu`` seconds; the cost scales with the variance.  With a handful of
    runs the median over columns of a sample variance underestimates the typical variance
    (0.79 of it for 4 runs), because a sample variance follows ``sigma**2 chi2(df) / df``
    for normal data (Helmert 1876, from memory), whose median lies below its mean; the
    median is therefore divided by ``chi2.median(df) / df``.
    """
    from scipy.stats import chi2

    return float(np.median(cpu * (np.asarray(rel_se) / target) ** 2) / (chi2.median(df) / df))


def host_means(field, factor=8):
    ny, nx = field.shape
    return field.reshape(ny // factor, factor, nx // factor, factor).mean(axis=(1, 3))


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--scene", default=str(SHARED))
    parser.add_argument("--photons", type=int, default=1_000_000)
    parser.add_argument("--runs", type=int, default=6, help="independent runs for the noise estimate")
    parser.add_argument("--majorant-block", type=int, default=None, help="cells per majorant block side")
    parser.add_argument("--json", metavar="FILE")
    parser.add_argument("--memory-child", action="store_true", help=argparse.SUPPRESS)
    args = parser.parse_args(argv)

    scene, zenith, azimuth = convert(args.scene)
    with tempfile.TemporaryDirectory() as tmp:
        write_scene(scene, Path(tmp) / "bench_cumulus_128.nc")
        scene = read_scene(Path(tmp) / "bench_cumulus_128.nc")
    scene_bytes = sum(scene[v].values.nbytes for v in ("extinction", "single_scattering_albedo",
                                                         "asymmetry_parameter"))
    opts = {} if args.majorant_block is None else {"majorant_block": args.majorant_block}
    if args.memory_child:
        return _memory_child(scene, zenith, azimuth, args.photons, opts)
    solve_monte_carlo(scene, zenith, azimuth, photons=2000, seed=0, threads=1, **opts)  # compile / load cache

    import numba

    cores = numba.config.NUMBA_NUM_THREADS
    arithmetic = arithmetic_reference(cores)
    # Best of three runs, alternating 1 and all cores, since these virtual machines' speed
    # drifts; the speed-up as the ratio of the best times and as the geometric mean of the
    # three paired ratios.
    wall1 = cpu1 = wall_n = math.inf
    speedups = []
    for _ in range(3):
        one, cpu, wall = timed(scene, zenith, azimuth, args.photons, 1, 1, **opts)
        wall1, cpu1 = min(wall1, wall), min(cpu1, cpu)
        many, _, wall_many = timed(scene, zenith, azimuth, args.photons, 1, cores, **opts)
        wall_n = min(wall_n, wall_many)
        speedups.append(wall / wall_many)
    growth = memory_growth(args)
    assert np.array_equal(one.toa_upward_flux.values, many.toa_upward_flux.values)
    assert np.array_equal(one.absorption.values, many.absorption.values)
    photons = int(one.run_photons)
    events = int(one.run_scattering_events)

    down = []
    run_cpu = []
    for k in range(args.runs):
        out, cpu, _ = timed(scene, zenith, azimuth, args.photons, 100 + k, 1, **opts)
        down.append(host_means(out.surface_downward_direct_flux.values + out.surface_downward_diffuse_flux.values))
        run_cpu.append(cpu)
    down = np.array(down)
    rel_se = down.std(axis=0, ddof=1) / down.mean(axis=0)
    cpu_for_half_percent = cpu_for_relative_se(np.mean(run_cpu), rel_se, args.runs - 1)
    rel_se_median = 0.005 * math.sqrt(cpu_for_half_percent / np.mean(run_cpu))

    fine = refined(scene)
    _, _, wall_fine = timed(fine, zenith, azimuth, args.photons, 1, 1, **opts)
    del fine

    figures = {
        "scene": Path(args.scene).name,
        "solar_zenith_angle": zenith,
        "solar_beam_azimuth": azimuth,
        "photons": photons,
        "photons_per_second_per_core": photons / wall1,
        "photons_per_cpu_second": photons / cpu1,
        "scattering_events_per_photon": events / photons,
        "scattering_events_per_second_per_core": events / wall1,
        "photons_per_second_per_core_refined_50m": photons / wall_fine,
        "cores": cores,
        "parallel_speedup": wall1 / wall_n,
        "parallel_speedup_paired": math.exp(np.mean(np.log(speedups))),
        "parallel_speedup_of_pure_arithmetic": arithmetic[1],
        "arithmetic_reference_ns_per_step": arithmetic[0],
        "peak_memory_over_scene_arrays": (growth + scene_bytes) / scene_bytes,
        "solver_memory_growth_mb": growth / 2**20,
        "scene_arrays_mb": scene_bytes / 2**20,
        "domain_mean_toa_upward_flux": float(one.toa_upward_flux.mean()),
        "domain_mean_surface_direct_flux": float(one.surface_downward_direct_flux.mean()),
        "domain_mean_surface_diffuse_flux": float(one.surface_downward_diffuse_flux.mean()),
        "domain_mean_atmosphere_absorption": float(one.atmosphere_absorption.mean()),
        "median_relative_se_800m_surface_downward": rel_se_median,
        "cpu_seconds_for_0.5pct_se_800m_surface_downward": cpu_for_half_percent,
    }
    width = max(map(len, figures))
    for key, value in figures.items():
        print(f"{key:<{width}}  {value:.4g}" if isinstance(value, float) else f"{key:<{width}}  {value}")
    if args.json:
        Path(args.json).write_text(json.dumps(figures, indent=2))
    return 0


if __name__ == "__main__":
    sys.exit(main())
