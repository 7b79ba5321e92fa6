"""Scene-grouped splits and the hyperparameter search."""

import numpy as np
import pytest

from surrogate3d.errors import ValidationError
from surrogate3d.learn.cv import correction_skill, family_splits, grid_search, scene_folds, split_scenes
from surrogate3d.learn.models import RidgeCorrection
from surrogate3d.learn.pairs_table import scene_labels, scene_table


def test_held_out_scenes_never_leak(synthetic_pairs):
    split = split_scenes(synthetic_pairs, 0.25, seed=5)
    table = scene_table(synthetic_pairs)
    assert set(split.training_scenes).isdisjoint(split.held_out_scenes)
    assert set(split.training_scenes) | set(split.held_out_scenes) == set(table)
    # Every regime gives one of its four seeds (0.25 x 4), and keeps training scenes.
    for regime in ("sparse", "dense"):
        held = [s for s in split.held_out_scenes if table[s][0] == regime]
        assert len(held) == 1
    assert split == split_scenes(synthetic_pairs, 0.25, seed=5)
    assert split_scenes(synthetic_pairs, 0.0).held_out_scenes == []


def test_left_out_family_is_absent_from_its_training(synthetic_pairs):
    split = split_scenes(synthetic_pairs, 0.25, seed=1)
    table = scene_table(synthetic_pairs)
    splits = family_splits(synthetic_pairs, split.training_scenes, ["dense", "sparse"])
    assert [s.family for s in splits] == ["dense", "sparse"]
    for family in splits:
        assert family.training_scenes and all(table[s][0] != family.family for s in family.training_scenes)
        assert set(family.training_scenes) <= set(split.training_scenes)
        # Every scene of the family is tested, training and held-out scenes alike.
        assert sorted(family.test_scenes) == sorted(s for s in table if table[s][0] == family.family)
    with pytest.raises(ValidationError, match="'cirrus' is not a regime"):
        family_splits(synthetic_pairs, split.training_scenes, ["cirrus"])
    only_dense = [s for s in split.training_scenes if table[s][0] == "dense"]
    with pytest.raises(ValidationError, match="leaves no training scene"):
        family_splits(synthetic_pairs, only_dense, ["dense"])


def test_cv_folds_keep_scenes_together(synthetic_pairs):
    # Grouped K-fold: every scene is tested exactly once and never trained on in the same
    # fold (Hastie et al. 2009, section 7.10; grouping as in Roberts et al. 2017).
    scenes = scene_labels(synthetic_pairs)
    folds = scene_folds(scenes, 3)
    assert len(folds) == 3
    tested = []
    for train, test in folds:
        assert set(scenes[train]).isdisjoint(scenes[test])
        assert train.size + test.size == scenes.size
        tested += sorted(set(scenes[test]))
    assert sorted(tested) == sorted(set(scenes))
    assert len(scene_folds(scenes, 50)) == len(set(scenes))
    with pytest.raises(ValidationError, match="at least 2 groups"):
        scene_folds(np.array(["a", "a"]), 3)


def test_skill_of_perfect_and_of_no_correction():
    true = np.random.default_rng(0).normal(size=(100, 2))
    np.testing.assert_array_equal(correction_skill(true, true), [1.0, 1.0])
    np.testing.assert_array_equal(correction_skill(np.zeros_like(true), true), [0.0, 0.0])


def test_search_prefers_light_penalty_on_noise_free_linear_data():
    rng = np.random.default_rng(2)
    X = rng.normal(size=(300, 3))
    # Every scene spans the same range, so that no fold's ridge holds a feature at the edge of
    # its training range (beyond it a ridge clips the feature, which no linear law survives).
    X[::50] = 4.0
    X[1::50] = -4.0
    Y = X @ [[1.0], [-2.0], [0.5]]
    scenes = np.repeat(np.arange(6), 50).astype(str)
    result = grid_search(RidgeCorrection(), [{"alpha": 1e5}, {"alpha": 1e-6}], X, Y, scenes, 3, quiet=True)
    assert result.best_params == {"alpha": 1e-6}
    assert result.best_score == pytest.approx(1.0, abs=1e-6)
    assert result.folds == 3 and len(result.scores[0]["fold_skill"]) == 3
