"""The longwave heating-rate (profile) correction from pairs to Fortran.

Energy is the outside reference here: the per-layer net absorptions of every host column
sum to its column net absorption (the column field is the cells' sum, to round-off), and
the corrected layers sum to the column correction they are matched to; the heating rate
is g / c_p * F / dp (Liou 2002); the skill is 1 - RMSE / RMSE(no correction) (Wilks 2011,
ch. 8).  The numpy runtime and the Fortran module are checked against the project's own
estimator (the point of those tests).
"""

import json
import shutil
import subprocess

import numpy as np
import pandas as pd
import pytest

from surrogate3d.archive import read_scene, select_longwave_result
from surrogate3d.cli import main
from surrogate3d.core.pairs_table import read_pairs_table
from surrogate3d.errors import ValidationError
from surrogate3d.learn.longwave_profile_model import LongwaveProfileCorrection, longwave_layer_fields
from surrogate3d.learn.model_directory import load_training_run
from surrogate3d.pairs.coarsen import block_mean, host_factors
from surrogate3d.pairs.longwave_features import LONGWAVE_TARGETS
from surrogate3d.pairs.longwave_pairs import coarsen_longwave_result, host_clear_sky_fluxes, longwave_host_fields
from surrogate3d.pairs.longwave_profiles import LONGWAVE_PROFILE_VARIABLES, longwave_host_profiles
from surrogate3d.runtime import load_coefficients
from surrogate3d.scenes.model import layer_thickness
from surrogate3d.solvers.heating import DRY_AIR_SPECIFIC_HEAT, SECONDS_PER_DAY, STANDARD_GRAVITY

from longwave_chain import HOST, build_longwave_chain

GFORTRAN = shutil.which("gfortran")
COLUMN = "longwave_atmosphere_net_absorption"

RECIPE = """
spectrum = "longwave"
[split]
held_out_scene_fraction = 0.25
left_out_families = []
seed = 0
[cross_validation]
folds = 2
[models.boosted]
kind = "boosted"
max_iter = 20
max_leaf_nodes = 7
min_samples_leaf = 5
random_state = 0
[profile]
max_iter = 30
max_leaf_nodes = 7
min_samples_leaf = 10
"""


@pytest.fixture(scope="module")
def chain(tmp_path_factory):
    """Eight small scenes of two regimes with longwave results, their pairs, a run with a profile
    model, its report and its export."""
    root = tmp_path_factory.mktemp("longwave_profile")
    return {**build_longwave_chain(root, RECIPE, learning_curve_points=0, importance_repeats=0), "pairs": read_pairs_table(root / "pairs.nc")}


def test_layer_targets_sum_to_the_column_target(chain):
    pairs = chain["pairs"]
    assert pairs.sizes["host_layer"] == 6
    for name in LONGWAVE_PROFILE_VARIABLES:
        assert pairs[name].dims == ("sample", "host_layer")
    column = pairs["target_value"].sel(target=COLUMN).values
    scale = np.abs(column).max()
    np.testing.assert_allclose(pairs["layer_net_absorption_target"].values.sum(axis=1), column, rtol=0,
                               atol=1e-12 * scale)
    for kind, variable in (("independent_column_flux", "independent_column_layer_net_absorption"),
                           ("full_3d_flux", "full_3d_layer_net_absorption")):
        np.testing.assert_allclose(pairs[variable].values.sum(axis=1), pairs[kind].sel(target=COLUMN).values,
                                   rtol=0, atol=1e-12 * scale)
    np.testing.assert_allclose(pairs["two_stream_layer_net_absorption"].values.sum(axis=1),
                               pairs["features"].sel(feature=f"host_{COLUMN}").values, rtol=0, atol=1e-12 * scale)
    assert (pairs["layer_net_absorption_target_standard_error"].values > 0).all()
    # Heating rate = g / c_p * F / dp (Liou 2002).
    per_flux = STANDARD_GRAVITY / DRY_AIR_SPECIFIC_HEAT * SECONDS_PER_DAY / pairs["host_layer_pressure_thickness"]
    np.testing.assert_allclose(pairs["layer_heating_rate_target"].values,
                               (pairs["layer_net_absorption_target"] * per_flux).values, rtol=1e-12)


