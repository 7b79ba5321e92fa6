"""The exported heating-rate (profile) model in the numpy runtime: the same layers as the trained
model, energy matched to a column correction, clear errors."""

import numpy as np
import pytest

from surrogate3d.core.pairs_table import read_pairs
from surrogate3d.errors import ParameterError, ValidationError
from surrogate3d.learn.pairs_table import feature_matrix
from surrogate3d.learn.profile_model import layer_fields
from surrogate3d.runtime import load_coefficients


@pytest.fixture(scope="module")
def exported(built, run):
    model = load_coefficients(built["export_dir"] / "profile.coefficients.json")
    pairs = read_pairs(built["pairs_file"]).isel(sample=slice(0, 300))
    X = feature_matrix(pairs, run.profile.card["feature_names"])
    return model, run.profile.estimator, X, layer_fields(pairs)


def test_runtime_profile_equals_the_trained_model(exported):
    model, estimator, X, fields = exported
    assert model.column_feature_names + model.layer_feature_names == model.feature_names
    assert model.target_names == ["layer_absorption_density"]
    np.testing.assert_allclose(model.predict_profile(X, fields, check_envelope=False), estimator.predict(X, fields),
                               rtol=1e-12, atol=1e-15)


def test_runtime_profile_sums_to_the_column_correction(exported):
    # Energy conservation to round-off (the heating-rate issue's requirement).
    model, _, X, fields = exported
    column = np.linspace(-0.01, 0.01, X.shape[0])
    layers = model.predict_profile(X, fields, column, check_envelope=False)
    np.testing.assert_allclose(np.nansum(layers, axis=1), column, rtol=0, atol=1e-16)


def test_bad_layer_fields_and_column_models_are_named(exported, built):
    model, _, X, fields = exported
    with pytest.raises(ParameterError, match="layer fields lack \\['slant_optical_depth_above'\\]"):
        model.predict_profile(X, {k: v for k, v in fields.items() if k != "slant_optical_depth_above"})
    flipped = dict(fields, top=fields["bottom"].copy())
    with pytest.raises(ParameterError, match="top must exceed bottom in every layer; column 0, layer 0"):
        model.predict_profile(X, flipped)
    with pytest.raises(ValidationError, match="column_features must have shape"):
        model.predict_profile(X[:, :2], fields)
    column_model = load_coefficients(built["export_dir"] / "boosted.coefficients.json")
    with pytest.raises(ValidationError, match="is a column model"):
        column_model.predict_profile(X, fields)
