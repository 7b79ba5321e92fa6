"""The evaluation on held-out scenes and the report files."""

import base64
import json
import re

import numpy as np
import pandas as pd
import pytest

from surrogate3d.errors import ValidationError
from surrogate3d.evaluation import figures
from surrogate3d.evaluation.report import HELD_OUT, LEFT_OUT, evaluate
from surrogate3d.evaluation.tables import headline_table
from surrogate3d.learn.pairs_table import scene_labels

PNG = b"\x89PNG\r\n\x1a\n"


def test_only_held_out_scenes_are_scored(evaluation):
    split = evaluation.record["split"]
    held = evaluation.sets[0]
    assert held.label == HELD_OUT
    assert set(scene_labels(held.pairs)) == set(split["held_out_scenes"])
    assert set(scene_labels(held.pairs)).isdisjoint(split["training_scenes"])
    left_out = evaluation.sets[1]
    assert left_out.label == LEFT_OUT
    # Every sample of every family, each corrected by the models trained without its family.
    assert set(scene_labels(left_out.pairs)) == set(split["training_scenes"]) | set(split["held_out_scenes"])
    assert set(left_out.predictions) == {"no correction", "tilted independent column", "non-local independent pixel",
                                         "ridge (trained without the family)", "boosted (trained without the family)"}


def test_models_beat_no_correction_and_stay_below_the_noise_floor(evaluation):
    t = evaluation.table
    rows = t[(t["evaluation_set"] == HELD_OUT) & (t["breakdown"] == "all") & (t["units"] == "W m-2")
             & (t["target"] == "surface_downward_flux")].set_index("predictor")
    assert rows.loc["boosted", "skill"] > 0.6
    assert rows.loc["boosted", "skill"] <= rows.loc["boosted", "noise_floor_skill"] + 0.02
    assert rows.loc["no correction", "skill"] == 0.0


def test_one_headline_skill(evaluation, report_dir):
    # The report quotes one skill, that of the W m-2 errors (S0 cos(theta0) times the
    # fractions, sample by sample): the headline table, the figures' rows and summary.json.
    t = evaluation.table
    rows = t[(t["evaluation_set"] == HELD_OUT) & (t["breakdown"] == "all") & (t["target"] == "surface_downward_flux")
             & (t["predictor"] == "boosted")].set_index("units")
    held = evaluation.sets[0]
    m = evaluation.targets.index("surface_downward_flux")
    flux = held.pairs["incident_flux"].values
    true = held.pairs["target_value"].sel(target="surface_downward_flux").values
    error = (held.predictions["boosted"][:, m] - true) * flux
    expected = 1.0 - np.sqrt(np.mean(error**2)) / np.sqrt(np.mean((true * flux) ** 2))
    assert rows.loc["W m-2", "skill"] == pytest.approx(expected, rel=1e-12)
    assert abs(rows.loc["1", "skill"] - expected) > 1e-6        # the fractions weight every sun alike
    headline = headline_table(t, HELD_OUT).set_index(["target", "predictor"])
    assert headline.loc[("surface_downward_flux", "boosted"), "skill"] == pytest.approx(expected, rel=1e-12)
    summary = json.loads((report_dir / "summary.json").read_text())
    assert summary["skill_units"] == "W m-2"
    assert summary["skill"][HELD_OUT]["boosted | surface_downward_flux"] == pytest.approx(expected, rel=1e-12)


def test_consistency_step_is_applied(evaluation, model_dir, pairs_file):
    outcome = evaluation.sets[0].outcomes["boosted"]
    assert outcome is not None and outcome.flux.min() >= 0.0
    assert set(evaluation.sets[0].raw) == {"ridge", "boosted"}
    raw = evaluate(model_dir, pairs_file, consistency=False, learning_curve_points=0, importance_repeats=0,
                   quiet=True)
    assert raw.sets[0].outcomes["boosted"] is None and not raw.sets[0].raw
    np.testing.assert_array_equal(raw.sets[0].predictions["boosted"], evaluation.sets[0].raw["boosted"])


def test_report_files(report_dir):
    names = {p.name for p in report_dir.iterdir()}
    assert {"report.html", "metrics.csv", "metrics.md", "breakdown_regime.csv", "breakdown_solar_zenith.md",
            "breakdown_cloud_fraction.csv", "breakdown_host_resolution.md", "importance.csv", "learning_curve.csv",
            "consistency.csv", "consistency_skill.csv", "summary.json", "figures", "envelope.csv",
            "left_out_family_fits.csv", "breakdown_regime_solar_zenith.csv"} <= names
    summary = json.loads((report_dir / "summary.json").read_text())
    shares = summary["share_outside_envelope"]
    assert set(shares) == {HELD_OUT, LEFT_OUT}
    assert all(0.0 <= share <= 1.0 for by_model in shares.values() for share in by_model.values())
    assert summary["left_out_families"]["fits"] == 4
    metrics = pd.read_csv(report_dir / "metrics.csv")
    assert set(metrics["units"]) == {"1", "W m-2"}
    assert set(metrics["predictor"]) >= {"no correction", "tilted independent column", "non-local independent pixel",
                                         "ridge", "boosted"}
    assert (report_dir / "metrics.md").read_text().startswith("# Skill on held-out data")
    curve = pd.read_csv(report_dir / "learning_curve.csv")
    assert curve["n_training_scenes"].nunique() == 2