def test_host_layers_of_another_grid_conserve_the_column(chain):
    scene = read_scene(chain["archive"] / "broken_stratocumulus_00002.nc")
    full, ica, two = (select_longwave_result(scene, f"longwave_{s}")
                      for s in ("full_3d", "independent_column", "two_stream"))
    fy, fx = host_factors(scene, HOST)
    z = scene["z_edge"].values
    edges = [z[0], 0.5 * (z[1] + z[2]), z[4], z[-1], z[-1] + 500.0]  # cuts through layers; one above the scene
    profiles = longwave_host_profiles(scene, full, ica, two, fy, fx, edges)
    column = (coarsen_longwave_result(full, fy, fx)[COLUMN] - coarsen_longwave_result(ica, fy, fx)[COLUMN]).ravel()
    np.testing.assert_allclose(profiles["layer_net_absorption_target"].sum(axis=1), column, rtol=0,
                               atol=1e-12 * np.abs(column).max())
    water = block_mean(np.einsum("zyx,z->yx", scene["liquid_water_content"].values, layer_thickness(scene)) * 1000.0,
                       fy, fx).ravel()
    np.testing.assert_allclose(profiles["layer_liquid_water_path"].sum(axis=1), water, rtol=1e-12)
    assert (profiles["layer_net_absorption_target"][:, -1] == 0.0).all()  # the layer above the scene holds nothing


def test_profile_layers_sum_to_the_column_correction(chain):
    run = load_training_run(chain["root"] / "models")
    assert run.profile.kind == "longwave_profile"
    assert isinstance(run.profile.estimator, LongwaveProfileCorrection)
    profile = chain["evaluation"].profile
    assert profile.column_model == "boosted"
    assert profile.column_integral["largest_mismatch"] < 1e-10
    table = profile.table
    assert set(table["quantity"]) == {"layer net absorption", "heating rate"}
    assert set(table["predictor"]) == {"no correction", "profile", "profile (own column sum)"}
    # No correction: its RMSE is the targets' RMS in the cloudy columns' layers, its skill 0.
    held = chain["evaluation"].sets[0].pairs
    cloudy = held["cloud_fraction"].values > 0
    truth = held["layer_net_absorption_target"].values[cloudy]
    row = table[(table["predictor"] == "no correction") & (table["units"] == "W m-2")].iloc[0]
    assert row["rmse"] == pytest.approx(np.sqrt(np.mean(truth ** 2)), rel=1e-12) and row["rmse_reduction"] == 0.0
    assert row["n"] == truth.size
    report = chain["root"] / "report"
    assert "Heating-rate profiles" in (report / "report.html").read_text()
    assert (report / "figures" / "profiles.png").is_file()
    summary = json.loads((report / "summary.json").read_text())
    assert set(summary["profile"]["skill"]) == {"layer net absorption [W m-2]", "heating rate [K day-1]"}
    assert set(pd.read_csv(report / "profile_metrics.csv")["units"]) == {"W m-2", "K day-1"}


