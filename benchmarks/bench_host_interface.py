"""Cost per host column of the exported Fortran host interface, beside one delta-Eddington band solve.

Side by side in one run, on one core, with gfortran ``-O2`` (the house flags):

- one delta-Eddington band solve of a 40-layer host column (``bench_host_fortran.py``'s
  port of :func:`surrogate3d.solvers.two_stream.delta_eddington`), the cost the issue
  measures against;
- ``NAME_host_corrections`` of the shipped models (``models/default/fortran``): the
  features from the host fields with a halo, the prediction, the clear-sky gate and the
  envelope flag (step 1 of ``NAME_correct_host``; the consistency step after it is a few
  operations per column), for ``ridge`` and ``boosted``, and ``boosted`` with the
  heating-rate layers of ``profile``.

The host fields are those of a generated scene of our own (``--regime``, 100 m cells, 40
layers) at 1 km, tiled ``--tile`` times along x and y so that the halo (what the models
need at ``--zenith``) is a small part of the sub-domain, as in a real host; written as a
host field file and read by the generated example driver (``--repeat`` mode: best of
three timed runs of ``--sweeps`` sweeps).

    .venv/bin/python benchmarks/bench_host_interface.py [--tile 4] [--sweeps 10] [--json FILE]
"""

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))

from bench_host_fortran import (FLAGS, host_columns, print_table, repeat_columns, time_band_solve,  # noqa: E402
                                time_program)

from surrogate3d._atomic import write_text_atomic  # noqa: E402
from surrogate3d.pairs.coarsen import scene_host_fields  # noqa: E402
from surrogate3d.pairs.host_fields import host_two_stream_fluxes  # noqa: E402
from surrogate3d.runtime import load_coefficients  # noqa: E402
from surrogate3d.runtime.halo import halo_width, path_reach  # noqa: E402
from surrogate3d.runtime.host_field_file import split_periodic, stacked_fields, write_host_field_file  # noqa: E402
from surrogate3d.scenes import generate_scene  # noqa: E402

SHIPPED = Path(__file__).resolve().parents[1] / "models" / "default"


def host_field_file(path, regime, seed, side, tile, zenith, azimuth, models):
    """Write the tiled host fields of a generated scene with the halo the models need; return (columns, halo)."""
    scene = generate_scene(regime, seed, nx=side, ny=side)
    fields = scene_host_fields(scene, 1000.0)
    solved = host_two_stream_fluxes(scene, 1000.0, zenith, layers=True)
    for flux, value in solved.items():
        if flux != "layer_absorption":
            fields[f"independent_column_{flux}"] = value
    fields = stacked_fields(fields, solved["layer_absorption"])
    fields = {key: (np.tile(value, (1,) * (np.ndim(value) - 2) + (tile, tile)) if np.ndim(value) >= 2 else value)
              for key, value in fields.items()}
    fields["solar_zenith_angle"], fields["solar_beam_azimuth"] = zenith, azimuth
    geometry = (fields["z_edge"], fields["dx"], fields["dy"], zenith, azimuth)
    widths = [halo_width(model.recipe, *geometry) for model in models] + [path_reach(*geometry)]
    halo = (max(w[0] for w in widths), max(w[1] for w in widths))
    ny, nx = fields["surface_albedo"].shape
    (whole, origin), = split_periodic(fields, (1, 1), halo)
    write_host_field_file(path, whole, halo, origin, (nx, ny))
    return nx * ny, halo


def time_host(name, field_file, work, sweeps, profile=False):
    """``NAME_host_driver --repeat`` figures of a shipped model (see :func:`time_program`)."""
    fortran = SHIPPED / "fortran"
    sources = [fortran / f"{name}_correction.f90", fortran / "profile_correction.f90", fortran / f"{name}_features.f90",
               fortran / f"{name}_host.f90", fortran / f"{name}_host_driver.f90"]
    args = [fortran / f"{name}.coefficients.txt"]
    if profile:
        args += ["--profile", fortran / "profile.coefficients.txt"]
    return time_program(sources, [*args, "--repeat", sweeps, field_file], work)


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--regime", default="scattered_cumulus", help="scene regime (default scattered_cumulus)")
    parser.add_argument("--seed", type=int, default=0, help="scene seed (default 0)")
    parser.add_argument("--side", type=int, default=240, help="scene side in 100 m cells, a multiple of 10 (240)")
    parser.add_argument("--tile", type=int, default=4, help="host fields tiled this often along x and y (4)")
    parser.add_argument("--zenith", type=float, default=45.0, help="solar zenith angle [degree] (45)")
    parser.add_argument("--azimuth", type=float, default=30.0, help="beam azimuth [degree] (30)")
    parser.add_argument("--sweeps", type=int, default=10, help="sweeps over the columns per timed run (10)")
    parser.add_argument("--band-columns", type=int, default=20000, help="columns of the band-solve timing (20000)")
    parser.add_argument("--json", metavar="FILE", help="also write the figures as JSON")
    args = parser.parse_args(argv)
    start = time.perf_counter()
    models = [load_coefficients(SHIPPED / f"{name}.coefficients.json") for name in ("ridge", "boosted", "profile")]
    reference = "delta-Eddington band solve, 40 layers"
    rows = {}
    with tempfile.TemporaryDirectory(prefix="bench_host_interface_") as work:
        field_file = Path(work) / "fields.txt"
        columns, halo = host_field_file(field_file, args.regime, args.seed, args.side, args.tile, args.zenith,
                                        args.azimuth, models)
        print(f"{args.regime} (seed {args.seed}), {args.side} x {args.side} cells of 100 m at 1 km, tiled "
              f"{args.tile} x {args.tile}: {columns} host columns, halo {halo[0]} x {halo[1]}; sun at "
              f"{args.zenith:g} degrees ({time.perf_counter() - start:.1f} s); load average "
              f"{', '.join(f'{v:.2f}' for v in os.getloadavg())} on {os.cpu_count()} cores")
        band = host_columns(args.regime, args.seed, args.side, 1000.0, args.zenith)
        rows[reference] = time_band_solve(repeat_columns(band, args.band_columns), work, 1.0, 5)
        for name, label, profile in (("ridge", "ridge: features + prediction", False),
                                     ("boosted", "boosted: features + prediction", False),
                                     ("boosted", "boosted + heating-rate layers", True)):
            rows[label] = time_host(name, field_file.name, work, args.sweeps, profile)
    print_table(rows, reference)
    print(f"gfortran {' '.join(FLAGS)}; load average after: {', '.join(f'{v:.2f}' for v in os.getloadavg())}")
    if args.json:
        write_text_atomic(args.json, json.dumps({"columns": columns, "halo": list(halo), "timings": rows,
                                                 "zenith": args.zenith, "regime": args.regime}, indent=2) + "\n")
    return rows


if __name__ == "__main__":
    main()
