"""Cost per host column in Fortran: one delta-Eddington band solve of 40 layers, for scale.

The reference cost is ``delta_eddington_column`` of ``benchmarks/fortran/delta_eddington_band.f90``
(a port of ``surrogate3d.solvers.two_stream.delta_eddington`` that agrees with it to
1e-10, ``tests/solvers/test_delta_eddington_fortran.py``), timed by
``benchmarks/fortran/time_delta_eddington.f90`` compiled with gfortran: the best of a
few runs, each repeating a sweep over every column for at least ``--min-seconds``, on
one core.  The columns are host columns of a scene of our own
(:func:`surrogate3d.scenes.generate_scene`, ``--regime``, 100 m cells, 40 layers),
coarse-grained to ``--host-resolution``: per band, the block-mean layer optical depth
and the optical-depth-weighted single-scattering albedo and asymmetry parameter, which
are the exact optics of the block's mean layer.  Every band of every host column is one
band column; they are repeated in order up to ``--columns``.  numpy's
``delta_eddington`` on the same columns is timed too.

Other Fortran timings go side by side through :func:`time_program` (compile a timing
program with the house flags, run it, read its ``key value`` lines, of which
``microseconds_per_column`` is tabulated) and :func:`print_table`; ``host_columns`` also
returns the scene's host fields (:func:`surrogate3d.pairs.coarsen.scene_host_fields`)
for timings that start from them.  ``--json FILE`` also writes the figures.

``--features-only`` times the host features of the generated Fortran instead
(``NAME_host_features`` of :mod:`surrogate3d.export.fortran_features`, timed by
``benchmarks/fortran/time_host_features.f90``): the features of the shipped boosted
model (``--model``) on the host fields of the host-model guide's scene (an
``open_cells`` scene of 120 x 120 x 20 cells of 100 m, 1 km host columns, the host's
independent-column fluxes from delta-Eddington, sun at 50 degrees toward 30 degrees)
tiled ``--tile`` times along x and y (default 8: 96 x 96 own columns) with a periodic
halo of the width the model needs, so that the halo adds little.  Besides all the
feature columns, the module is timed with the direct-beam-prior columns only, the
neighbour-window columns only and the other columns only (each including the checks of
the fields it reads).

    .venv/bin/python benchmarks/bench_host_fortran.py [--columns N] [--regime NAME] [--json FILE]
    .venv/bin/python benchmarks/bench_host_fortran.py --features-only [--tile N] [--json FILE]
"""

import argparse
import json
import os
import platform
import shutil
import subprocess
import tempfile
import time
from pathlib import Path

# One core, as the figures are quoted per core; set before numpy loads its BLAS.
for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import numpy as np  # noqa: E402

from surrogate3d._atomic import write_text_atomic  # noqa: E402
from surrogate3d.core.data_model import TARGETS  # noqa: E402
from surrogate3d.pairs.coarsen import block_mean, host_factors, scene_host_fields  # noqa: E402
from surrogate3d.pairs.features import FEATURES, column_name  # noqa: E402
from surrogate3d.scenes import REGIMES, generate_scene, layer_thickness  # noqa: E402
from surrogate3d.solvers.two_stream import delta_eddington  # noqa: E402

FORTRAN = Path(__file__).resolve().parent / "fortran"
MODEL = Path(__file__).resolve().parents[1] / "models" / "default" / "boosted.coefficients.json"
#: The flags generated Fortran must compile cleanly with; -O2 is also the optimisation the figures are quoted at.
FLAGS = ("-std=f2008", "-Wall", "-Werror", "-O2")


