"""Leave-one-family-out evaluation: every family scored by models that never saw it.

Reference: the definition of the evaluation (docs/methods/models-and-metrics.md), checked
against an independent refit with scikit-learn's clone of the trained estimator; grouping
whole families out of training as in Roberts et al. (2017, "block" cross-validation).
"""

import numpy as np
import pandas as pd
import pytest
from sklearn.base import clone

from surrogate3d.evaluation.family_transfer import LEFT_OUT, WITHOUT_FAMILY
from surrogate3d.evaluation.report import evaluate
from surrogate3d.learn.model_directory import load_training_run
from surrogate3d.core.pairs_table import read_pairs_table
from surrogate3d.learn.pairs_table import feature_matrix, scene_table, select_scenes
from surrogate3d.learn.train import train_models


def test_each_family_is_predicted_by_a_model_trained_without_it(evaluation, model_dir, pairs_file):
    run = load_training_run(model_dir)
    pairs = read_pairs_table(pairs_file)
    table = scene_table(pairs)
    left_out = evaluation.sets[1]
    regime = np.asarray(left_out.pairs["regime"].values).astype(str)
    targets = evaluation.targets
    for family in ("sparse", "dense"):
        training = [s for s in run.record["split"]["training_scenes"] if table[s][0] != family]
        for name, trained in run.models.items():
            refit = clone(trained.estimator).fit_pairs(select_scenes(pairs, training), trained.card["feature_names"],
                                                       targets)
            rows = regime == family
            expected = refit.predict(feature_matrix(left_out.pairs.isel(sample=np.flatnonzero(rows)),
                                                    trained.card["feature_names"]))
            np.testing.assert_array_equal(left_out.raw[name + WITHOUT_FAMILY][rows], expected)
            check = refit.envelope_check(feature_matrix(left_out.pairs.isel(sample=np.flatnonzero(rows)),
                                                        trained.card["feature_names"]))
            np.testing.assert_array_equal(left_out.envelope[name + WITHOUT_FAMILY].outside[rows], check.outside)


def test_breakdowns_and_cost_of_the_left_out_families(evaluation):
    t = evaluation.table
    rows = t[t["evaluation_set"] == LEFT_OUT]
    assert set(rows["breakdown"]) == {"all", "regime", "solar_zenith", "regime_solar_zenith"}
    cross = rows[rows["breakdown"] == "regime_solar_zenith"]
    assert {g.split(", ")[0] for g in cross["group"]} == {"sparse", "dense"}
    # Per family and zenith bin, the baselines are scored on the same samples as the models.
    for _, part in cross[cross["units"] == "W m-2"].groupby(["group", "target"]):
        assert part["n"].nunique() == 1 and len(part) == 5
    runs = evaluation.family_runs
    assert len(runs) == 4 and set(runs["family"]) == {"sparse", "dense"}
    assert (runs["fit_cpu_seconds"] >= 0).all() and (runs["test_samples"] > 0).all()
    assert set(evaluation.envelope[evaluation.envelope["evaluation_set"] == LEFT_OUT]["group"]) == \
        {"all", "sparse", "dense"}


@pytest.mark.parametrize("line, families", [('left_out_families = ["dense"]', {"dense"}),
                                            ("left_out_families = []", None)])
def test_recipe_restricts_the_families(tmp_path, model_dir, pairs_file, line, families):
    text = (model_dir.parent / "recipe.toml").read_text()          # the recipe of the session's run
    recipe = tmp_path / "recipe.toml"
    recipe.write_text(text.replace("seed = 2", f"seed = 2\n{line}").replace("max_iter = 40", "max_iter = 5"))
    train_models(pairs_file, recipe, tmp_path / "run", quiet=True)
    result = evaluate(tmp_path / "run", pairs_file, learning_curve_points=0, importance_repeats=0, quiet=True)
    if families is None:
        assert [s.label for s in result.sets] == ["held-out scenes"] and result.family_runs is None
    else:
        assert set(np.asarray(result.sets[1].pairs["regime"].values).astype(str)) == families
        assert set(pd.unique(result.family_runs["family"])) == families
