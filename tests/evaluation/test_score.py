"""``surrogate3d score``: any coefficient file or model directory on any pairs table.

References: the skill of docs/methods/models-and-metrics.md (Wilks 2011, ch. 8),
recomputed here from the runtime's own predictions; the trained estimators
(scikit-learn) for the model-directory path.
"""

import json

import numpy as np
import pandas as pd
import pytest
from trained_model_fixtures import built  # noqa: F401  (the exported test models)

from surrogate3d import cli
from surrogate3d.archive import write_dataset
from surrogate3d.errors import ValidationError
from surrogate3d.evaluation.scoring import SCORED, score
from surrogate3d.core.pairs_table import read_pairs_table
from surrogate3d.pairs.recipe import FeatureRecipe
from surrogate3d.runtime import load_coefficients


def _error_line(capsys):
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith("surrogate3d score: error:"), err
    return err[0]


@pytest.fixture(scope="module")
def scored_file(built, tmp_path_factory):
    """``surrogate3d score`` of the exported ridge on the training pairs: exit status and report."""
    out = tmp_path_factory.mktemp("score") / "report"
    status = cli.main(["score", str(built["export_dir"] / "ridge.coefficients.json"), str(built["pairs_file"]),
                       "--out", str(out), "--importance-repeats", "1", "--quiet"])
    return status, out


def test_score_writes_the_report_of_evaluate(scored_file):
    status, out = scored_file
    assert status == 0
    names = {p.name for p in out.iterdir()}
    assert {"report.html", "metrics.csv", "metrics.md", "breakdown_regime.csv", "breakdown_solar_zenith.md",
            "envelope.csv", "importance.csv", "consistency.csv", "summary.json", "figures"} <= names
    summary = json.loads((out / "summary.json").read_text())
    assert summary["skill_units"] == "W m-2" and summary["pairs_matches_training"] is True
    assert SCORED in summary["evaluation_sets"] and "ridge" in summary["share_outside_envelope"][SCORED]
    assert any("training scenes" in note for note in summary["notes"])
    page = (out / "report.html").read_text()
    assert "Training envelope" in page and "data:image/png;base64," in page


def test_score_recomputes_the_skill_of_the_runtime(built, scored_file):
    # The skill of the W m-2 errors of the runtime's corrections, after the consistency
    # step, on every sample, recomputed from its definition.
    evaluation = score(built["export_dir"] / "ridge.coefficients.json", built["pairs_file"], consistency=False,
                       importance_repeats=0, quiet=True)
    pairs = read_pairs_table(built["pairs_file"])
    model = load_coefficients(built["export_dir"] / "ridge.coefficients.json")
    X = np.asarray(pairs["features"].sel(feature=model.feature_names).values)
    m = model.target_names.index("surface_downward_flux")
    flux = pairs["incident_flux"].values
    true = pairs["target_value"].sel(target="surface_downward_flux").values
    error = (model.predict(X, check_envelope=False)[:, m] - true) * flux
    expected = 1.0 - np.sqrt(np.mean(error**2)) / np.sqrt(np.mean((true * flux) ** 2))
    t = evaluation.table
    row = t[(t["breakdown"] == "all") & (t["units"] == "W m-2") & (t["predictor"] == "ridge")
            & (t["target"] == "surface_downward_flux")]
    assert row["skill"].item() == pytest.approx(expected, rel=1e-12)
    assert row["n"].item() == pairs.sizes["sample"]


def test_model_directory_scores_like_its_export(built):
    directory = score(built["model_dir"], built["pairs_file"], importance_repeats=0, quiet=True)
    for name in ("ridge", "boosted"):
        exported = score(built["export_dir"] / f"{name}.coefficients.nc", built["pairs_file"], importance_repeats=0,
                         quiet=True)
        a = directory.table[directory.table["predictor"] == name].reset_index(drop=True)
        b = exported.table[exported.table["predictor"] == name].reset_index(drop=True)
        # The runtime reproduces the estimators to 1e-9 relative (ridge) and exactly (trees).
        np.testing.assert_allclose(a["skill"], b["skill"], rtol=1e-8, atol=1e-10)
        np.testing.assert_array_equal(directory.sets[0].envelope[name].outside, exported.sets[0].envelope[name].outside)


