"""Size and speed of exported corrections: coefficient files, numpy runtime, Fortran module.

Measures, on one core:

* the size of the NetCDF coefficient file and of its JSON twin for each model;
* prediction speed of the numpy runtime (columns/s), next to scikit-learn's own, with the
  training-envelope test that ``predict`` runs by default and without it;
* prediction speed of the generated Fortran module (the driver's timing mode, compiled
  with ``gfortran -O2``), if gfortran is installed;
* the cost of computing the features from host fields plus predicting, as a fraction of
  one delta-Eddington band solve of the same columns with 40 layers.

The models are those of a model directory (``--model-dir``, e.g. written by
``surrogate3d train PAIRS --recipe training/default.toml``) or, by default, stand-ins
trained here with the first candidate of each model of ``training/default.toml`` (the
model sizes are fixed there) on a table of the default recipe's features computed from
random host fields.  File sizes are in kB (1000 bytes).  The load average is printed and
stored with the figures: timings taken on a busy machine are slower.  ``--json FILE``
also writes the figures.

    .venv/bin/python benchmarks/bench_runtime.py [--model-dir DIR] [--columns N] [--json FILE]
"""

import argparse
import json
import os
import shutil
import subprocess
import tempfile
import time
import warnings
from pathlib import Path

# One core, as the figures are quoted per core; set before numpy loads its BLAS.
for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import numpy as np  # noqa: E402
import xarray as xr  # noqa: E402

from surrogate3d._atomic import write_text_atomic  # noqa: E402
from surrogate3d.export import build_document, write_coefficients  # noqa: E402
from surrogate3d.export.fortran import features_file_text, write_fortran  # noqa: E402
from surrogate3d.learn import TARGETS, TrainedModel, load_training_run, make_estimator, read_recipe  # noqa: E402
from surrogate3d.pairs.features import compute_features  # noqa: E402
from surrogate3d.pairs.recipe import default_recipe  # noqa: E402
from surrogate3d.runtime import CorrectionModel  # noqa: E402
from surrogate3d.runtime.envelope import EnvelopeWarning  # noqa: E402
from surrogate3d.solvers.two_stream import delta_eddington  # noqa: E402

#: The recipe whose models the stand-ins copy.
DEFAULT_RECIPE = Path(__file__).resolve().parents[1] / "training" / "default.toml"


def stand_in_specs():
    """Stand-in models: name -> (kind, parameters), the first candidate of each model of the default recipe."""
    return {spec.name: (spec.kind, spec.candidates()[0]) for spec in read_recipe(DEFAULT_RECIPE).models}


def _smooth(rng, shape, length):
    k2 = sum(np.meshgrid(*[np.fft.fftfreq(n) ** 2 for n in shape], indexing="ij"))
    return np.real(np.fft.ifftn(np.fft.fftn(rng.normal(size=shape)) * np.exp(-(np.pi * length) ** 2 * k2)))


def host_fields(rng, ny, nx, nz=40, zenith=45.0, azimuth=0.0):
    """Host fields of a broken cloud field: cloudy layers between 1 and 3 km, smooth random cover."""
    z_edge = np.linspace(0.0, 10000.0, nz + 1)
    cover = _smooth(rng, (ny, nx), 2.0)
    cover = np.clip(0.5 + cover / (3.0 * cover.std()), 0.0, 1.0)
    cloudy_layer = (z_edge[:-1] >= 1000.0) & (z_edge[:-1] < 3000.0)
    layer_cf = cloudy_layer[:, None, None] * cover[None] * rng.uniform(0.7, 1.0, (nz, ny, nx))
    tau = 2.0 * layer_cf * rng.lognormal(0.0, 0.5, (nz, ny, nx)) + 0.002
    column = tau.sum(axis=0)
    independent = np.exp(-column / np.cos(np.radians(zenith)))
    return {"layer_cloud_fraction": layer_cf, "layer_optical_depth": tau, "z_edge": z_edge, "dx": 1000.0,
            "dy": 1000.0, "solar_zenith_angle": zenith, "solar_beam_azimuth": azimuth,
            "surface_albedo": np.clip(0.1 + 0.02 * rng.normal(size=(ny, nx)), 0.02, 0.3),
            "total_cloud_fraction": layer_cf.max(axis=0), "column_optical_depth_mean": column,
            "column_optical_depth_std": 0.3 * column, "cloud_edge_length": 1e-3 * cover * (1.0 - cover),
            "independent_column_surface_downward_direct_flux": 0.8 * independent,
            "independent_column_surface_downward_diffuse_flux": 0.8 * (1.0 - independent) * 0.6,
            "independent_column_toa_upward_flux": 0.1 + 0.5 * (1.0 - independent),
            "independent_column_atmosphere_absorption": np.full((ny, nx), 0.15)}


