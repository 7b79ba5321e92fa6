"""Permutation importance and the learning curve on a model with a known dependence."""

import numpy as np

from surrogate3d.evaluation.importance import permutation_importance
from surrogate3d.evaluation.learning_curve import learning_curve, scene_order, subset_sizes
from surrogate3d.evaluation.scored_model import ScoredModel
from surrogate3d.learn.models import RidgeCorrection
from surrogate3d.learn.pairs_table import scene_table


def test_importance_finds_the_feature_the_model_uses(synthetic_pairs):
    # A model of one target that depends only on cloud_fraction: shuffling any other
    # feature costs nothing (Breiman 2001), shuffling cloud_fraction costs skill.
    pairs = synthetic_pairs.copy()
    cf = pairs["features"].sel(feature="cloud_fraction").values
    pairs["target_value"].loc[{"target": "toa_upward_flux"}] = 0.1 * cf
    model = RidgeCorrection(alpha=1e-6).fit_pairs(pairs, targets=["toa_upward_flux"])
    table = permutation_importance(ScoredModel.from_estimator("ridge", "ridge", model), pairs, ["toa_upward_flux"],
                                   n_repeats=2, seed=1).set_index("feature")
    assert table.loc["cloud_fraction", "importance"] > 0.5
    others = table.drop(index="cloud_fraction")["importance"]
    assert np.all(np.abs(others) < 1e-3)
    assert table["n_scenes"].iloc[0] == len(scene_table(pairs))


def test_scenes_are_added_alternating_regimes(synthetic_pairs):
    table = scene_table(synthetic_pairs)
    order = scene_order(synthetic_pairs, list(table), seed=0)
    assert sorted(order) == sorted(table)
    regimes = [table[s][0] for s in order]
    assert all(a != b for a, b in zip(regimes, regimes[1:]))
    assert subset_sizes(8, 4) == [2, 4, 6, 8] and subset_sizes(3, 5) == [1, 2, 3]


def test_learning_curve_ends_at_the_full_training_set(synthetic_pairs):
    table = scene_table(synthetic_pairs)
    scenes = list(table)
    training, held = scenes[:-2], scenes[-2:]
    evaluation = synthetic_pairs.isel(sample=np.flatnonzero(np.isin(synthetic_pairs["scene"].values.astype(str),
                                                                     held)))
    curve = learning_curve("ridge", {"alpha": 1.0, "interactions": True}, synthetic_pairs, training, evaluation,
                           list(synthetic_pairs["feature"].values), ["surface_downward_flux"], points=2,
                           consistency=False, quiet=True)
    assert list(curve["n_training_scenes"].unique()) == [3, 6]
    assert set(curve["target"]) == {"surface_downward_flux", "mean"}
    assert curve["skill"].between(-1.0, 1.0).all()