def host_columns(regime, seed, side, host_resolution, zenith):
    """Band columns of the host columns of a generated scene, and the scene's host fields.

    Parameters
    ----------
    regime : str
        A name of :data:`surrogate3d.scenes.REGIMES`.
    seed : int
        Scene seed.
    side : int
        Scene size in 100 m cells along x and y.
    host_resolution : float
        Host column size [m], a whole multiple of 100 m dividing ``side * 100`` m.
    zenith : float
        Solar zenith angle [degree], in [0, 90).

    Returns
    -------
    dict
        ``tau``, ``ssa``, ``g`` of shape (ncol, nz) (layer 0 at the bottom; optical
        depth, single-scattering albedo and asymmetry parameter [1]), ``mu0`` and
        ``albedo`` of shape (ncol,) [1], one row per band of each host column (bands
        outermost); ``fields``: the host fields of :func:`scene_host_fields`; ``host``:
        the number of host columns; ``bands``: the band names.
    """
    scene = generate_scene(regime, seed, nx=side, ny=side)
    fy, fx = host_factors(scene, host_resolution)
    dz = layer_thickness(scene)[None, :, None, None]
    extinction = scene["extinction"].values * dz
    scattering = extinction * scene["single_scattering_albedo"].values
    tau = block_mean(extinction, fy, fx)
    scattering_tau = block_mean(scattering, fy, fx)
    forward = block_mean(scattering * scene["asymmetry_parameter"].values, fy, fx)
    # The mean layer's optics: ssa and g weighted by extinction and by scattering.
    ssa = np.divide(scattering_tau, tau, out=np.ones_like(tau), where=tau > 0)
    g = np.divide(forward, scattering_tau, out=np.zeros_like(tau), where=scattering_tau > 0)
    albedo = block_mean(scene["surface_albedo"].values, fy, fx)
    nband, nz = tau.shape[:2]

    def by_column(a):
        return np.ascontiguousarray(np.moveaxis(a, 1, -1).reshape(-1, nz))

    ncol = albedo.size
    return {"tau": by_column(tau), "ssa": np.clip(by_column(ssa), 0.0, 1.0), "g": by_column(g),
            "mu0": np.full(ncol, np.cos(np.radians(zenith))), "albedo": albedo.reshape(-1),
            "fields": scene_host_fields(scene, host_resolution), "host": ncol // nband,
            "bands": [str(b) for b in scene["band"].values]}


def repeat_columns(columns, ncol):
    """The band columns repeated in order up to ``ncol`` rows (the per-column arrays only)."""
    index = np.arange(ncol) % columns["mu0"].size
    return {name: columns[name][index] for name in ("tau", "ssa", "g", "mu0", "albedo")}


def write_columns(path, tau, ssa, g, mu0, albedo):
    """The timing programs' input: real64 stream, C-ordered (ncol, nz) being Fortran's (nz, ncol)."""
    with open(path, "wb") as f:
        for a in (tau, ssa, g, mu0, albedo):
            np.ascontiguousarray(a, dtype=np.float64).tofile(f)


def _value(text):
    try:
        return int(text)
    except ValueError:
        return float(text)


def time_program(sources, args, work, flags=FLAGS):
    """Compile a Fortran timing program, run it and read the ``key value`` lines it prints.

    Parameters
    ----------
    sources : sequence of path
        Fortran sources in compilation order (modules first, the program last).
    args : sequence of str
        Command-line arguments of the program.
    work : path
        Directory for the executable and module files; the program runs there.
    flags : sequence of str
        gfortran flags.

    Returns
    -------
    dict
        Key -> int or float, one per printed line.
    """
    work = Path(work)
    exe = work / Path(sources[-1]).stem
    build = subprocess.run(["gfortran", *flags, *(str(s) for s in sources), "-o", str(exe)], cwd=work,
                           capture_output=True, text=True)
    if build.returncode != 0:
        raise RuntimeError(f"gfortran failed on {', '.join(str(s) for s in sources)}:\n{build.stderr}")
    run = subprocess.run([str(exe), *(str(a) for a in args)], cwd=work, capture_output=True, text=True)
    if run.returncode != 0:
        raise RuntimeError(f"{exe.name} {' '.join(str(a) for a in args)} failed:\n{run.stderr}")
    return {key: _value(value) for key, value in (line.split() for line in run.stdout.splitlines() if line.strip())}


