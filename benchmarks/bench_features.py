"""Time the feature library on a large host grid (default 1000 x 1000 columns, 30 layers).

Prints the time of each feature computed on its own (including the shared quantities
it needs, such as the column optical depth) and the time of the whole default recipe
in one call (shared quantities computed once).  ``--json FILE`` also writes the figures.

    .venv/bin/python benchmarks/bench_features.py [--nx 1000] [--ny 1000] [--nz 30] [--json FILE]
"""

import argparse
import json
import platform
import time

import numpy as np

from surrogate3d._atomic import write_text_atomic
from surrogate3d.pairs.features import INDEPENDENT_COLUMN_FLUXES, compute_features
from surrogate3d.pairs.recipe import FeatureRecipe, default_recipe


def synthetic_host_fields(ny, nx, nz, dx=1000.0, seed=0):
    """Cloudy host fields with kilometre-scale structure (smoothed noise, thresholded)."""
    rng = np.random.default_rng(seed)
    kx = np.fft.rfftfreq(nx, d=dx)
    ky = np.fft.fftfreq(ny, d=dx)
    k2 = ky[:, None] ** 2 + kx[None, :] ** 2
    noise = np.fft.irfft2(np.fft.rfft2(rng.standard_normal((ny, nx))) * np.exp(-k2 * (4000.0) ** 2), s=(ny, nx))
    noise /= noise.std()
    cover = np.clip(noise - 0.3, 0.0, 1.0)
    z_edge = np.linspace(0.0, 15000.0, nz + 1)
    z_mid = 0.5 * (z_edge[1:] + z_edge[:-1])
    top = 1000.0 + 3000.0 * cover
    in_cloud = (z_mid[:, None, None] > 800.0) & (z_mid[:, None, None] < top[None])
    lcf = np.where(in_cloud, np.minimum(1.0, 0.3 + cover[None]), 0.0)
    tau = lcf * 8.0 * np.diff(z_edge)[:, None, None] / 500.0 + 0.002
    fields = {"layer_cloud_fraction": lcf, "layer_optical_depth": tau, "z_edge": z_edge, "dx": dx, "dy": dx,
              "solar_zenith_angle": 50.0, "solar_beam_azimuth": 30.0,
              "surface_albedo": np.full((ny, nx), 0.1), "total_cloud_fraction": lcf.max(axis=0),
              "column_optical_depth_mean": tau.sum(axis=0), "column_optical_depth_std": 0.5 * tau.sum(axis=0),
              "cloud_edge_length": 1e-3 * cover}
    for flux in INDEPENDENT_COLUMN_FLUXES[1:]:
        fields[f"independent_column_{flux}"] = rng.random((ny, nx))
    return fields


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--nx", type=int, default=1000)
    parser.add_argument("--ny", type=int, default=1000)
    parser.add_argument("--nz", type=int, default=30)
    parser.add_argument("--json", metavar="FILE", help="also write the figures as JSON")
    args = parser.parse_args(argv)
    fields = synthetic_host_fields(args.ny, args.nx, args.nz)
    recipe = default_recipe()
    per_feature = {}
    for name in recipe.features:
        start = time.perf_counter()
        compute_features(fields, FeatureRecipe([name], recipe.parameters))
        per_feature[name] = time.perf_counter() - start
        print(f"{name:50s} {per_feature[name]:8.3f} s")
    start = time.perf_counter()
    matrix = compute_features(fields, recipe)
    total = time.perf_counter() - start
    columns = args.nx * args.ny
    print(f"{'total (default recipe, one call)':50s} {total:8.3f} s  for {columns} host columns x {args.nz} layers, "
          f"{matrix.shape[1]} feature columns")
    if args.json:
        write_text_atomic(args.json, json.dumps({
            "host_columns": columns, "layers": args.nz, "feature_columns": int(matrix.shape[1]),
            "seconds_per_feature_alone": per_feature, "seconds_total": total,
            "machine": platform.processor() or platform.machine(), "numpy": np.__version__}, indent=2) + "\n")


if __name__ == "__main__":
    main()
