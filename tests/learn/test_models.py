"""RidgeCorrection and BoostedCorrection against closed forms and known relations."""

import numpy as np
import pytest
from sklearn.base import clone
from sklearn.exceptions import NotFittedError

from surrogate3d.errors import ParameterError, ValidationError
from surrogate3d.learn.models import BoostedCorrection, RidgeCorrection, make_estimator
from surrogate3d.core.data_model import TARGETS

RNG = np.random.default_rng(42)


def test_ridge_recovers_a_linear_relation_exactly():
    # Noise-free linear data are reproduced exactly by least squares (alpha = 0); the
    # slopes in feature units are coef_ / feature_scale_ (Gauss-Markov, common practice).
    X = RNG.normal(size=(300, 3)) * [1.0, 5.0, 0.1] + [0.0, 10.0, -2.0]
    Y = np.column_stack([1.0 + 2.0 * X[:, 0] - 3.0 * X[:, 1] + 0.5 * X[:, 2], 4.0 - X[:, 1]])
    model = RidgeCorrection(alpha=0.0).fit(X, Y)
    np.testing.assert_allclose(model.predict(X), Y, atol=1e-10)
    np.testing.assert_allclose(model.coef_ / model.feature_scale_, [[2.0, -3.0, 0.5], [0.0, -1.0, 0.0]], atol=1e-10)


