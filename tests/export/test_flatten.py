"""Flattened estimators reproduce scikit-learn's own predictions.

Reference: scikit-learn's HistGradientBoostingRegressor.predict and the closed-form
ridge prediction of RidgeCorrection (Pedregosa et al. 2011, scikit-learn: machine
learning in Python, JMLR 12); the flattened arrays are evaluated by the numpy runtime.
"""

import numpy as np
import pytest
from sklearn.ensemble import HistGradientBoostingRegressor

from surrogate3d.errors import ValidationError
from surrogate3d.export.flatten import flatten, ridge_arrays, tree_arrays
from surrogate3d.learn.models import BoostedCorrection, RidgeCorrection
from surrogate3d.runtime.ridge import RidgeModel
from surrogate3d.runtime.trees import TreeEnsemble


def _boosted_with(regressors, n_feature):
    model = BoostedCorrection()
    model.estimators_, model.n_features_in_, model._one_column = regressors, n_feature, False
    return model


@pytest.fixture(scope="module")
def nan_trained():
    """Ensembles fitted on data with missing values, so NaN goes left at some nodes and right at others."""
    rng = np.random.default_rng(4)
    X = rng.normal(size=(500, 4))
    Y = np.column_stack([np.sin(2 * X[:, 0]) + X[:, 1] * X[:, 2], np.abs(X[:, 3]) - X[:, 0]])
    X[rng.uniform(size=X.shape) < 0.15] = np.nan
    Y[np.isnan(X[:, 1]), 0] += 3.0                   # missingness that matters, so splits route it
    regressors = [HistGradientBoostingRegressor(max_iter=30, max_leaf_nodes=11, min_samples_leaf=5,
                                                early_stopping=False, random_state=0).fit(X, Y[:, m])
                  for m in range(2)]
    return _boosted_with(regressors, 4)


def _probe_inputs(arrays, n, rng):
    """Random inputs with NaN, infinities and values exactly at thresholds."""
    X = rng.normal(scale=1.5, size=(n, 4))
    at = rng.uniform(size=X.shape) < 0.3
    finite = arrays["threshold_values"][np.isfinite(arrays["threshold_values"])]
    X[at] = rng.choice(finite, at.sum())
    X[rng.uniform(size=X.shape) < 0.1] = np.nan
    X[rng.uniform(size=X.shape) < 0.02] = np.inf
    X[rng.uniform(size=X.shape) < 0.02] = -np.inf
    return X


def test_trees_reproduce_histgb_bitwise_with_nan_and_ties(nan_trained):
    arrays = tree_arrays(nan_trained)
    missing = arrays["missing_go_left"][arrays["feature"] >= 0]
    assert 0 < missing.sum() < missing.size                   # both NaN routes occur
    X = _probe_inputs(arrays, 4000, np.random.default_rng(0))
    expected = np.column_stack([r.predict(X) for r in nan_trained.estimators_])
    got = TreeEnsemble(4, **arrays).predict(X)
    # Same leaves, same order of additions: the sums agree to the last bit (required: 1e-12 relative).
    np.testing.assert_array_equal(got, expected)


def test_tie_goes_left_at_every_internal_node(nan_trained):
    # x <= threshold goes left (scikit-learn's _predictor.pyx): a column equal to a node's
    # threshold on that node's feature follows it left, one node at a time.
    arrays = tree_arrays(nan_trained)
    internal = np.flatnonzero(arrays["feature"] >= 0)[:200]
    X = np.zeros((internal.size, 4))
    thresholds = arrays["threshold_values"][arrays["threshold_index"][internal]]
    X[np.arange(internal.size), arrays["feature"][internal]] = thresholds
    expected = np.column_stack([r.predict(X) for r in nan_trained.estimators_])
    np.testing.assert_array_equal(TreeEnsemble(4, **arrays).predict(X), expected)


def test_tree_arrays_layout(nan_trained):
    arrays = tree_arrays(nan_trained)
    n_tree = sum(len(r._predictors) for r in nan_trained.estimators_)
    assert arrays["tree_target"].size == n_tree and arrays["tree_offset"][-1] == arrays["feature"].size
    leaf = arrays["feature"] == -1
    assert arrays["leaf_value"].size == leaf.sum() and np.all(arrays["left"][leaf] == -1)
    assert np.all(np.diff(arrays["threshold_values"]) > 0)
    # Integers in the smallest type that holds them (compact files).
    assert arrays["feature"].dtype == np.int8 and arrays["left"].dtype == np.int8
    np.testing.assert_array_equal(arrays["baseline"], [r._baseline_prediction.item() for r in nan_trained.estimators_])


def test_boosted_correction_and_ridge_reproduced():
    rng = np.random.default_rng(1)
    X = rng.uniform(-1, 1, size=(300, 3))
    Y = np.column_stack([X[:, 0] * X[:, 1], np.exp(X[:, 2]), X.sum(axis=1)])
    boosted = BoostedCorrection(max_iter=20, max_leaf_nodes=7, min_samples_leaf=5).fit(X, Y)
    ridge = RidgeCorrection(alpha=0.1, interactions=True).fit(X, Y)
    probe = rng.uniform(-1.5, 1.5, size=(1000, 3))
    np.testing.assert_array_equal(TreeEnsemble(3, **tree_arrays(boosted)).predict(probe), boosted.predict(probe))
    scale = np.abs(ridge.predict(probe)).max()

    def clip(model):  # the probe reaches beyond the training range, where the ridge holds features at its edge
        return {"clip_min": model.envelope_.feature_min, "clip_max": model.envelope_.feature_max}

    np.testing.assert_allclose(RidgeModel(**ridge_arrays(ridge), **clip(ridge)).predict(probe), ridge.predict(probe),
                               rtol=0, atol=1e-12 * scale)
    plain = RidgeCorrection(alpha=1.0).fit(X, Y)
    assert ridge_arrays(plain)["interaction_pairs"].shape == (0, 2)
    np.testing.assert_allclose(RidgeModel(**ridge_arrays(plain), **clip(plain)).predict(probe), plain.predict(probe),
                               rtol=1e-12, atol=1e-15)


def test_flatten_refuses_what_the_format_cannot_hold():
    rng = np.random.default_rng(2)
    X = rng.uniform(size=(200, 2))
    y = 1.0 + X[:, 0]
    poisson = HistGradientBoostingRegressor(loss="poisson", max_iter=3).fit(X, y)
    with pytest.raises(ValidationError, match="identity link"):
        tree_arrays(_boosted_with([poisson], 2))
    Xc = np.column_stack([rng.integers(0, 4, 200), X[:, 1]]).astype(float)
    categorical = HistGradientBoostingRegressor(categorical_features=[0], max_iter=3).fit(Xc, Xc[:, 0] ** 2)
    with pytest.raises(ValidationError, match="categorical"):
        tree_arrays(_boosted_with([categorical], 2))
    with pytest.raises(ValidationError, match="fitted BoostedCorrection"):
        tree_arrays(BoostedCorrection())
    with pytest.raises(ValidationError, match="cannot export"):
        flatten(poisson)