def time_band_solve(columns, work, min_seconds, repeats, flags=FLAGS):
    """Figures of time_delta_eddington.f90 on the columns (see :func:`time_program`)."""
    path = Path(work) / "columns.bin"
    write_columns(path, **columns)
    ncol, nz = columns["tau"].shape
    return time_program([FORTRAN / "delta_eddington_band.f90", FORTRAN / "time_delta_eddington.f90"],
                        [path.name, nz, ncol, min_seconds, repeats], work, flags)


def time_numpy(columns, repeats):
    """Best wall microseconds per column of numpy's delta_eddington on the columns."""
    ncol = columns["mu0"].size
    best = np.inf
    for _ in range(repeats):
        start = time.perf_counter()
        delta_eddington(columns["tau"], columns["ssa"], columns["g"], columns["mu0"], columns["albedo"])
        best = min(best, time.perf_counter() - start)
    return {"columns": ncol, "microseconds_per_column": 1e6 * best / ncol, "columns_per_second": ncol / best}


def feature_fields(regime, seed, side, layers, host_resolution, zenith, azimuth, tile):
    """Host fields with the host's independent-column fluxes, tiled ``tile`` times along x and y.

    Parameters
    ----------
    regime : str
        A name of :data:`surrogate3d.scenes.REGIMES`.
    seed : int
        Scene seed.
    side : int
        Scene size in 100 m cells along x and y.
    layers : int
        Scene layers.
    host_resolution : float
        Host column size [m].
    zenith, azimuth : float
        Solar zenith angle and the direction the beam travels [degree].
    tile : int
        Copies of the host grid along x and along y (the periodic domain repeated).

    Returns
    -------
    dict
        Host fields (:mod:`surrogate3d.pairs.features`) of ``tile * side * 100 / host_resolution``
        columns along x and y.
    """
    from surrogate3d.pairs.host_fields import host_two_stream_fluxes

    scene = generate_scene(regime, seed, nx=side, ny=side, nz=layers)
    fields = scene_host_fields(scene, host_resolution)
    fields["solar_zenith_angle"], fields["solar_beam_azimuth"] = float(zenith), float(azimuth)
    for flux, value in host_two_stream_fluxes(scene, host_resolution, zenith).items():
        fields[f"independent_column_{flux}"] = value
    return {key: (np.tile(value, (1,) * (np.ndim(value) - 2) + (tile, tile))
                  if np.ndim(value) >= 2 and key != "z_edge" else value) for key, value in fields.items()}


def write_feature_fields(path, fields, halo):
    """The input of time_host_features.f90: the fields with a periodic halo of ``halo = (hx, hy)`` columns."""
    hx, hy = halo
    nz = len(fields["z_edge"]) - 1
    ny, nx = fields["surface_albedo"].shape

    def padded(value):
        return np.pad(value, [(0, 0)] * (np.ndim(value) - 2) + [(hy, hy), (hx, hx)], mode="wrap")

    with open(path, "wb") as f:
        np.array([nx, ny, nz, hx, hy], dtype="<i4").tofile(f)
        np.array([fields[k] for k in ("dx", "dy", "solar_zenith_angle", "solar_beam_azimuth")], "<f8").tofile(f)
        np.asarray(fields["z_edge"], "<f8").tofile(f)
        for key in ("layer_cloud_fraction", "layer_optical_depth", "layer_clear_sky_optical_depth",
                    "surface_albedo", "total_cloud_fraction", "column_optical_depth_mean", "column_optical_depth_std",
                    "cloud_edge_length"):
            padded(np.asarray(fields[key], "<f8")).tofile(f)
        np.stack([padded(fields[f"independent_column_{flux}"]) if f"independent_column_{flux}" in fields
                  else padded(fields["independent_column_surface_downward_direct_flux"]
                              + fields["independent_column_surface_downward_diffuse_flux"])
                  for flux in TARGETS]).astype("<f8").tofile(f)