def test_ridge_matches_the_closed_form():
    # beta = (T'T + alpha I)^-1 T'y on centred terms, unpenalised intercept
    # (Hastie et al. 2009, eq. 3.44 and section 3.4.1).
    X = RNG.normal(size=(80, 4))
    Y = RNG.normal(size=(80, 2))
    alpha = 3.0
    model = RidgeCorrection(alpha=alpha, interactions=True).fit(X, Y)
    Z = (X - X.mean(0)) / X.std(0)
    T = np.column_stack([Z] + [Z[:, i] * Z[:, j] for i in range(4) for j in range(i + 1, 4)])
    Tc, Yc = T - T.mean(0), Y - Y.mean(0)
    beta = np.linalg.solve(Tc.T @ Tc + alpha * np.eye(T.shape[1]), Tc.T @ Yc)
    np.testing.assert_allclose(model.coef_, beta.T, rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(model.intercept_, Y.mean(0) - T.mean(0) @ beta, rtol=1e-9, atol=1e-12)


def test_ridge_prediction_is_the_documented_arithmetic():
    X = RNG.normal(size=(50, 3))
    model = RidgeCorrection(alpha=0.5, interactions=True).fit(X, RNG.normal(size=(50, 2)))
    Z = (X - model.feature_mean_) / model.feature_scale_
    terms = np.column_stack([Z] + [Z[:, i] * Z[:, j] for i, j in model.interaction_pairs_])
    assert model.interaction_pairs_ == [(0, 1), (0, 2), (1, 2)]
    assert model.coef_.shape == (2, 6) and model.intercept_.shape == (2,)
    np.testing.assert_array_equal(model.predict(X), model.intercept_ + terms @ model.coef_.T)
    assert model.term_names_ == ["x0", "x1", "x2", "x0*x1", "x0*x2", "x1*x2"]


def test_interactions_recover_a_product_term():
    # x0 x1 = (m0 + s0 z0)(m1 + s1 z1): the z0 z1 coefficient is s0 s1 (algebra).
    X = RNG.uniform(0.0, 2.0, size=(400, 3))
    y = X[:, 0] * X[:, 1] + X[:, 2]
    linear = RidgeCorrection(alpha=0.0).fit(X, y)
    product = RidgeCorrection(alpha=0.0, interactions=True).fit(X, y)
    assert np.sqrt(np.mean((linear.predict(X) - y) ** 2)) > 0.1
    np.testing.assert_allclose(product.predict(X), y, atol=1e-10)
    k = product.interaction_pairs_.index((0, 1)) + X.shape[1]
    np.testing.assert_allclose(product.coef_[0, k], product.feature_scale_[0] * product.feature_scale_[1], rtol=1e-9)
    assert product.predict(X).ndim == 1


def test_interaction_features_limit_the_products():
    # Products only among the listed features: x0 x2 is recovered exactly, the x0 x1 and
    # x1 x2 terms are absent (algebra, as in the test above).
    X = RNG.uniform(0.0, 2.0, size=(300, 3))
    y = X[:, 0] * X[:, 2] + X[:, 1]
    names = ["a", "b", "c"]
    model = RidgeCorrection(alpha=0.0, interactions=True, interaction_features=["c", "a"])
    model.fit(X, y, feature_names=names)
    assert model.interaction_pairs_ == [(0, 2)] and model.term_names_ == ["a", "b", "c", "a*c"]
    assert model.feature_names_ == names
    np.testing.assert_allclose(model.predict(X), y, atol=1e-10)
    by_index = RidgeCorrection(alpha=0.0, interactions=True, interaction_features=[2, 0]).fit(X, y)
    np.testing.assert_array_equal(by_index.coef_, model.coef_)
    ignored = RidgeCorrection(alpha=0.0, interaction_features=["a", "c"]).fit(X, y, feature_names=names)
    assert ignored.interaction_pairs_ == []
    with pytest.raises(ValidationError, match=r"interaction_features names \['d'\]"):
        RidgeCorrection(interactions=True, interaction_features=["a", "d"]).fit(X, y, feature_names=names)
    with pytest.raises(ValidationError, match="no feature_names"):
        RidgeCorrection(interactions=True, interaction_features=["a", "c"]).fit(X, y)
    with pytest.raises(ValidationError, match="column index 3"):
        RidgeCorrection(interactions=True, interaction_features=[0, 3]).fit(X, y)
    with pytest.raises(ValidationError, match="feature_names must name each of the 3 columns"):
        RidgeCorrection().fit(X, y, feature_names=["a", "b"])


def test_constant_feature_is_harmless():
    X = np.column_stack([RNG.normal(size=60), np.full(60, 7.0)])
    model = RidgeCorrection(alpha=0.0).fit(X, 3.0 * X[:, 0])
    assert model.feature_scale_[1] == 1.0
    np.testing.assert_allclose(model.predict(X), 3.0 * X[:, 0], atol=1e-10)


@pytest.mark.parametrize("spread", [0.0, 1e-17, 1e-15, 1e-12])
@pytest.mark.parametrize("interactions", [False, True])
def test_near_constant_feature_is_treated_as_constant(spread, interactions):
    # A feature that does not vary in training beyond round-off carries no information
    # (common practice): it gets scale 1, so another value of it, here a surface albedo of
    # 0.3 where training saw only 0.06, moves the prediction by its tiny coefficient only.
    # Standardized by its round-off spread instead, 0.3 became a term of order 1e13.
    n = 5000
    X = np.column_stack([RNG.normal(size=n), 0.06 + spread * RNG.normal(size=n), RNG.uniform(size=n)])
    Y = np.column_stack([X[:, 0] + X[:, 2] ** 2, -0.5 * X[:, 0]])
    model = RidgeCorrection(alpha=1.0, interactions=interactions).fit(X, Y)
    assert model.feature_scale_[1] == 1.0 and model.feature_scale_[0] != 1.0
    elsewhere = X.copy()
    elsewhere[:, 1] = 0.3
    np.testing.assert_allclose(model.predict(elsewhere), model.predict(X), rtol=0, atol=1e-9)


def test_boosted_fits_a_step():
    X = RNG.uniform(size=(1000, 2))
    Y = np.column_stack([np.where(X[:, 0] > 0.3, 1.0, -1.0), X[:, 1]])
    model = BoostedCorrection(max_iter=60, min_samples_leaf=5).fit(X, Y)
    probe = np.array([[0.1, 0.5], [0.25, 0.5], [0.35, 0.5], [0.9, 0.5]])
    np.testing.assert_allclose(model.predict(probe)[:, 0], [-1.0, -1.0, 1.0, 1.0], atol=0.02)
    assert len(model.estimators_) == 2


def _walk(predictor, x):
    nodes = predictor.nodes
    i = 0
    while not nodes["is_leaf"][i]:
        value = x[nodes["feature_idx"][i]]
        left = nodes["missing_go_to_left"][i] if np.isnan(value) else value <= nodes["num_threshold"][i]
        i = nodes["left"][i] if left else nodes["right"][i]
    return nodes["value"][i]


def test_boosted_tree_walk_reproduces_predict():
    # The attributes documented for the exporter give the same numbers as predict.
    X = RNG.normal(size=(300, 3))
    model = BoostedCorrection(max_iter=15, max_leaf_nodes=7).fit(X, np.column_stack([np.sin(X[:, 0]), X[:, 1] ** 2]))
    probe = RNG.normal(size=(20, 3))
    for m, estimator in enumerate(model.estimators_):
        manual = [estimator._baseline_prediction[0, 0] + sum(_walk(trees[0], x) for trees in estimator._predictors)
                  for x in probe]
        np.testing.assert_allclose(manual, model.predict(probe)[:, m], rtol=1e-12, atol=1e-12)


def test_boosted_is_reproducible():
    X = RNG.normal(size=(200, 2))
    y = X[:, 0] * X[:, 1]
    first = BoostedCorrection(max_iter=20).fit(X, y).predict(X)
    np.testing.assert_array_equal(first, BoostedCorrection(max_iter=20).fit(X, y).predict(X))


def test_scikit_learn_protocol():
    model = RidgeCorrection(alpha=2.0, interactions=True)
    assert clone(model).get_params() == {"alpha": 2.0, "interactions": True, "interaction_features": None,
                                         "clear_sky_features": None, "target_transforms": None}
    assert model.set_params(alpha=0.5).alpha == 0.5
    with pytest.raises(NotFittedError):
        model.predict(np.zeros((2, 2)))
    boosted = clone(BoostedCorrection(learning_rate=0.2))
    assert boosted.get_params()["learning_rate"] == 0.2 and boosted.get_params()["random_state"] == 0
    X = RNG.normal(size=(40, 2))
    fitted = RidgeCorrection().fit(X, X)
    assert fitted.score(X, X) > 0.5  # RegressorMixin R2
    with pytest.raises(ValidationError, match="expecting 2 features"):
        fitted.predict(np.zeros((3, 5)))


@pytest.mark.parametrize("kind, params, words", [
    ("ridge", {"alpha": -1.0}, ["alpha", "[0, inf)", "-1.0"]),
    ("ridge", {"interactions": "yes"}, ["interactions", "'yes'"]),
    ("ridge", {"interaction_features": ["cloud_fraction"]}, ["interaction_features", "at least two"]),
    ("ridge", {"interaction_features": "cloud_fraction"}, ["interaction_features", "'cloud_fraction'"]),
    ("ridge", {"interaction_features": ["a", "a"]}, ["interaction_features", "distinct"]),
    ("ridge", {"interaction_features": ["a", 1]}, ["interaction_features"]),
    ("ridge", {"interaction_features": [0, -1]}, ["interaction_features", ">= 0"]),
    ("boosted", {"learning_rate": 0.0}, ["learning_rate", "(0, 1]"]),
    ("boosted", {"learning_rate": 1.5}, ["learning_rate", "1.5"]),
    ("boosted", {"max_iter": 0}, ["max_iter", "an integer >= 1"]),
    ("boosted", {"max_iter": 2.5}, ["max_iter", "integer"]),
    ("boosted", {"max_leaf_nodes": 1}, ["max_leaf_nodes", "an integer >= 2"]),
    ("boosted", {"min_samples_leaf": 0}, ["min_samples_leaf"]),
    ("boosted", {"l2_regularization": -0.1}, ["l2_regularization"]),
    ("boosted", {"random_state": -3}, ["random_state"]),
    ("boosted", {"depth": 3}, ["depth", "allowed"]),
    ("boosted", {"clear_sky_features": "cloud_fraction"}, ["clear_sky_features", "'cloud_fraction'"]),
    ("ridge", {"clear_sky_features": ["a", "a"]}, ["clear_sky_features", "distinct"]),
    ("ridge", {"clear_sky_features": ["a", 0]}, ["clear_sky_features"]),
    ("boosted", {"clear_sky_features": [-2]}, ["clear_sky_features", ">= 0"]),
    ("forest", {}, ["kind", "'forest'"]),
])
def test_bad_parameters_are_named(kind, params, words):
    with pytest.raises(ParameterError) as info:
        make_estimator(kind, params)
    for word in words:
        assert word in str(info.value)


def test_fit_checks_parameters_and_arrays():
    with pytest.raises(ParameterError, match="alpha"):
        RidgeCorrection(alpha=float("nan")).fit(np.zeros((3, 1)), np.zeros(3))
    with pytest.raises(ValidationError, match=r"X must be free of NaN and inf; got inf \(at sample 1, column 0\)"):
        RidgeCorrection().fit([[0.0], [np.inf], [1.0]], [0.0, 1.0, 2.0])
    with pytest.raises(ValidationError, match=r"Y has shape \(2,\)"):
        BoostedCorrection().fit(np.zeros((3, 1)), np.zeros(2))
    with pytest.raises(ValidationError, match="1 sample"):
        RidgeCorrection().fit(np.zeros((1, 2)), np.zeros(1))


@pytest.mark.filterwarnings("ignore::sklearn.exceptions.SkipTestWarning")
@pytest.mark.parametrize("estimator", [RidgeCorrection(interactions=True), BoostedCorrection(max_iter=5),
                                       RidgeCorrection(clear_sky_features=[0]),
                                       BoostedCorrection(max_iter=5, clear_sky_features=[0])],
                         ids=["ridge", "boosted", "gated-ridge", "gated-boosted"])
def test_scikit_learn_estimator_checks(estimator):
    # scikit-learn's own API conformance checks (common practice for new estimators).
    from sklearn.utils.estimator_checks import check_estimator

    failed = [r for r in check_estimator(estimator, on_fail=None) if r["status"] == "failed"]
    assert not failed, [(r["check_name"], str(r["exception"])[:200]) for r in failed]


def test_pairs_interface(synthetic_pairs):
    model = RidgeCorrection(interactions=True).fit_pairs(synthetic_pairs)
    assert model.feature_names_ == [str(f) for f in synthetic_pairs["feature"].values]
    assert model.target_names_ == list(TARGETS)
    assert model.term_names_[-1] == "cloud_edge_distance*surface_albedo"
    assert model.predict_pairs(synthetic_pairs).shape == (synthetic_pairs.sizes["sample"], 5)
    fewer = synthetic_pairs.drop_sel(feature=["cloud_edge_distance"])
    with pytest.raises(ValidationError, match=r"lacks features \['cloud_edge_distance'\]"):
        model.predict_pairs(fewer)
    with pytest.raises(ValidationError, match="fit_pairs"):
        RidgeCorrection().fit(np.zeros((3, 1)) + [[0.0], [1.0], [2.0]], np.zeros(3)).predict_pairs(synthetic_pairs)
    subset = BoostedCorrection(max_iter=10).fit_pairs(synthetic_pairs, features=["cloud_fraction"],
                                                      targets=["toa_upward_flux"])
    assert subset.predict_pairs(fewer).shape == (fewer.sizes["sample"], 1)


def _gated_data(n=400):
    # Columns 0 and 1 are "cloud amounts": a quarter of the samples have both exactly 0.
    X = RNG.uniform(size=(n, 3))
    X[: n // 4, :2] = 0.0
    X[n // 4: n // 4 + 10, 0] = 0.0          # one gate feature zero is not enough
    Y = np.column_stack([X[:, 0] + X[:, 1] * X[:, 2], 0.5 - X[:, 2]])
    return X, Y, np.arange(n) < n // 4


@pytest.mark.parametrize("model", [RidgeCorrection(alpha=0.1, interactions=True), BoostedCorrection(max_iter=30)],
                         ids=["ridge", "boosted"])
def test_clear_sky_gate_zeroes_gated_samples_only(model):
    # No cloud in or near a column, no 3D effect (common practice): the gate predicts exactly 0
    # there; elsewhere the gated model is the model fitted on the ungated samples alone.
    X, Y, clear = _gated_data()
    gated = clone(model).set_params(clear_sky_features=[0, 1]).fit(X, Y)
    assert gated.clear_sky_indices_ == [0, 1] and gated.clear_sky_tolerance_ == 1e-9
    np.testing.assert_array_equal(gated.clear_sky_mask(X), clear)
    predicted = gated.predict(X)
    assert np.all(predicted[clear] == 0.0) and np.all(predicted[~clear] != 0.0)
    alone = clone(model).fit(X[~clear], Y[~clear])
    np.testing.assert_array_equal(predicted[~clear], alone.predict(X[~clear]))
    # |x| within the tolerance is zero; beyond it is not.
    edge = X[:2].copy()
    edge[0, 0], edge[1, 0] = -1e-9, 2e-9
    assert gated.clear_sky_mask(edge).tolist() == [True, False]


def test_fit_ignores_gated_samples():
    # The targets of gated samples (noise around 0 in the benchmarks) cannot bend the fit.
    X, Y, clear = _gated_data()
    Y_other = Y.copy()
    Y_other[clear] = RNG.normal(scale=10.0, size=Y[clear].shape)
    for model in (RidgeCorrection(alpha=1.0, interactions=True, clear_sky_features=[1, 0]),
                  BoostedCorrection(max_iter=20, clear_sky_features=[0, 1])):
        a, b = clone(model).fit(X, Y), clone(model).fit(X, Y_other)
        np.testing.assert_array_equal(a.predict(X), b.predict(X))
    ridge = RidgeCorrection(clear_sky_features=[0, 1]).fit(X, Y)
    np.testing.assert_array_equal(ridge.feature_mean_, X[~clear].mean(axis=0))


def test_clear_sky_gate_by_name_and_errors(synthetic_pairs):
    names = ["cloud_fraction", "upsun_cloud_fraction", "neighbour_cloud_fraction"]
    model = BoostedCorrection(max_iter=5, clear_sky_features=names).fit_pairs(synthetic_pairs)
    features = [str(f) for f in synthetic_pairs["feature"].values]
    assert model.clear_sky_indices_ == [features.index(n) for n in names]
    X, Y, _ = _gated_data(40)
    with pytest.raises(ValidationError, match=r"clear_sky_features names \['liquid_path'\]"):
        RidgeCorrection(clear_sky_features=["liquid_path"]).fit(X, Y, feature_names=["a", "b", "c"])
    with pytest.raises(ValidationError, match="clear_sky_features names features .* no feature_names"):
        RidgeCorrection(clear_sky_features=["a"]).fit(X, Y)
    with pytest.raises(ValidationError, match="clear_sky_features holds column index 3; X has 3 columns"):
        BoostedCorrection(clear_sky_features=[3]).fit(X, Y)
    with pytest.raises(ValidationError, match="gate 40 of the 40 samples"):
        RidgeCorrection(clear_sky_features=[0]).fit(np.zeros((40, 3)), Y)
    ungated = RidgeCorrection(clear_sky_features=[]).fit(X, Y)
    assert ungated.clear_sky_indices_ == [] and not ungated.clear_sky_mask(np.zeros((2, 3))).any()
