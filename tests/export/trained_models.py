"""Small trained models for the export and runtime tests, built once per test session.

The synthetic pair table of ``tests/synthetic_pairs.py`` has features of its own;
here its six columns are renamed to registry features and given a matching feature
recipe, so that exported models can also compute their features from host fields.
The values keep their synthetic meaning: only names and units matter to the export.
"""

import json

import numpy as np

from surrogate3d.archive import write_dataset
from surrogate3d.export import export_training_run
from surrogate3d.learn import train_models
from synthetic_pairs import add_synthetic_layers, make_synthetic_pairs
from surrogate3d.pairs.features import FEATURES, column_name
from surrogate3d.pairs.recipe import FeatureRecipe

#: Synthetic column -> registry feature column, where the meaning is close.
RENAME = {"cloud_fraction": "cloud_fraction", "cloud_optical_depth": "log_column_optical_depth",
          "cos_solar_zenith": "cos_solar_zenith", "upsun_cloud_fraction": "neighbour_contrast_cloud_fraction_1000m",
          "neighbour_cloud_fraction": "neighbour_mean_cloud_fraction_1000m",
          "cloud_edge_distance": "cloud_edge_distance", "surface_albedo": "surface_albedo"}

#: Registry features for synthetic columns not in RENAME, in order of use.
SPARE = ["cloud_top_height", "cloud_base_height", "column_optical_depth_relative_std", "slant_optical_depth"]

#: Radii of the per-radius features of the test recipe [m].
RADII = [1000.0]


def _registry_names(synthetic):
    spare = iter(SPARE)
    return [RENAME.get(name) or next(spare) for name in synthetic]


def recipe_for(columns):
    """The feature recipe that makes ``columns`` (registry feature order)."""
    full = FeatureRecipe(list(FEATURES), {"neighbour_radii": RADII})
    producer = {}
    for f in full.features:
        for r in (RADII if FEATURES[f].per_radius else [None]):
            producer[column_name(f, r)] = f
    return FeatureRecipe([f for f in full.features if f in {producer[c] for c in columns}],
                         {"neighbour_radii": RADII}, name="export-test")


TRAINING_RECIPE = """
name = "export-test"
features = "all"

[split]
held_out_scene_fraction = 0.25
seed = 2

[cross_validation]
folds = 2

# Transforms of two targets, so that every export path applies them (the values only
# need to be positive for the scale).
[target_transforms.atmosphere_absorption]
scale_feature = "surface_albedo"
scale_floor = 0.01

[target_transforms.surface_downward_direct_flux]
offset_features = {cloud_fraction = -0.5, cos_solar_zenith = 0.25}

[models.ridge]
kind = "ridge"
interactions = true
interaction_features = ["cos_solar_zenith", "cloud_fraction", "log_column_optical_depth",
                        "neighbour_contrast_cloud_fraction_1000m"]
alpha = 1.0
clear_sky_features = ["cloud_fraction", "neighbour_mean_cloud_fraction_1000m"]

[models.boosted]
kind = "boosted"
max_iter = 25
max_leaf_nodes = 9
min_samples_leaf = 5
clear_sky_features = ["cloud_fraction", "neighbour_mean_cloud_fraction_1000m"]

[profile]
max_iter = 25
max_leaf_nodes = 9
min_samples_leaf = 5
"""

#: The clear-sky gate of both test models: no cloud in the column nor in its 3 x 3 neighbourhood.
GATE = ["cloud_fraction", "neighbour_mean_cloud_fraction_1000m"]

METRICS_HEADER = ("evaluation_set,breakdown,group,group_order,group_value,predictor,target,units,n,rmse,mae,bias,"
                  "r2,skill,rmse_no_correction,noise_rmse,noise_floor_skill,noise_corrected_rmse,"
                  "noise_corrected_skill")


def registry_pairs():
    """The synthetic pair table with registry feature names and a valid feature recipe."""
    pairs = add_synthetic_layers(make_synthetic_pairs(seeds_per_regime=3, seed=5))
    names = _registry_names([str(f) for f in pairs["feature"].values])
    recipe = recipe_for(names)
    units = dict(zip(recipe.column_names(), recipe.column_units()))
    pairs = pairs.assign_coords(feature=names)
    pairs["features"].attrs["units"] = json.dumps([units[n] for n in names])
    pairs.attrs["feature_recipe"] = recipe.to_json()
    return pairs


def write_metrics(report_dir, predictors=("ridge", "boosted", "no correction")):
    """A small metrics.csv in the layout of ``surrogate3d evaluate`` (values are placeholders)."""
    report_dir.mkdir(parents=True, exist_ok=True)
    rows = [METRICS_HEADER]
    for predictor in predictors:
        for units in ("1", "W m-2"):
            rows.append(f"held-out scenes,all,all,0,,{predictor},surface_downward_flux,{units},120,0.01,0.008,"
                        f"-0.001,0.9,0.7,0.03,0.002,0.99,0.009,0.72")
    (report_dir / "metrics.csv").write_text("\n".join(rows) + "\n")
    (report_dir / "profile_metrics.csv").write_text(
        "quantity,units,predictor,rmse,rmse_reduction,n\nheating rate,K day-1,no correction,1.2,0.0,100\n"
        "heating rate,K day-1,profile,0.6,0.5,100\n")
    return report_dir


def _build(base):
    pairs_file = write_dataset(registry_pairs(), base / "pairs.nc")
    recipe = base / "recipe.toml"
    recipe.write_text(TRAINING_RECIPE)
    model_dir = base / "models"
    train_models(pairs_file, recipe, model_dir, quiet=True)
    report = write_metrics(base / "report")
    export_dir = base / "export"
    export_training_run(model_dir, export_dir, report_dir=report, fortran=True)
    return {"pairs_file": pairs_file, "model_dir": model_dir, "report_dir": report, "export_dir": export_dir}


_BUILT = {}


def build_once(tmp_path_factory):
    """Paths of the pairs file, model directory, report and export directory (built on first use).

    The export and runtime tests load this module under one name, so the models are
    trained once per session however many conftest files ask for them.
    """
    if "paths" not in _BUILT:
        _BUILT["paths"] = _build(tmp_path_factory.mktemp("trained"))
    return _BUILT["paths"]


def random_host_fields(seed=0, ny=6, nx=5, nz=4):
    """Host fields for the test recipe's features on a small periodic grid."""
    rng = np.random.default_rng(seed)
    cloud = rng.uniform(0.0, 1.0, (nz, ny, nx)) * (rng.uniform(size=(nz, ny, nx)) < 0.5)
    return {"layer_cloud_fraction": cloud, "layer_optical_depth": 8.0 * cloud * rng.uniform(0.5, 1.5, cloud.shape),
            "z_edge": np.linspace(0.0, 4000.0, nz + 1), "dx": 1000.0, "dy": 1000.0, "solar_zenith_angle": 40.0,
            "solar_beam_azimuth": 30.0, "surface_albedo": rng.uniform(0.05, 0.3, (ny, nx)),
            "total_cloud_fraction": cloud.max(axis=0)}