#: Features whose columns are timed as "priors": the direct-beam prior family.
PRIOR_FEATURES = ("direct_beam_prior", "direct_beam_prior_minus_independent_column",
                  "direct_beam_prior_slant_minus_vertical")


def feature_groups(recipe, names):
    """The model's feature columns, and those of the priors, the neighbour windows and the rest (in order)."""
    feature_of = {}
    for feature in recipe.features:
        radii = recipe.parameters["neighbour_radii"] if FEATURES[feature].per_radius else [None]
        for radius in radii:
            feature_of[column_name(feature, radius)] = feature
    priors = [n for n in names if feature_of[n] in PRIOR_FEATURES]
    windows = [n for n in names if FEATURES[feature_of[n]].per_radius]
    rest = [n for n in names if n not in priors and n not in windows]
    return {"all features": list(names), "direct-beam priors": priors, "neighbour windows": windows,
            "other features": rest}


def time_features(model_path, fields, halo, work, min_seconds, repeats, flags=FLAGS, reach=None):
    """Microseconds per own column of the generated host features, all columns and by group.

    Parameters
    ----------
    model_path : path
        A column model's coefficient file (its recipe and feature columns).
    fields : dict
        Host fields (:func:`feature_fields`).
    halo : (int, int)
        Halo along x and y [columns], at least what the features need.
    work : path
        Scratch directory.
    min_seconds : float
        Least duration of one timed run.
    repeats : int
        Timed runs; the best is kept.
    flags : sequence of str
        gfortran flags.
    reach : float, optional
        The host's cap of the slant paths' horizontal travel [m] (``slant_path_reach``); default none.

    Returns
    -------
    dict
        Group name (:func:`feature_groups`) -> figures of time_host_features.f90 (``columns``,
        ``microseconds_per_column``, ...), groups without columns left out.
    """
    from surrogate3d.export.fortran_features import features_module_text
    from surrogate3d.runtime import load_coefficients

    model = load_coefficients(model_path)
    work = Path(work)
    path = work / "fields.bin"
    write_feature_fields(path, fields, halo)
    rows = {}
    for n, (group, names) in enumerate(feature_groups(model.recipe, model.column_feature_names).items()):
        if not names:
            continue
        folder = work / f"group_{n}"
        folder.mkdir()
        (folder / "bench_features.f90").write_text(features_module_text("bench", model.recipe, names))
        rows[group] = time_program([folder / "bench_features.f90", FORTRAN / "time_host_features.f90"],
                                   [path, min_seconds, repeats] + ([] if reach is None else [reach]), folder, flags)
    return rows


