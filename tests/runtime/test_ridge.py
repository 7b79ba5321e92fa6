"""The ridge evaluator against the term-by-term formula of the coefficient format.

Reference: the prediction formula of docs/export-format.md (standardized features,
linear terms, then one product term per interaction pair), evaluated term by term; the
trained model's own arithmetic (Hoerl and Kennard 1970 for the estimator).
"""

import numpy as np
import pytest

from surrogate3d.runtime.ridge import RidgeModel


def _term_by_term(X, mean, scale, pairs, coef, intercept):
    Z = (X - mean) / scale
    terms = np.column_stack([Z] + [Z[:, i] * Z[:, j] for i, j in pairs]) if len(pairs) else Z
    return intercept + terms @ coef.T


@pytest.mark.parametrize("pairs", [[], [(0, 3)], [(1, 2), (0, 4), (2, 4)],
                                   [(i, j) for i in range(5) for j in range(i + 1, 5)]],
                         ids=["none", "one", "some", "all"])
def test_quadratic_form_equals_the_term_sum(pairs):
    rng = np.random.default_rng(len(pairs))
    n_feature, n_target = 5, 3
    mean, scale = rng.normal(size=n_feature), rng.uniform(0.5, 2.0, n_feature)
    coef = rng.normal(size=(n_target, n_feature + len(pairs)))
    intercept = rng.normal(size=n_target)
    model = RidgeModel(mean, scale, np.array(pairs, dtype=np.int64).reshape(-1, 2), coef, intercept)
    X = rng.normal(size=(2500, n_feature))          # more than one block of columns
    expected = _term_by_term(X, mean, scale, pairs, coef, intercept)
    # Only the order of the additions differs: agreement to rounding (1e-12 relative).
    np.testing.assert_allclose(model.predict(X), expected, rtol=1e-12, atol=1e-12 * np.abs(expected).max())


def test_exported_model_has_the_pairs_of_its_interaction_features(built, run):
    from surrogate3d.runtime import load_coefficients

    model = load_coefficients(built["export_dir"] / "ridge.coefficients.json")
    chosen = run.models["ridge"].card["hyperparameters"]["interaction_features"]
    index = sorted(model.feature_names.index(name) for name in chosen)
    expected = [(i, j) for a, i in enumerate(index) for j in index[a + 1:]]
    assert model.document["ridge"]["interaction_pairs"].tolist() == [list(p) for p in expected]
    assert model.document["model"]["hyperparameters"]["interaction_features"] == chosen


def test_round_off_scale_of_an_older_file_is_harmless():
    # Files written before format 1.2 may store the round-off spread of a feature that was
    # constant in training as its scale (the ridge shipped with 0.1.0: 0.06 +- 1.4e-14 for
    # the surface albedo).  Its standardized value is clipped to [-1, 1], the values its
    # training samples had: the training value predicts as written, any other value moves
    # the prediction by at most |coef| of that term.
    rng = np.random.default_rng(3)
    mean = np.array([0.5, 0.059999999999986266, -1.0])
    scale = np.array([0.2, 1.3704315460216776e-14, 2.0])
    pairs = np.array([[0, 1], [1, 2]])
    coef = rng.normal(size=(2, 5)) * [1.0, 1e-14, 1.0, 1e-14, 1e-14]
    intercept = rng.normal(size=2)
    model = RidgeModel(mean, scale, pairs, coef, intercept)
    X = np.column_stack([rng.normal(0.5, 0.2, 100), np.full(100, 0.06), rng.normal(-1.0, 2.0, 100)])
    expected = _term_by_term(X, mean, scale, pairs, coef, intercept)
    np.testing.assert_allclose(model.predict(X), expected, rtol=1e-12, atol=1e-15)
    elsewhere = X.copy()
    elsewhere[:, 1] = 0.3
    assert np.abs(_term_by_term(elsewhere, mean, scale, pairs, coef, intercept)).max() > 1e-3   # unclipped: blown up
    np.testing.assert_allclose(model.predict(elsewhere), expected, rtol=0, atol=1e-12)