def test_exported_profile_model_reproduces_the_estimator_from_host_fields(chain):
    run = load_training_run(chain["root"] / "models")
    pairs = chain["pairs"]
    estimator = run.profile.estimator
    model = load_coefficients(chain["root"] / "export" / "profile.coefficients.json")
    assert model.spectrum == "longwave" and model.document["targets"]["units"] == "W m-2 km-1"
    name = "scattered_cumulus_00003"
    scene = read_scene(chain["archive"] / f"{name}.nc")
    mine = pairs.isel(sample=np.flatnonzero(pairs["scene"].values == name))
    # Everything from the host's fields: column features and layer fields of its 4 x 4 columns.
    fields = longwave_host_fields(scene, HOST)
    fields.update(host_clear_sky_fluxes(scene, HOST, 10000.0))
    fy, fx = host_factors(scene, HOST)
    two = select_longwave_result(scene, "longwave_two_stream")
    fields.update({flux: value for flux, value in coarsen_longwave_result(two, fy, fx).items()
                   if flux in LONGWAVE_TARGETS})
    X = model.host_features(fields)
    nz = scene.sizes["z"]

    def per_column(values):
        return np.asarray(values).reshape(nz, -1).T

    z = scene["z_edge"].values
    water = block_mean(scene["liquid_water_content"].values * layer_thickness(scene)[:, None, None] * 1000.0, fy, fx)
    layer_fields = {"bottom": np.tile(z[:-1], (X.shape[0], 1)), "top": np.tile(z[1:], (X.shape[0], 1)),
                    "cloud_fraction": per_column(fields["layer_cloud_fraction"]),
                    "liquid_water_path": per_column(water),
                    "air_temperature": per_column(fields["layer_air_temperature"]),
                    "two_stream_net_absorption": per_column(block_mean(two["longwave_net_absorption"].values, fy, fx)),
                    "surface_temperature": fields["surface_temperature"].ravel()}
    expected = estimator.predict_pairs(mine)
    np.testing.assert_array_equal(model.predict_profile(X, layer_fields, check_envelope=False), expected)
    pair_fields = longwave_layer_fields(mine)
    for key, value in layer_fields.items():
        np.testing.assert_allclose(value, pair_fields[key], rtol=1e-13, err_msg=key)
    column = np.linspace(-20.0, 20.0, X.shape[0])
    matched = model.predict_profile(X, layer_fields, column_correction=column, check_envelope=False)
    np.testing.assert_allclose(matched.sum(axis=1), column, rtol=0, atol=1e-12)
    with pytest.raises(ValidationError, match="predict_profile needs a heating-rate"):
        load_coefficients(chain["root"] / "export" / "boosted.coefficients.json").predict_profile(X, layer_fields)
    document = json.loads((chain["root"] / "export" / "profile.coefficients.json").read_text())
    assert document["skill"]["rows"] and document["profile"]["target_units"] == "W m-2 km-1"


@pytest.mark.skipif(GFORTRAN is None, reason="gfortran is not installed (make test installs Debian's gfortran)")
def test_fortran_module_evaluates_the_profile_rows(chain, tmp_path):
    fortran = chain["root"] / "export" / "fortran"
    for f in ("profile_correction.f90", "profile_correction_driver.f90"):
        shutil.copy(fortran / f, tmp_path / f)
    built = subprocess.run([GFORTRAN, "-std=f2008", "-Wall", "-Werror", "-O2", "profile_correction.f90",
                            "profile_correction_driver.f90", "-o", "driver"], cwd=tmp_path, capture_output=True,
                           text=True)
    assert built.returncode == 0, built.stderr
    result = subprocess.run([str(tmp_path / "driver"), str(fortran / "profile.coefficients.txt"),
                             str(fortran / "profile_sample_features.txt")], capture_output=True, text=True)
    assert result.returncode == 0, result.stderr
    got = np.array([[float(v) for v in line.split()] for line in result.stdout.splitlines()])
    rows = np.loadtxt(fortran / "profile_sample_features.txt", skiprows=1)
    expected = load_training_run(chain["root"] / "models").profile.estimator.boosted_.predict(rows)
    assert got.shape == (rows.shape[0], 1) and rows.shape[0] > 1
    assert np.abs(got[:, 0] - expected).max() <= 1e-10 * np.abs(expected).max()
    assert "W m-2 km-1" in (fortran / "profile_correction.f90").read_text()


def test_pairs_command_takes_host_layer_edges(chain, tmp_path):
    out = tmp_path / "pairs.nc"
    assert main(["pairs", str(chain["archive"]), "--spectrum", "longwave", "--host-resolution", str(HOST),
                 "--host-layer-edges", "0", "1000", "4000", "--out", str(out), "--quiet"]) == 0
    pairs = read_pairs_table(out)
    assert pairs.sizes["host_layer"] == 2
    np.testing.assert_allclose(pairs["layer_net_absorption_target"].values.sum(axis=1),
                               pairs["target_value"].sel(target=COLUMN).values, rtol=0,
                               atol=1e-12 * np.abs(pairs["target_value"].sel(target=COLUMN).values).max())
