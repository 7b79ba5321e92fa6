"""Training writes a complete, reloadable model directory; broken directories are named."""

import hashlib
import json
import shutil

import numpy as np
import pytest

from surrogate3d.errors import FormatError
from surrogate3d.learn.model_directory import load_model, load_training_run
from surrogate3d.core.pairs_table import read_pairs_table
from surrogate3d.learn.pairs_table import scene_table, select_scenes
from surrogate3d.learn.train import train_models


@pytest.fixture(scope="module")
def trained(tmp_path_factory, pairs_file, small_recipe):
    root = tmp_path_factory.mktemp("train")
    recipe = root / "recipe.toml"
    recipe.write_text(small_recipe)
    out = root / "models"
    record = train_models(pairs_file, recipe, out, quiet=True)
    return out, record


def test_model_directory_layout(trained, pairs_file):
    out, record = trained
    assert sorted(p.name for p in out.iterdir()) == ["boosted", "ridge", "training.json"]
    for name in ("ridge", "boosted"):
        assert sorted(p.name for p in (out / name).iterdir()) == ["estimator.joblib", "model.json"]
    card = json.loads((out / "ridge" / "model.json").read_text())
    assert card["format_version"] == "1.0" and card["kind"] == "ridge"
    assert card["hyperparameters"]["interactions"] is True and card["hyperparameters"]["alpha"] in (0.01, 100.0)
    assert card["provenance"]["pairs_sha256"] == hashlib.sha256(pairs_file.read_bytes()).hexdigest()
    assert card["feature_recipe"]["features"][0]["name"] == "cloud_fraction"
    assert "[models.boosted]" in card["provenance"]["recipe_text"]
    assert len(card["cross_validation"]["scores"]) == 2 and card["cross_validation"]["folds"] == 2
    assert not list(out.rglob(".*.tmp"))


def test_split_and_left_out_families(trained, pairs_file):
    out, record = trained
    split = record["split"]
    assert set(split["training_scenes"]).isdisjoint(split["held_out_scenes"])
    table = scene_table(read_pairs_table(pairs_file))
    assert set(split["training_scenes"]) | set(split["held_out_scenes"]) == set(table)
    assert split["left_out_families"] == ["dense"]          # the recipe's held_out_regime


def test_reloaded_models_predict_like_fresh_ones(trained, pairs_file):
    out, record = trained
    run = load_training_run(out)
    pairs = read_pairs_table(pairs_file)
    training = select_scenes(pairs, record["split"]["training_scenes"])
    for name, model in run.models.items():
        fresh = type(model.estimator)(**model.card["hyperparameters"]).fit_pairs(training)
        np.testing.assert_allclose(model.estimator.predict_pairs(pairs), fresh.predict_pairs(pairs), rtol=1e-12,
                                   atol=1e-14)


def _copy(trained, tmp_path):
    target = tmp_path / "models"
    shutil.copytree(trained[0], target)
    return target


def test_other_format_version_is_named(trained, tmp_path):
    target = _copy(trained, tmp_path)
    card_path = target / "ridge" / "model.json"
    card = json.loads(card_path.read_text())
    card["format_version"] = "2.0"
    card_path.write_text(json.dumps(card))
    with pytest.raises(FormatError, match="format_version 2.0"):
        load_model(target / "ridge")
    with pytest.raises(FormatError, match="format_version 2.0"):
        load_training_run(target)


def test_missing_files_are_named(trained, tmp_path):
    target = _copy(trained, tmp_path)
    (target / "boosted" / "estimator.joblib").unlink()
    with pytest.raises(FormatError, match="lacks estimator.joblib"):
        load_model(target / "boosted")
    (target / "training.json").unlink()
    with pytest.raises(FormatError, match="training.json.*does not exist"):
        load_training_run(target)
    (target / "ridge" / "model.json").write_text("{not json")
    with pytest.raises(FormatError, match="not valid JSON"):
        load_model(target / "ridge")


def test_estimator_must_match_its_card(trained, tmp_path):
    target = _copy(trained, tmp_path)
    shutil.copy(target / "boosted" / "estimator.joblib", target / "ridge" / "estimator.joblib")
    with pytest.raises(FormatError, match="holds a BoostedCorrection"):
        load_model(target / "ridge")


def test_training_is_reproducible(pairs_file, tmp_path):
    recipe = tmp_path / "ridge.toml"
    recipe.write_text('[split]\nseed = 4\n[cross_validation]\nfolds = 2\n[models.ridge]\nkind = "ridge"\n'
                      "alpha = [0.1, 10.0]\n")
    train_models(pairs_file, recipe, tmp_path / "a", quiet=True)
    train_models(pairs_file, recipe, tmp_path / "b", quiet=True)
    for name in ("training.json", "ridge/model.json"):
        assert (tmp_path / "a" / name).read_text() == (tmp_path / "b" / name).read_text()
    first, second = load_model(tmp_path / "a" / "ridge"), load_model(tmp_path / "b" / "ridge")
    np.testing.assert_array_equal(first.estimator.coef_, second.estimator.coef_)


def test_family_grouped_search_keeps_regimes_out_of_their_folds(tmp_path, pairs_file, small_recipe):
    # With grouping "family" every fold of the search scores families its fit never saw
    # (leave-group-out cross-validation; Roberts et al. 2017): the card records it, and a
    # fold's training and test samples share no regime.
    from surrogate3d.learn.cv import scene_folds

    recipe = tmp_path / "recipe.toml"
    recipe.write_text(small_recipe.replace("[cross_validation]", '[cross_validation]\ngrouping = "family"'))
    train_models(pairs_file, recipe, tmp_path / "models", quiet=True)
    card = json.loads((tmp_path / "models" / "ridge" / "model.json").read_text())
    assert card["cross_validation"]["grouping"] == "family"
    regimes = np.asarray(read_pairs_table(pairs_file)["regime"].values).astype(str)
    for train, test in scene_folds(regimes, 2):
        assert not set(regimes[train]) & set(regimes[test])
