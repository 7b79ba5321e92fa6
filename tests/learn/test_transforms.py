"""Target transforms: scaled and offset residuals in both learners."""

import numpy as np
import pytest

from surrogate3d.errors import ParameterError, ValidationError
from surrogate3d.learn.models import BoostedCorrection, RidgeCorrection, make_estimator

RNG = np.random.default_rng(12)
NAMES = ["absorption_ica", "prior", "x"]


def data(n=400):
    X = np.column_stack([RNG.uniform(0.0, 0.2, n), RNG.normal(0.0, 0.1, n), RNG.normal(size=n)])
    X[: n // 4, 0] = 0.0  # a quarter of the columns absorb nothing
    # A relative 3D change of the absorption (linear in x), and a direct correction that
    # is the prior plus a small residual.
    Y = np.column_stack([X[:, 0] * (0.1 + 0.05 * X[:, 2]), X[:, 1] + 0.01 * X[:, 2]])
    return X, Y


TRANSFORMS = [{"scale_feature": "absorption_ica", "scale_floor": 1e-6}, {"offset_features": {"prior": 1.0}}]


@pytest.mark.parametrize("cls, params", [(RidgeCorrection, {"alpha": 1e-10}),
                                         (BoostedCorrection, {"max_iter": 200, "learning_rate": 0.3})])
def test_scaled_target_vanishes_without_absorption_and_offset_keeps_the_prior(cls, params):
    X, Y = data()
    model = cls(target_transforms=TRANSFORMS, **params).fit(X, Y, feature_names=NAMES)
    P = model.predict(X)
    # A correction proportional to the absorption there is: none where nothing absorbs
    # (the residual is multiplied by the floor, 1e-6 of a fraction of the incident flux).
    assert np.abs(P[X[:, 0] == 0.0, 0]).max() < 1e-5
    assert np.sqrt(np.mean((P - Y) ** 2, axis=0)).max() < 0.25 * Y.std(axis=0).min()
    # With strong shrinkage the learned residual is (nearly) constant: the prior survives.
    strong = cls(target_transforms=TRANSFORMS, **({"alpha": 1e9} if cls is RidgeCorrection else
                                                  {"max_iter": 1, "learning_rate": 1e-6})).fit(X, Y, feature_names=NAMES)
    np.testing.assert_allclose(strong.predict(X)[:, 1], X[:, 1] + Y[:, 1].mean() - X[:, 1].mean(), atol=2e-3)


@pytest.mark.parametrize("cls, params", [(RidgeCorrection, {"alpha": 1e-3}), (BoostedCorrection, {"max_iter": 50})])
def test_outside_the_envelope_a_target_can_fall_back_to_its_offset(cls, params):
    # Where the learned residual would extrapolate (a column outside the training envelope),
    # a target whose transform says outside_envelope = "offset" gets its physical prior alone;
    # inside the envelope, and for the other targets, nothing changes.
    X, Y = data()
    fallback = [TRANSFORMS[0], {**TRANSFORMS[1], "outside_envelope": "offset"}]
    plain = cls(target_transforms=TRANSFORMS, **params).fit(X, Y, feature_names=NAMES)
    model = cls(target_transforms=fallback, **params).fit(X, Y, feature_names=NAMES)
    far = X[:20].copy()
    far[:, 2] = 50.0                                        # far beyond the training range of x
    np.testing.assert_array_equal(model.envelope_check(far).outside, True)
    np.testing.assert_array_equal(model.predict(far)[:, 1], far[:, 1])          # the prior, exactly
    np.testing.assert_array_equal(model.predict(far)[:, 0], plain.predict(far)[:, 0])
    inside = ~model.envelope_check(X).outside
    np.testing.assert_array_equal(model.predict(X)[inside], plain.predict(X)[inside])


def test_relative_fit_weighs_every_sample_alike():
    # Two groups whose relative corrections differ: fitting the errors of the correction
    # (weights scale**2) follows the large-scale group, fitting relative errors (weights 1)
    # the larger group; a constant residual model (huge alpha) shows it plainly: the
    # weighted mean (common practice).
    s = np.r_[np.full(300, 0.01), np.full(100, 1.0)]
    X = np.column_stack([s, RNG.normal(size=s.size)])
    y = s * np.r_[np.full(300, 0.5), np.full(100, -0.5)]
    spec = {"scale_feature": "s", "scale_floor": 1e-3}
    absolute = RidgeCorrection(alpha=1e12, target_transforms=[spec]).fit(X, y, feature_names=["s", "x"])
    relative = RidgeCorrection(alpha=1e12, target_transforms=[{**spec, "fit_errors": "relative"}]).fit(
        X, y, feature_names=["s", "x"])
    assert absolute.intercept_[0] == pytest.approx((300 * 1e-4 * 0.5 - 100 * 0.5) / (300 * 1e-4 + 100), abs=1e-6)
    assert relative.intercept_[0] == pytest.approx(0.25, abs=1e-6)


def test_weighted_ridge_recovers_an_exact_linear_residual():
    # y = s (a + b x): least squares on the weighted residual recovers a and b exactly,
    # whatever the weights (a linear model of a linear truth; common practice).
    X, _ = data()
    s = np.maximum(X[:, 0], 1e-3)
    y = s * (0.3 - 2.0 * X[:, 2])
    model = RidgeCorrection(alpha=0.0, target_transforms=[{"scale_feature": "absorption_ica", "scale_floor": 1e-3}])
    model.fit(X, y, feature_names=NAMES)
    np.testing.assert_allclose(model.predict(X), y, atol=1e-12)


@pytest.mark.parametrize("transforms, words", [
    ("absorption", ["target_transforms", "one entry"]),
    ([{"scale": "x"}], ["target_transforms[0]", "scale_feature"]),
    ([{"scale_feature": "x", "scale_floor": -1.0}], ["scale_floor", "in [0, inf)", "-1.0"]),
    ([{"offset_features": {"x": "one"}}], ["offset_features", "finite number"]),
    ([{"scale_feature": "x", "fit_errors": "squared"}], ["fit_errors", "relative", "'squared'"]),
    ([{"offset_features": {"x": 1.0}, "outside_envelope": "zero"}], ["outside_envelope", "learned, offset", "'zero'"]),
])
def test_bad_transforms_are_refused_with_the_entry_named(transforms, words):
    with pytest.raises(ParameterError) as info:
        make_estimator("ridge", {"target_transforms": transforms})
    for word in words:
        assert word in str(info.value)


def test_transforms_must_fit_the_features_and_targets():
    X, Y = data()
    with pytest.raises(ValidationError, match="not among the model's features"):
        RidgeCorrection(target_transforms=[{"scale_feature": "nope"}, None]).fit(X, Y, feature_names=NAMES)
    with pytest.raises(ValidationError, match="2 targets"):
        RidgeCorrection(target_transforms=[None]).fit(X, Y, feature_names=NAMES)
    with pytest.raises(ValidationError, match="scale_floor > 0"):
        RidgeCorrection(target_transforms=[{"scale_feature": "absorption_ica"}, None]).fit(X, Y, feature_names=NAMES)


#: A recipe whose absorption target is scaled by the independent-column absorption, with a ridge
#: model last (so that a test may add tables of that model).
RECIPE_WITH_TRANSFORM = """
targets = ["surface_downward_direct_flux", "atmosphere_absorption"]
[target_transforms.atmosphere_absorption]
scale_feature = "independent_column_atmosphere_absorption"
scale_floor = 1e-4
[models.ridge]
kind = "ridge"
alpha = [1.0, 10.0]
"""


def test_recipe_target_transforms_reach_every_model():
    from surrogate3d.learn.recipe import parse_recipe

    text = RECIPE_WITH_TRANSFORM
    recipe = parse_recipe(text)
    assert recipe.target_transforms == (None, {"scale_feature": "independent_column_atmosphere_absorption",
                                               "scale_floor": 1e-4})
    params = recipe.model_parameters({"alpha": 10.0})
    assert params["alpha"] == 10.0 and params["target_transforms"][1]["scale_floor"] == 1e-4
    with pytest.raises(ParameterError, match=r"\[target_transforms.atmosphere_absorption\]\['scale_floor'\]"):
        parse_recipe(text.replace("1e-4", "-1.0"))
    with pytest.raises(ParameterError, match="unknown keys"):
        parse_recipe(text.replace("[target_transforms.atmosphere_absorption]", "[target_transforms.toa_upward_flux]"))


def test_a_model_of_a_recipe_may_have_its_own_target_transforms():
    # The ridge alone falls back to the offset outside its envelope; the boosted model keeps
    # the recipe's transforms (docs/methods/models-and-metrics.md, "Target transforms").
    from surrogate3d.learn.recipe import parse_recipe

    text = RECIPE_WITH_TRANSFORM + """[models.ridge.target_transforms.atmosphere_absorption]
scale_feature = "independent_column_atmosphere_absorption"
scale_floor = 1e-4
outside_envelope = "offset"
[models.boosted]
kind = "boosted"
"""
    recipe = parse_recipe(text)
    ridge, boosted = recipe.models
    assert ridge.grid == {"alpha": [1.0, 10.0]}
    assert recipe.model_parameters({"alpha": 1.0}, ridge)["target_transforms"][1]["outside_envelope"] == "offset"
    assert "outside_envelope" not in recipe.model_parameters({}, boosted)["target_transforms"][1]
    assert "outside_envelope" not in recipe.model_parameters({})["target_transforms"][1]
    with pytest.raises(ParameterError, match=r"\[models.ridge.target_transforms.atmosphere_absorption\]"
                                             r"\['outside_envelope'\]"):
        parse_recipe(text.replace('"offset"', '"zero"'))
    with pytest.raises(ParameterError, match=r"\[models.ridge.target_transforms\].*unknown keys"):
        parse_recipe(text.replace("[models.ridge.target_transforms.atmosphere_absorption]",
                                  "[models.ridge.target_transforms.toa_upward_flux]"))