def features_main(args, flags):
    """--features-only: the table of :func:`time_features` on the guide's scene tiled ``--tile`` times."""
    from surrogate3d.runtime import load_coefficients
    from surrogate3d.runtime.halo import halo_width

    start = time.perf_counter()
    fields = feature_fields(args.regime, args.seed, args.side, args.layers, args.host_resolution, args.zenith,
                            args.azimuth, args.tile)
    model = load_coefficients(args.model)
    halo = halo_width(model.recipe, fields["z_edge"], fields["dx"], fields["dy"], args.zenith, args.azimuth,
                      slant_path_reach=args.reach)
    ny, nx = fields["surface_albedo"].shape
    print(f"{args.regime} scene (seed {args.seed}) of {args.side} x {args.side} x {args.layers} cells of 100 m as "
          f"{args.host_resolution:g} m host columns, tiled {args.tile} x {args.tile}: {nx} x {ny} own columns, halo "
          f"{halo[0]} x {halo[1]}; sun at {args.zenith:g} degrees toward {args.azimuth:g}"
          f"{'' if args.reach is None else f', slant paths capped at {args.reach:g} m'}; model {args.model} "
          f"({len(model.column_feature_names)} feature columns) ({time.perf_counter() - start:.1f} s)")
    figures = {"regime": args.regime, "seed": args.seed, "side": args.side, "layers": args.layers,
               "host_resolution_m": args.host_resolution, "tile": args.tile, "own_columns": [nx, ny],
               "halo": list(halo), "solar_zenith_angle": args.zenith, "solar_beam_azimuth": args.azimuth,
               "slant_path_reach": args.reach,
               "model": str(args.model), "flags": list(flags),
               "gfortran": subprocess.run(["gfortran", "--version"], capture_output=True,
                                          text=True).stdout.splitlines()[0],
               "machine": platform.processor() or platform.machine(), "load_average_before": os.getloadavg()}
    print(f"load average (1, 5, 15 min) before: {', '.join(f'{v:.2f}' for v in figures['load_average_before'])} "
          f"on {os.cpu_count()} cores")
    with tempfile.TemporaryDirectory(prefix="bench_host_features_") as work:
        rows = time_features(args.model, fields, halo, work, args.min_seconds, args.repeat, flags, args.reach)
    figures["load_average_after"] = os.getloadavg()
    figures["timings"] = rows
    print_table(rows, "all features")
    print(f"Fortran: best of {args.repeat} runs of at least {args.min_seconds:g} s each; the groups are the model's "
          f"columns of the direct-beam priors, of the neighbour windows and the others, each module checking the "
          f"fields it reads; gfortran {' '.join(flags)}")
    print(f"load average after: {', '.join(f'{v:.2f}' for v in figures['load_average_after'])}")
    if args.json:
        write_text_atomic(args.json, json.dumps(figures, indent=2) + "\n")
    return figures


