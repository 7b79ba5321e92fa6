"""Cost and 3D effect of the thermal Monte Carlo solver on the shared benchmark scene.

Reads ``../shared/bench/bench_cumulus_128.nc`` (from the repository root: 128 x 128 x 40
cells of 100 m, shortwave extinction only) and makes a longwave scene of it:

* cloud liquid water from the extinction in the geometric-optics limit,
  ``extinction = 3 LWC / (2 rho_w r_e)`` (Stephens 1978; Hansen and Travis 1974) with
  ``r_e = 10 um``, ``rho_w = 1000 kg m-3``, after removing the scene's clear-air background
  of 1e-5 m-1; longwave cloud optics from :func:`cloud_optics` (10 um droplets);
* air temperature from a standard lapse rate, 288 K at the surface and 6.5 K km-1 (the
  U.S. Standard Atmosphere 1976 troposphere), clouds at the air temperature; pressure
  hydrostatic from 1013.25 hPa; relative humidity ``0.77 (p/p_s - 0.02) / 0.98`` (Manabe and
  Wetherald 1967) with the saturation vapour pressure of Bolton (1980); 400 ppm CO2; gas
  absorption on the 299 intervals of 10 cm-1 from every layer's temperature, pressure and
  humidity;
* a grey surface at 288 K with emissivity 0.98 (common practice for water and vegetation);
  nothing comes in at the domain top (4 km): the atmosphere above it is not there.

It runs the 3D and the independent-column modes with the same photons and prints: the
CPU seconds (all threads) each run took; the CPU seconds for a 1 % standard error of the
surface downward flux averaged over 1 km host columns (the 12 x 12 blocks of 10 x 10 cells;
the last 8 rows and columns of cells belong to none), from the batch spread and the
scaling of the photons' variance with 1 / photons (the setup before the first photon paid
once), median and largest over the host columns; the
domain-mean 3D-minus-independent-column surface downward flux with its standard error; its
root mean square over the host columns, raw and with the noise variance removed.

Usage: python benchmarks/bench_thermal_montecarlo.py [--photons N] [--threads T] [--json FILE]
"""

import argparse
import json
import math
import time
from pathlib import Path

import numpy as np
import xarray as xr

from surrogate3d.scenes.longwave_optics import (CO2_MOLE_FRACTION, cloud_optics, gas_absorption_coefficient,
                                                spectral_intervals)
from surrogate3d.solvers.thermal_montecarlo import solve_thermal_monte_carlo

SHARED = Path(__file__).resolve().parents[2] / "shared" / "bench" / "bench_cumulus_128.nc"
EFFECTIVE_RADIUS = 10e-6
WATER_DENSITY = 1000.0
CLEAR_AIR_EXTINCTION = 1e-5
SURFACE_TEMPERATURE = 288.0
LAPSE_RATE = 6.5e-3
SURFACE_PRESSURE = 101325.0
SURFACE_EMISSIVITY = 0.98
GRAVITY, DRY_AIR_GAS_CONSTANT = 9.80665, 287.04
HOST = 10


def longwave_scene(path):
    """The keyword arguments of :func:`solve_thermal_monte_carlo` for the shared scene."""
    with xr.open_dataset(path) as ds:
        extinction = ds["extinction"].values.astype(np.float64)
        z_edge = ds["z_edges"].values.astype(np.float64)
        dx, dy = float(ds.attrs["dx_m"]), float(ds.attrs["dy_m"])
    lwc = 2.0 * WATER_DENSITY * EFFECTIVE_RADIUS * np.maximum(extinction - CLEAR_AIR_EXTINCTION, 0.0) / 3.0
    ext, ssa, asym = cloud_optics(lwc, EFFECTIVE_RADIUS)
    z = 0.5 * (z_edge[1:] + z_edge[:-1])
    t = SURFACE_TEMPERATURE - LAPSE_RATE * z
    p = SURFACE_PRESSURE * (t / SURFACE_TEMPERATURE) ** (GRAVITY / (DRY_AIR_GAS_CONSTANT * LAPSE_RATE))
    t_edge = SURFACE_TEMPERATURE - LAPSE_RATE * z_edge
    p_edge = SURFACE_PRESSURE * (t_edge / SURFACE_TEMPERATURE) ** (GRAVITY / (DRY_AIR_GAS_CONSTANT * LAPSE_RATE))
    relative_humidity = 0.77 * (p / SURFACE_PRESSURE - 0.02) / 0.98
    e = relative_humidity * 611.2 * np.exp(17.67 * (t - 273.15) / (t - 29.65))
    epsilon = 0.01801528 / 0.0289644
    q = epsilon * e / (p - (1.0 - epsilon) * e)
    gas = gas_absorption_coefficient(t, p, q, CO2_MOLE_FRACTION)
    nz, ny, nx = extinction.shape
    return dict(gas_absorption=gas, intervals=spectral_intervals(), cloud_extinction=ext,
                cloud_single_scattering_albedo=ssa, cloud_asymmetry_parameter=np.clip(asym, -0.999, 0.999),
                air_temperature=np.broadcast_to(t[:, None, None], (nz, ny, nx)).copy(),
                surface_temperature=SURFACE_TEMPERATURE, surface_emissivity=SURFACE_EMISSIVITY, z_edge=z_edge,
                dx=dx, dy=dy, air_pressure_edges=p_edge), float(np.mean(lwc > 0))