def stand_in_pairs(n_grids=12, side=16, seed=0):
    """A pairs-like table: default-recipe features of random host grids, a smooth made-up correction."""
    rng = np.random.default_rng(seed)
    recipe = default_recipe()
    rows = []
    for g in range(n_grids):
        for zenith, azimuth in ((20.0, 0.0), (45.0, 90.0), (65.0, 30.0)):
            rows.append(compute_features(host_fields(rng, side, side, zenith=zenith, azimuth=azimuth), recipe))
    X = np.vstack(rows)
    names = recipe.column_names()
    f = {n: X[:, i] for i, n in enumerate(names)}
    shade = f["cloud_top_height_upsun_minus_downsun"] / 3000.0
    base = -0.2 * (1 - f["cos_solar_zenith"]) * shade + 0.05 * f["cloud_fraction"] * (1 - f["cloud_fraction"])
    Y = np.column_stack([base * (1 + 0.2 * m) + 0.01 * np.tanh(f["cloud_edge_distance"] / 2000.0) * m
                         for m in range(len(TARGETS))]) + 0.003 * rng.normal(size=(X.shape[0], len(TARGETS)))
    return xr.Dataset({"features": (("sample", "feature"), X), "target_value": (("sample", "target"), Y)},
                      coords={"feature": names, "target": list(TARGETS)}), recipe


def stand_in_models(quiet=False):
    pairs, recipe = stand_in_pairs()
    X = pairs["features"].values
    models = {}
    names = [str(f) for f in pairs["feature"].values]
    for name, (kind, params) in stand_in_specs().items():
        start = time.perf_counter()
        estimator = make_estimator(kind, params)
        estimator.fit(X, pairs["target_value"].values, feature_names=names)
        estimator.target_names_ = list(TARGETS)
        card = {"format_version": "1.0", "name": name, "kind": kind, "hyperparameters": estimator.get_params(),
                "targets": list(TARGETS), "feature_names": list(pairs["feature"].values),
                "feature_recipe": recipe.to_dict(), "cross_validation": {},
                "provenance": {"archive_fingerprint": "stand-in", "training_scenes": ["random host grids"]}}
        models[name] = TrainedModel(name=name, kind=kind, estimator=estimator, card=card, path=Path("."))
        if not quiet:
            print(f"  trained stand-in {name} on {X.shape[0]} samples x {X.shape[1]} features "
                  f"in {time.perf_counter() - start:.1f} s")
    return models, X


def best_rate(func, n, repeat=3):
    best = np.inf
    for _ in range(repeat):
        start = time.perf_counter()
        func()
        best = min(best, time.perf_counter() - start)
    return n / best, best