def print_table(rows, reference):
    """One line per timing: microseconds and columns per second, and the time over that of ``reference``."""
    scale = rows[reference]["microseconds_per_column"]
    width = max(len(name) for name in rows)
    print(f"{'per column':<{width}}  {'microseconds':>12}  {'columns/s':>12}  {'ratio':>8}")
    for name, figures in rows.items():
        us = figures["microseconds_per_column"]
        print(f"{name:<{width}}  {us:>12.3f}  {1e6 / us:>12,.0f}  {us / scale:>8.3f}")
    print(f"(ratio: time per column over that of the {reference})")


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--columns", type=int, default=20000, help="band columns per sweep (default 20000)")
    parser.add_argument("--regime", choices=sorted(REGIMES),
                        help="scene regime (default scattered_cumulus; open_cells with --features-only)")
    parser.add_argument("--seed", type=int, default=0, help="scene seed (default 0)")
    parser.add_argument("--side", type=int, help="scene side in 100 m cells (default 256; 120 with --features-only)")
    parser.add_argument("--host-resolution", type=float,
                        help="host column size [m] (default 800; 1000 with --features-only)")
    parser.add_argument("--zenith", type=float, help="solar zenith angle [degree] (default 45; 50 with --features-only)")
    parser.add_argument("--features-only", action="store_true",
                        help="time the generated host features (NAME_host_features) instead of the band solve")
    parser.add_argument("--model", type=Path, default=MODEL,
                        help="with --features-only: the column model whose features are timed (default the shipped "
                             "boosted model)")
    parser.add_argument("--tile", type=int, default=8,
                        help="with --features-only: copies of the host grid along x and y (default 8)")
    parser.add_argument("--layers", type=int, default=20, help="with --features-only: scene layers (default 20)")
    parser.add_argument("--azimuth", type=float, default=30.0,
                        help="with --features-only: direction the beam travels [degree] (default 30)")
    parser.add_argument("--reach", type=float, metavar="M",
                        help="with --features-only: the host's cap of the slant paths' reach [m] (default none)")
    parser.add_argument("--min-seconds", type=float, default=1.0, help="least duration of one timed run (default 1)")
    parser.add_argument("--repeat", type=int, default=5, help="timed runs, the best is kept (default 5)")
    parser.add_argument("--extra-flags", default="", metavar="FLAGS",
                        help="gfortran flags after the house ones, e.g. '-O3 -march=native' (default none)")
    parser.add_argument("--json", metavar="FILE", help="also write the figures as JSON")
    args = parser.parse_args(argv)
    defaults = (("open_cells", 120, 1000.0, 50.0) if args.features_only else ("scattered_cumulus", 256, 800.0, 45.0))
    for name, value in zip(("regime", "side", "host_resolution", "zenith"), defaults):
        if getattr(args, name) is None:
            setattr(args, name, value)
    flags = FLAGS + tuple(args.extra_flags.split())
    if args.columns < 1:
        parser.error(f"--columns must be >= 1; got {args.columns}")
    if args.tile < 1:
        parser.error(f"--tile must be >= 1; got {args.tile}")
    if shutil.which("gfortran") is None:
        parser.error("gfortran is not installed (Debian: apt-get install gfortran)")
    if args.features_only:
        return features_main(args, flags)

    start = time.perf_counter()
    host = host_columns(args.regime, args.seed, args.side, args.host_resolution, args.zenith)
    columns = repeat_columns(host, args.columns)
    nz = columns["tau"].shape[1]
    distinct = host["mu0"].size
    print(f"{args.regime} scene (seed {args.seed}) of {args.side} x {args.side} x {nz} cells of 100 m, "
          f"{host['host']} host columns of {args.host_resolution:g} m x {len(host['bands'])} bands "
          f"({', '.join(host['bands'])}) = {distinct} band columns, repeated to {args.columns}; "
          f"sun at {args.zenith:g} degrees ({time.perf_counter() - start:.1f} s)")
    column_tau = host["tau"].sum(axis=1)
    print(f"column optical depth: median {np.median(column_tau):.2f}, max {column_tau.max():.1f}; "
          f"layer ssa {host['ssa'].min():.4f} to {host['ssa'].max():.4f}")
    figures = {"regime": args.regime, "seed": args.seed, "side": args.side, "layers": nz,
               "host_resolution_m": args.host_resolution, "host_columns": host["host"], "bands": host["bands"],
               "distinct_band_columns": distinct, "columns": args.columns, "solar_zenith_angle": args.zenith,
               "flags": list(flags), "gfortran": subprocess.run(["gfortran", "--version"], capture_output=True,
                                                                 text=True).stdout.splitlines()[0],
               "machine": platform.processor() or platform.machine(), "load_average_before": os.getloadavg()}
    print(f"load average (1, 5, 15 min) before: {', '.join(f'{v:.2f}' for v in figures['load_average_before'])} "
          f"on {os.cpu_count()} cores")

    reference = "delta-Eddington band solve (Fortran)"
    rows = {}
    with tempfile.TemporaryDirectory(prefix="bench_host_fortran_") as work:
        rows[reference] = time_band_solve(columns, work, args.min_seconds, args.repeat, flags)
    rows["delta-Eddington band solve (numpy)"] = time_numpy(columns, args.repeat)
    figures["load_average_after"] = os.getloadavg()
    figures["timings"] = rows
    print_table(rows, reference)
    solve = rows[reference]
    print(f"Fortran: best of {solve['repeats']} runs of {solve['sweeps']} sweeps over {solve['columns']} columns "
          f"x {solve['layers']} layers ({solve['microseconds_per_column_worst']:.3f} microseconds per column in "
          f"the slowest run); gfortran {' '.join(flags)}")
    print(f"load average after: {', '.join(f'{v:.2f}' for v in figures['load_average_after'])}")
    if args.json:
        write_text_atomic(args.json, json.dumps(figures, indent=2) + "\n")
    return figures


if __name__ == "__main__":
    main()