def host_means(values):
    """Means over the complete HOST x HOST blocks of the last two axes."""
    ny, nx = values.shape[-2:]
    cut = values[..., :ny // HOST * HOST, :nx // HOST * HOST]
    shape = cut.shape[:-2] + (ny // HOST, HOST, nx // HOST, HOST)
    return cut.reshape(shape).mean(axis=(-3, -1))


def main():
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--photons", type=int, default=4_000_000)
    parser.add_argument("--threads", type=int, default=None)
    parser.add_argument("--json", default=None)
    args = parser.parse_args()

    started = time.process_time()
    scene, cloud_fraction = longwave_scene(SHARED)
    print(f"scene: 128 x 128 x 40 cells, cloudy cells {cloud_fraction:.4f}, {len(scene['intervals'].band)} "
          f"intervals; setup {time.process_time() - started:.1f} CPU s")
    runs = {}
    for mode in ("full_3d", "independent_column"):
        out = solve_thermal_monte_carlo(**scene, mode=mode, photons=args.photons, seed=1, threads=args.threads)
        host = host_means(out["batches"]["surface_downward_flux"])          # (nbatch, 12, 12)
        se = host.std(axis=0, ddof=1) / math.sqrt(host.shape[0])
        mean = host.mean(axis=0)
        # The photons' cost scales with the variance; the setup is paid once.
        trace_cpu = out["cpu_time"] - out["setup_cpu_time"]
        cpu_1pc = out["setup_cpu_time"] + trace_cpu * (se / (0.01 * mean)) ** 2
        runs[mode] = dict(out=out, host=host, host_mean=mean, host_se=se)
        print(f"{mode}: {out['photons']} photons in {out['batch_count']} batches, {out['cpu_time']:.1f} CPU s "
              f"({out['setup_cpu_time']:.1f} before the first photon; {out['wall_time']:.1f} s wall); domain means: "
              f"surface down "
              f"{out['surface_downward_flux_domain_mean']:.2f} +- {out['surface_downward_flux_domain_mean_se']:.2f}, "
              f"up {out['surface_upward_flux_domain_mean']:.2f}, TOA up {out['toa_upward_flux_domain_mean']:.2f} +- "
              f"{out['toa_upward_flux_domain_mean_se']:.2f}, atmosphere net "
              f"{out['atmosphere_net_absorption_domain_mean']:.2f} +- "
              f"{out['atmosphere_net_absorption_domain_mean_se']:.2f} W m-2")
        print(f"  1 km host columns: surface down relative s.e. median {np.median(se / mean):.4f}, largest "
              f"{np.max(se / mean):.4f}; CPU s for 1 % s.e.: median {np.median(cpu_1pc):.2f}, largest "
              f"{np.max(cpu_1pc):.2f}")
        runs[mode]["cpu_1pc"] = (float(np.median(cpu_1pc)), float(np.max(cpu_1pc)))
        energy = out["toa_downward_flux"] - out["toa_upward_flux_domain_mean"] - \
            out["atmosphere_net_absorption_domain_mean"] - out["surface_net_absorption_domain_mean"]
        print(f"  energy: incoming - outgoing - absorbed = {energy:.2e} W m-2")
    a, b = runs["full_3d"], runs["independent_column"]
    diff = a["out"]["surface_downward_flux_domain_mean"] - b["out"]["surface_downward_flux_domain_mean"]
    diff_se = math.hypot(a["out"]["surface_downward_flux_domain_mean_se"],
                         b["out"]["surface_downward_flux_domain_mean_se"])
    host_diff = a["host_mean"] - b["host_mean"]
    noise = a["host_se"] ** 2 + b["host_se"] ** 2
    rmse = float(np.sqrt(np.mean(host_diff ** 2)))
    rmse_clean = float(np.sqrt(max(np.mean(host_diff ** 2 - noise), 0.0)))
    print(f"3D minus independent column, surface downward flux: domain mean {diff:+.3f} +- {diff_se:.3f} W m-2; "
          f"1 km RMSE {rmse:.3f} W m-2 ({rmse_clean:.3f} with the noise variance "
          f"{float(np.mean(noise)):.3f} W2 m-4 removed); largest host difference {np.abs(host_diff).max():.2f} W m-2")
    if args.json:
        Path(args.json).write_text(json.dumps({
            "photons": args.photons, "cpu_s": {m: runs[m]["out"]["cpu_time"] for m in runs},
            "cpu_s_for_1pc_host_se": {m: runs[m]["cpu_1pc"] for m in runs},
            "surface_down_3d_minus_ica": diff, "surface_down_3d_minus_ica_se": diff_se,
            "host_rmse": rmse, "host_rmse_noise_removed": rmse_clean}, indent=1))


if __name__ == "__main__":
    main()