def test_columns_outside_the_envelope_are_flagged_not_refused(built, tmp_path):
    pairs = read_pairs_table(built["pairs_file"])
    model = load_coefficients(built["export_dir"] / "boosted.coefficients.json")
    far = pairs.copy(deep=True)
    k = list(far["feature"].values).index(model.feature_names[-1])
    far["features"].values[::2, k] = model.envelope.feature_max[-1] * 3.0 + 1.0
    path = write_dataset(far, tmp_path / "far.nc")
    evaluation = score(built["export_dir"] / "boosted.coefficients.json", path, importance_repeats=0, quiet=True)
    check = evaluation.sets[0].envelope["boosted"]
    gated = model.clear_sky_mask(np.asarray(far["features"].sel(feature=model.feature_names).values))
    assert check.outside[::2][~gated[::2]].all() and check.n_outside >= np.count_nonzero(~gated[::2])
    table = evaluation.envelope
    assert table[(table["group"] == "all") & (table["predictor"] == "boosted")]["outside"].iloc[0] == check.n_outside


def test_file_without_envelope_is_scored_with_a_note(built, tmp_path):
    content = json.loads((built["export_dir"] / "ridge.coefficients.json").read_text())
    content.pop("training_envelope")
    content["format_version"] = "1.1"
    path = tmp_path / "old.coefficients.json"
    path.write_text(json.dumps(content))
    evaluation = score(path, built["pairs_file"], importance_repeats=0, quiet=True)
    assert any("has no training envelope" in note for note in evaluation.notes)
    assert pd.isna(evaluation.envelope["share_outside"]).all()


def test_missing_feature_is_named_in_one_line(built, tmp_path, capsys):
    pairs = read_pairs_table(built["pairs_file"])
    model = load_coefficients(built["export_dir"] / "ridge.coefficients.json")
    first, second = model.feature_names[1], model.feature_names[3]
    path = write_dataset(pairs.drop_sel(feature=[second, first]), tmp_path / "fewer.nc")
    assert cli.main(["score", str(built["export_dir"] / "ridge.coefficients.json"), str(path), "--out",
                     str(tmp_path / "r"), "--quiet"]) == 1
    line = _error_line(capsys)
    assert f"lacks feature {first!r} (and 1 more) needed by model 'ridge'" in line


def test_mismatched_recipe_is_named_in_one_line(built, tmp_path, capsys):
    # The same column computed with another parameter is another feature: refused, naming it.
    pairs = read_pairs_table(built["pairs_file"])
    recipe = FeatureRecipe.from_json(pairs.attrs["feature_recipe"])
    changed = FeatureRecipe(recipe.features, {**recipe.parameters, "edge_cloud_fraction": 0.3}, name=recipe.name)
    pairs.attrs["feature_recipe"] = changed.to_json()
    path = write_dataset(pairs, tmp_path / "other-recipe.nc")
    assert cli.main(["score", str(built["model_dir"]), str(path), "--out", str(tmp_path / "r"), "--quiet"]) == 1
    line = _error_line(capsys)
    assert "feature 'cloud_edge_distance' of model 'ridge' was computed with edge_cloud_fraction = 0.5" in line
    assert "uses 0.3" in line


def test_missing_target_and_bad_source(built, tmp_path, capsys):
    pairs = read_pairs_table(built["pairs_file"])
    path = write_dataset(pairs.drop_sel(target=["toa_upward_flux"]), tmp_path / "no-toa.nc")
    with pytest.raises(ValidationError, match="lacks target 'toa_upward_flux' predicted by model 'boosted'"):
        score(built["export_dir"] / "boosted.coefficients.json", path, importance_repeats=0, quiet=True)
    assert cli.main(["score", str(tmp_path), str(built["pairs_file"]), "--out", str(tmp_path / "r"), "--quiet"]) == 1
    assert "neither a coefficient file" in _error_line(capsys)


def test_a_profile_model_is_referred_to_evaluate(built, capsys, tmp_path):
    # score scores column corrections; the heating-rate model is scored by evaluate.
    for source in (built["export_dir"] / "profile.coefficients.json", built["model_dir"] / "profile"):
        assert cli.main(["score", str(source), str(built["pairs_file"]), "--out", str(tmp_path / "report"),
                         "--quiet"]) == 1
        assert "is a heating-rate (profile) model" in _error_line(capsys)
        assert not (tmp_path / "report").exists()