def fortran_rate(document, features, work):
    """Columns/s of the compiled driver's timing mode, or None without gfortran."""
    gfortran = shutil.which("gfortran")
    if gfortran is None:
        return None
    paths = write_fortran(document, work, features, np.zeros((features.shape[0], len(document["targets"]["names"]))))
    exe = work / "driver"
    subprocess.run([gfortran, "-std=f2008", "-O2", str(paths["module"]), str(paths["driver"]), "-o", str(exe)],
                   cwd=work, check=True, capture_output=True)
    repeats = 1
    while True:
        start = time.perf_counter()
        out = subprocess.run([str(exe), str(paths["coefficients"]), str(paths["sample_features"]), str(repeats)],
                             check=True, capture_output=True, text=True).stdout
        if time.perf_counter() - start > 1.0 or repeats > 10**6:
            return float(out.split()[1])
        repeats *= 4


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--model-dir", metavar="DIR", help="trained model directory (default: stand-ins)")
    parser.add_argument("--columns", type=int, default=20000, help="columns of the tree-speed test (default 20000)")
    parser.add_argument("--host-side", type=int, default=128, help="host grid side for the cost fraction (default 128)")
    parser.add_argument("--json", metavar="FILE", help="also write the figures as JSON")
    args = parser.parse_args()

    print("models:")
    if args.model_dir:
        run = load_training_run(args.model_dir)
        models = run.models
        from surrogate3d.core.pairs_table import read_pairs_table
        from surrogate3d.learn.pairs_table import feature_matrix

        pairs = read_pairs_table(run.record["provenance"]["pairs_file"])
        X = feature_matrix(pairs, run.record["feature_names"])
        print(f"  {', '.join(models)} from {args.model_dir}")
    else:
        models, X = stand_in_models()
    rng = np.random.default_rng(1)
    figures = {"source": args.model_dir or "stand-ins of training/default.toml", "models": {},
               "load_average_before": os.getloadavg()}
    print(f"load average (1, 5, 15 min) before: {', '.join(f'{v:.2f}' for v in figures['load_average_before'])} "
          f"on {os.cpu_count()} cores")
    work = Path(tempfile.mkdtemp(prefix="bench_runtime_"))
    # Random probes leave the envelope: the warnings would only clutter the figures.
    warnings.simplefilter("ignore", EnvelopeWarning)
    try:
        for name, trained in models.items():
            document = build_document(trained)
            netcdf, twin = write_coefficients(document, work)
            runtime = CorrectionModel.from_document(document)
            n = 1_000_000 if trained.kind == "ridge" else args.columns
            probe = X[rng.integers(0, X.shape[0], n)]
            rate, _ = best_rate(lambda: runtime.predict(probe), n)
            unchecked_rate, _ = best_rate(lambda: runtime.predict(probe, check_envelope=False), n)
            envelope_rate, _ = best_rate(lambda: runtime.envelope_check(probe), n)
            few = probe[:100_000]
            sklearn_rate, _ = best_rate(lambda: trained.estimator.predict(few), few.shape[0], repeat=1)
            entry = {"kind": trained.kind, "netcdf_bytes": netcdf.stat().st_size, "json_bytes": twin.stat().st_size,
                     "numpy_columns_per_second": rate, "numpy_unchecked_columns_per_second": unchecked_rate,
                     "envelope_check_columns_per_second": envelope_rate, "sklearn_columns_per_second": sklearn_rate,
                     "fortran_columns_per_second": fortran_rate(document, X[:1000], work / f"fortran_{name}")}
            if trained.kind == "ridge":
                entry["terms"] = int(document["ridge"]["coef"].size)
            else:
                arrays = document["boosted"]
                entry.update(trees=int(arrays["tree_target"].size), nodes=int(arrays["feature"].size),
                             max_depth=int(runtime._evaluator.max_depth))

            side = args.host_side
            fields = host_fields(rng, side, side)
            ncol = side * side
            # Tens of milliseconds each: the best of several runs smooths out other work on the machine.
            feature_rate, feature_time = best_rate(lambda: runtime.host_features(fields), ncol, repeat=7)
            host_rate, host_time = best_rate(lambda: runtime.predict_host(fields), ncol, repeat=7)
            tau = np.moveaxis(fields["layer_optical_depth"], 0, -1).reshape(ncol, -1)
            cloudy = np.moveaxis(fields["layer_cloud_fraction"], 0, -1).reshape(ncol, -1) > 0
            ssa, g = np.where(cloudy, 0.999, 1.0), np.where(cloudy, 0.85, 0.0)
            albedo = fields["surface_albedo"].reshape(-1)
            _, solve_time = best_rate(lambda: delta_eddington(tau, ssa, g, 0.7, albedo), ncol)
            entry.update(host_columns=ncol, features_columns_per_second=feature_rate,
                         host_predict_columns_per_second=host_rate,
                         cost_fraction_of_one_band_solve=host_time / solve_time,
                         features_fraction_of_one_band_solve=feature_time / solve_time,
                         band_solve_columns_per_second=ncol / solve_time)
            figures["models"][name] = entry
            fortran = entry["fortran_columns_per_second"]
            extra = (f"{entry['terms']} terms" if trained.kind == "ridge"
                     else f"{entry['trees']} trees, {entry['nodes']} nodes, depth <= {entry['max_depth']}")
            print(f"{name} ({extra}):")
            print(f"  files: NetCDF {entry['netcdf_bytes'] / 1000:.1f} kB, JSON {entry['json_bytes'] / 1000:.1f} kB")
            print(f"  numpy runtime {rate:,.0f} columns/s with the envelope test, {unchecked_rate:,.0f} without "
                  f"(the test alone {envelope_rate:,.0f}; scikit-learn {sklearn_rate:,.0f}); Fortran "
                  + (f"{fortran:,.0f} columns/s" if fortran else "not measured (no gfortran)"))
            print(f"  host features + prediction on {ncol} columns x 40 layers: {host_rate:,.0f} columns/s = "
                  f"{100 * entry['cost_fraction_of_one_band_solve']:.0f} % of one delta-Eddington band solve "
                  f"(features alone {100 * entry['features_fraction_of_one_band_solve']:.0f} %)")
    finally:
        shutil.rmtree(work, ignore_errors=True)
    figures["load_average_after"] = os.getloadavg()
    print(f"load average after: {', '.join(f'{v:.2f}' for v in figures['load_average_after'])}")
    if args.json:
        write_text_atomic(args.json, json.dumps(figures, indent=2) + "\n")


if __name__ == "__main__":
    main()
