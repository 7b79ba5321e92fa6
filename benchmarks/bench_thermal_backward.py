"""Noise of 1 km block fluxes from the forward and the backward longwave Monte Carlo at about equal CPU.

On one generated scene of our own (default ``generate_scene("scattered_cumulus", 0, nx=200,
ny=200, nz=30)`` with its longwave fields: 299 intervals of 10 cm-1, nothing from above the
4 km top), it runs the forward thermal Monte Carlo
(:func:`surrogate3d.solvers.thermal_montecarlo.solve_thermal_monte_carlo`) with ``--photons``,
then a short backward pilot to measure the CPU per ray, then the backward estimator
(:func:`surrogate3d.solvers.thermal_backward.backward_longwave_fluxes`) with the rays per
column that cost about the forward run's CPU (or ``--rays``).  It prints, for the surface
downward and the top upward flux of the 1 km blocks (10 x 10 cells of 100 m), the median
and largest standard error (from the spread between batches) of each estimator, the CPU
seconds (all threads) of each run, the backward standard errors scaled to exactly the
forward run's CPU (``se sqrt(cpu / cpu_forward)``) and to its CPU after the setup (tracing
only, which is what counts at many photons), and the mean and rms z-score of the blocks'
difference.

Usage: python benchmarks/bench_thermal_backward.py [--nx N] [--nz N] [--photons N] [--rays N]
       [--mode full_3d|independent_column] [--threads T]
"""

import argparse
import math

import numpy as np

from surrogate3d.scenes.generator import generate_scene
from surrogate3d.scenes.longwave_fields import longwave_fields
from surrogate3d.solvers.thermal_backward import backward_longwave_fluxes
from surrogate3d.solvers.thermal_montecarlo import solve_thermal_monte_carlo

HOST = 10
#: Batches of the backward runs (the rays per column are a multiple of it).
BATCHES = 16
NAMES = ("surface_downward_flux", "toa_upward_flux")


def block_statistics(batches):
    """Means over batches and standard errors of the HOST x HOST block means of (nbatch, ny, nx) values."""
    nb, ny, nx = batches.shape
    cut = batches[:, :ny // HOST * HOST, :nx // HOST * HOST]
    blocks = cut.reshape(nb, ny // HOST, HOST, nx // HOST, HOST).mean(axis=(2, 4))
    return blocks.mean(axis=0), blocks.std(axis=0, ddof=1) / math.sqrt(nb)


def main():
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--nx", type=int, default=200)
    parser.add_argument("--nz", type=int, default=30)
    parser.add_argument("--photons", type=int, default=1_500_000)
    parser.add_argument("--rays", type=int, default=None)
    parser.add_argument("--mode", default="full_3d")
    parser.add_argument("--threads", type=int, default=None)
    args = parser.parse_args()

    fields = longwave_fields(generate_scene("scattered_cumulus", 0, nx=args.nx, ny=args.nx, nz=args.nz))
    scene = (fields.gas_absorption, fields.intervals, fields.cloud_extinction, fields.cloud_single_scattering_albedo,
             fields.cloud_asymmetry_parameter, fields.air_temperature, fields.surface_temperature,
             fields.surface_longwave_emissivity, fields.z_edge, fields.dx, fields.dy)
    print(f"scene: scattered_cumulus seed 0, {args.nx} x {args.nx} x {args.nz} cells of {fields.dx:.0f} m, "
          f"cloudy cells {float(np.mean(fields.cloud_extinction[0] > 0)):.4f}, {len(fields.intervals.band)} intervals, "
          f"mode {args.mode}")
    # Compile (or load) both kernels before anything is timed.
    solve_thermal_monte_carlo(*scene, mode=args.mode, photons=2000, seed=0)
    backward_longwave_fluxes(*scene, mode=args.mode, rays_per_column=2, batches=2, seed=0)

    forward = solve_thermal_monte_carlo(*scene, mode=args.mode, photons=args.photons, seed=1, threads=args.threads)
    rays = args.rays
    if rays is None:
        pilot = backward_longwave_fluxes(*scene, mode=args.mode, rays_per_column=BATCHES, batches=BATCHES, seed=3,
                                         threads=args.threads)
        per_ray = (pilot["cpu_time"] - pilot["setup_cpu_time"]) / pilot["rays_per_column"]
        budget = forward["cpu_time"] - pilot["setup_cpu_time"]
        rays = max(1, int(round(budget / per_ray / BATCHES))) * BATCHES
        print(f"backward pilot: {BATCHES} rays per column and flux in {pilot['cpu_time']:.2f} CPU s "
              f"({pilot['setup_cpu_time']:.2f} before the first ray)")
    backward = backward_longwave_fluxes(*scene, mode=args.mode, rays_per_column=rays, batches=BATCHES, seed=2,
                                        threads=args.threads)
    for label, out, size in (("forward", forward, f"{forward['photons']} photons"),
                             ("backward", backward, f"{backward['rays_per_column']} rays per column and flux")):
        print(f"{label}: {size}, {out['batch_count']} batches, {out['cpu_time']:.2f} CPU s "
              f"({out['setup_cpu_time']:.2f} before tracing; {out['wall_time']:.2f} s wall)")
    ratio = backward["cpu_time"] / forward["cpu_time"]
    # The forward run's setup (emission tables of every cell and interval) is paid once per
    # run; at many photons the tracing alone counts.
    tracing = (backward["cpu_time"] - backward["setup_cpu_time"]) / (forward["cpu_time"] - forward["setup_cpu_time"])
    for name in NAMES:
        f_mean, f_se = block_statistics(forward["batches"][name])
        b_mean, b_se = block_statistics(backward["batches"][name])
        z = (b_mean - f_mean) / np.hypot(f_se, b_se)
        print(f"{name}: domain mean forward {forward[name + '_domain_mean']:.2f} +- "
              f"{forward[name + '_domain_mean_se']:.2f}, backward {backward[name + '_domain_mean']:.2f} +- "
              f"{backward[name + '_domain_mean_se']:.3f} W m-2")
        print(f"  1 km blocks ({b_se.size}): s.e. median (largest) forward {np.median(f_se):.2f} ({f_se.max():.2f}), "
              f"backward {np.median(b_se):.3f} ({b_se.max():.3f}) W m-2; backward at the forward's CPU "
              f"{np.median(b_se) * math.sqrt(ratio):.3f} ({b_se.max() * math.sqrt(ratio):.3f}), at its tracing CPU "
              f"{np.median(b_se) * math.sqrt(tracing):.3f} ({b_se.max() * math.sqrt(tracing):.3f}); "
              f"z of the difference: mean {z.mean():+.2f}, rms {np.sqrt(np.mean(z ** 2)):.2f}")


if __name__ == "__main__":
    main()