def test_html_is_self_contained(report_dir):
    page = (report_dir / "report.html").read_text()
    sources = re.findall(r'src="([^"]*)"', page)
    assert len(sources) >= 9 and all(s.startswith("data:image/png;base64,") for s in sources)
    assert base64.b64decode(sources[0].split(",", 1)[1]).startswith(PNG)
    assert "<link" not in page and "http" not in page.split("<footer>")[0].replace("http-equiv", "")
    for section in ("Maps of sample scenes", "Feature importance", "Learning curve", "Leave-one-family-out",
                    "Training envelope"):
        assert section in page
    assert all(p.read_bytes().startswith(PNG) for p in (report_dir / "figures").glob("*.png"))


def test_host_map_reconstruction(synthetic_pairs):
    pairs = synthetic_pairs
    one = (pairs["scene"].values == pairs["scene"].values[0]) & (pairs["host_resolution"].values == 1000.0) \
        & (pairs["solar_zenith_angle"].values == 20.0)
    sub = pairs.isel(sample=np.flatnonzero(one)[::-1])
    values = sub["host_ix"].values * 10 + sub["host_iy"].values
    grid = figures.host_map(sub, values)
    iy, ix = np.mgrid[0:8, 0:8]
    np.testing.assert_array_equal(grid, ix * 10 + iy)


def test_missing_held_out_scene_is_named(model_dir, synthetic_pairs, tmp_path, evaluation):
    from surrogate3d.archive import write_dataset

    held = evaluation.record["split"]["held_out_scenes"][0]
    keep = np.flatnonzero(np.asarray(synthetic_pairs["scene"].values).astype(str) != held)
    path = write_dataset(synthetic_pairs.isel(sample=keep), tmp_path / "partial.nc")
    with pytest.raises(ValidationError, match=held):
        evaluate(model_dir, path, learning_curve_points=0, importance_repeats=0, quiet=True)


def test_profile_section(evaluation, report_dir):
    # The layers are matched to the boosted model's absorption correction (energy conservation,
    # to round-off) and beat no correction on the synthetic layer targets.
    profile = evaluation.profile
    assert profile.column_model == "boosted" and profile.column_integral["largest_mismatch"] < 1e-14
    rows = profile.table[profile.table["predictor"] == profile.model].set_index("units")
    assert rows.loc["1", "rmse_reduction"] > 0.3 and rows.loc["K day-1", "rmse_reduction"] > 0.3
    summary = json.loads((report_dir / "summary.json").read_text())
    assert summary["profile"]["matched_to"] == "boosted"
    assert "Heating-rate profiles" in (report_dir / "report.html").read_text()
    for name in ("profile_metrics.csv", "profile_by_height.csv", "figures/profiles.png"):
        assert (report_dir / name).is_file()


def test_profiles_are_zero_where_the_clear_sky_gate_holds(pairs_file, tmp_path):
    # A gated column has no 3D correction (the consistency step refuses any), so its layers
    # are zero too and the profile scoring goes through with the energy matched.
    from surrogate3d.core.pairs_table import read_pairs_table
    from surrogate3d.evaluation.report import _profile_skill
    from surrogate3d.learn import load_training_run
    from surrogate3d.learn.pairs_table import select_scenes
    from surrogate3d.learn.train import train_models

    recipe = """
[split]
held_out_scene_fraction = 0.25
seed = 2

[models.boosted]
kind = "boosted"
max_iter = 20
min_samples_leaf = 10
clear_sky_features = ["cloud_fraction", "neighbour_cloud_fraction"]

[profile]
max_iter = 20
min_samples_leaf = 10
"""
    (tmp_path / "recipe.toml").write_text(recipe)
    train_models(pairs_file, tmp_path / "recipe.toml", tmp_path / "run", quiet=True)
    run = load_training_run(tmp_path / "run")
    held = select_scenes(read_pairs_table(pairs_file), run.record["split"]["held_out_scenes"])
    boosted = run.models["boosted"].estimator
    assert boosted.clear_sky_mask(held["features"].sel(feature=boosted.feature_names_).values).any()
    profile = _profile_skill(run, held, list(run.record["targets"]), [])
    assert profile.column_integral["largest_mismatch"] < 1e-14
