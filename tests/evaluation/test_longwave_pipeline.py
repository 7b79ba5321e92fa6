"""The longwave correction from pairs to Fortran: train, evaluate, export, numpy runtime, Fortran module.

The physics of the longwave benchmarks is checked in tests/solvers (Kirchhoff, the slab's
1 - 2 E3(tau), energy); here the learning chain is checked against itself and against
outside references of the trade: the numpy runtime computes the features from host fields
exactly as the pair table does, the Fortran module reproduces the estimators to 1e-10
(decimal numbers of 17 significant digits read back to the same double, IEEE 754-2008,
5.12.2), and the skill is 1 - RMSE / RMSE(no correction) (Wilks 2011, ch. 8).
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
from surrogate3d.errors import ParameterError, ValidationError
from surrogate3d.learn.model_directory import load_training_run
from surrogate3d.learn.recipe import parse_recipe
from surrogate3d.learn.train import train_models
from surrogate3d.pairs.coarsen import host_factors
from surrogate3d.pairs.longwave_features import LONGWAVE_FEATURES, LONGWAVE_TARGETS, longwave_halo_width
from surrogate3d.pairs.longwave_pairs import coarsen_longwave_result, host_clear_sky_fluxes, longwave_host_fields
from surrogate3d.runtime import load_coefficients

from longwave_chain import HOST, build_longwave_chain

GFORTRAN = shutil.which("gfortran")

RECIPE = """
spectrum = "longwave"
[split]
held_out_scene_fraction = 0.25
seed = 0
[cross_validation]
folds = 2
[models.ridge]
kind = "ridge"
alpha = [1.0, 10.0]
[models.boosted]
kind = "boosted"
max_iter = 20
max_leaf_nodes = 7
min_samples_leaf = 5
random_state = 0
"""


@pytest.fixture(scope="module")
def chain(tmp_path_factory):
    """Eight small scenes of two regimes with longwave results, their pairs, a trained run,
    its report and its export."""
    root = tmp_path_factory.mktemp("longwave")
    return {**build_longwave_chain(root, RECIPE, learning_curve_points=2, importance_repeats=1)}


def test_training_learns_the_five_longwave_targets(chain):
    run = load_training_run(chain["root"] / "models")
    assert run.record["spectrum"] == "longwave"
    assert run.record["targets"] == list(LONGWAVE_TARGETS)
    assert run.record["feature_names"] == list(LONGWAVE_FEATURES)
    pairs = read_pairs_table(chain["root"] / "pairs.nc")
    for model in run.models.values():
        assert model.estimator.predict_pairs(pairs).shape == (pairs.sizes["sample"], len(LONGWAVE_TARGETS))


def test_recipe_and_table_of_different_spectra_are_refused(chain, tmp_path):
    shortwave = tmp_path / "shortwave.toml"
    shortwave.write_text(RECIPE.replace('spectrum = "longwave"', ""))
    with pytest.raises(ValidationError, match="training recipe .* is for the shortwave; the pairs table is a longwave"):
        train_models(chain["root"] / "pairs.nc", shortwave, tmp_path / "models", quiet=True)
    with pytest.raises(ParameterError, match="targets must be a non-empty list of distinct names from "
                                             r"\['longwave_surface_downward_flux'"):
        parse_recipe(RECIPE.replace('spectrum = "longwave"', 'spectrum = "longwave"\ntargets = ["toa_upward_flux"]'))
    # A longwave recipe takes target transforms of its own targets (the prior as offset), not the shortwave's.
    offset = "offset_features = {effective_cloud_fraction_prior = 1.0}\n"
    assert parse_recipe(RECIPE + "[target_transforms.longwave_surface_downward_flux]\n" + offset).target_transforms
    with pytest.raises(ParameterError, match=r"\[target_transforms\] has unknown keys \['surface_downward_flux'\]"):
        parse_recipe(RECIPE + "[target_transforms.surface_downward_flux]\n" + offset)
    with pytest.raises(ParameterError, match="spectrum must be 'shortwave' or 'longwave'"):
        parse_recipe('spectrum = "thermal"\n' + RECIPE.replace('spectrum = "longwave"', ""))


def test_report_scores_against_no_correction_in_w_m2(chain):
    evaluation = chain["evaluation"]
    table = evaluation.table
    assert set(table["units"]) == {"W m-2"}
    assert set(table["evaluation_set"]) == {"held-out scenes", "left-out families"}
    held = table[(table["evaluation_set"] == "held-out scenes") & (table["breakdown"] == "all")]
    assert set(held["predictor"]) == {"no correction", "effective cloud fraction", "ridge", "boosted"}
    # Skill is the share of the no-correction RMSE removed (Wilks 2011): check one row by hand.
    pairs = evaluation.sets[0].pairs
    m = evaluation.targets.index("longwave_surface_downward_flux")
    true = pairs["target_value"].values[:, m]
    predicted = evaluation.sets[0].predictions["boosted"][:, m]
    row = held[(held["predictor"] == "boosted") & (held["target"] == "longwave_surface_downward_flux")].iloc[0]
    rmse = np.sqrt(np.mean((predicted - true) ** 2))
    assert row["rmse"] == pytest.approx(rmse, rel=1e-12)
    assert row["skill"] == pytest.approx(1.0 - rmse / np.sqrt(np.mean(true**2)), rel=1e-12)
    report = chain["root"] / "report"
    page = (report / "report.html").read_text()
    for text in ("Held-out skill of the longwave 3D corrections", "Leave-one-family-out", "Skill by regime",
                 "share of the ICA RMSE removed"):
        assert text in page
    assert set(pd.read_csv(report / "metrics.csv")["units"]) == {"W m-2"}
    summary = json.loads((report / "summary.json").read_text())
    assert summary["spectrum"] == "longwave" and summary["skill_units"] == "W m-2"
    assert (report / "figures" / "maps.png").is_file() and (report / "figures" / "scatter.png").is_file()


def test_runtime_computes_the_longwave_features_from_host_fields(chain):
    run = load_training_run(chain["root"] / "models")
    pairs = read_pairs_table(chain["root"] / "pairs.nc")
    name = "broken_stratocumulus_00001"
    scene = read_scene(chain["archive"] / f"{name}.nc")
    fields = longwave_host_fields(scene, HOST)
    fields.update(host_clear_sky_fluxes(scene, HOST, 10000.0))
    fy, fx = host_factors(scene, HOST)
    host_fluxes = coarsen_longwave_result(select_longwave_result(scene, "longwave_two_stream"), fy, fx)
    fields.update({flux: host_fluxes[flux] for flux in LONGWAVE_TARGETS})
    mine = pairs.isel(sample=np.flatnonzero(pairs["scene"].values == name))
    for model_name in ("ridge", "boosted"):
        model = load_coefficients(chain["root"] / "export" / f"{model_name}.coefficients.json")
        assert model.spectrum == "longwave"
        assert model.document["targets"]["units"] == "W m-2"
        np.testing.assert_array_equal(model.host_features(fields), mine["features"].values)
        np.testing.assert_array_equal(model.predict_host(fields, check_envelope=False),
                                      run.models[model_name].estimator.predict_pairs(mine))
    # A sub-domain with a halo (wrapped from the periodic domain) gives the whole domain's
    # features of its own columns once the halo holds the widest window: 10 km on 300 m
    # columns is 34 columns (it wraps the 4 x 4 host grid many times, as the periodic windows do).
    hx, hy = longwave_halo_width(model.recipe, HOST, HOST)
    assert (hx, hy) == (34, 34)
    ny, nx = fields["total_cloud_fraction"].shape
    rows, cols = np.arange(-hy, ny + hy) % ny, np.arange(-hx, nx + hx) % nx
    padded = {k: (np.asarray(v)[..., rows, :][..., cols] if np.ndim(v) >= 2 else v) for k, v in fields.items()}
    np.testing.assert_allclose(model.host_features(padded, halo=(hx, hy)), model.host_features(fields),
                               rtol=1e-12, atol=1e-12)
    with pytest.raises(ValidationError, match="neighbour windows read 34 columns along x and 34 along y; the halo "
                                              "has 33 and 34"):
        model.host_features({k: (v[..., :, 1:] if np.ndim(v) >= 2 else v) for k, v in padded.items()},
                            halo=(33, 34))
    del fields["surface_temperature"]
    with pytest.raises(ValidationError, match=r"longwave host fields lack \['surface_temperature'\]"):
        model.host_features(fields)


@pytest.mark.skipif(GFORTRAN is None, reason="gfortran is not installed (make test installs Debian's gfortran)")
@pytest.mark.parametrize("name", ["ridge", "boosted"])
def test_fortran_module_reproduces_the_longwave_models(chain, tmp_path, name):
    fortran = chain["root"] / "export" / "fortran"
    for f in (f"{name}_correction.f90", f"{name}_correction_driver.f90"):
        shutil.copy(fortran / f, tmp_path / f)
    built = subprocess.run([GFORTRAN, "-std=f2008", "-Wall", "-Werror", "-O2", f"{name}_correction.f90",
                            f"{name}_correction_driver.f90", "-o", "driver"], cwd=tmp_path, capture_output=True,
                           text=True)
    assert built.returncode == 0, built.stderr
    result = subprocess.run([str(tmp_path / "driver"), str(fortran / f"{name}.coefficients.txt"),
                             str(fortran / f"{name}_sample_features.txt")], capture_output=True, text=True)
    assert result.returncode == 0, result.stderr
    got = np.array([[float(v) for v in line.split()] for line in result.stdout.splitlines()])
    features = np.loadtxt(fortran / f"{name}_sample_features.txt", skiprows=1)
    expected = load_training_run(chain["root"] / "models").models[name].estimator.predict(features)
    assert got.shape == expected.shape == (features.shape[0], len(LONGWAVE_TARGETS))
    assert (np.abs(got - expected) / np.abs(expected).max(axis=0)).max() <= 1e-10
    assert "longwave fields in W m-2" in (fortran / f"{name}_correction.f90").read_text()


def test_score_gives_the_longwave_report_and_refuses_a_shortwave_model(chain, tmp_path, capsys):
    pairs = str(chain["root"] / "pairs.nc")
    out = tmp_path / "scored"
    assert main(["score", str(chain["root"] / "export" / "boosted.coefficients.json"), pairs, "--out", str(out),
                 "--quiet"]) == 0
    assert set(pd.read_csv(out / "metrics.csv")["units"]) == {"W m-2"}
    assert "Skill of the longwave 3D corrections" in (out / "report.html").read_text()
    assert main(["score", "models/default/boosted.coefficients.json", pairs, "--out", str(tmp_path / "x")]) == 1
    err = capsys.readouterr().err.strip()
    assert err.count("\n") == 0 and "is a shortwave correction" in err and "is a longwave table" in err
