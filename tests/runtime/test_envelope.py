"""The training envelope: ranges and the Mahalanobis distance against their definitions.

References: the Mahalanobis distance sqrt(z' C^-1 z) (Mahalanobis 1936), computed here by
inverting the covariance matrix directly; the covariance of probabilistic principal
component analysis, C = V_r L_r V_r' + s^2 (I - V_r V_r'), with s^2 the mean of the
discarded eigenvalues (Tipping and Bishop 1999, eq. 7-8); for Gaussian data the squared
distance follows a chi-squared law with n_feature degrees of freedom, so a threshold at
the 0.99 quantile of training distances flags about 1 % of new columns from the same
law (common practice).
"""

import copy
import json
import warnings

import numpy as np
import pytest

from surrogate3d.errors import FormatError
from surrogate3d.runtime import load_coefficients
from surrogate3d.core.coefficient_format import decode_array, encode_array
from surrogate3d.core.config import ENVELOPE_VARIANCE_FLOOR
from surrogate3d.runtime.envelope import EnvelopeWarning, TrainingEnvelope

RNG = np.random.default_rng(11)


def _correlated(n, k=5, rng=RNG):
    """Correlated Gaussian columns; the same law (mixing matrix) for every ``rng``."""
    mixing = np.random.default_rng(k).normal(size=(k, k))
    return rng.normal(size=(n, k)) @ mixing + np.arange(k) * 10.0


def test_all_components_give_the_mahalanobis_distance():
    X = _correlated(2000)
    envelope = TrainingEnvelope.fit(X, n_components=5)
    Z = (X - X.mean(0)) / X.std(0)
    inverse = np.linalg.inv(np.cov(Z.T, bias=True))
    new = _correlated(50, rng=np.random.default_rng(1))
    z = (new - X.mean(0)) / X.std(0)
    expected = np.sqrt(np.einsum("ni,ij,nj->n", z, inverse, z))
    # The envelope's arrays are single precision (module docstring): agreement to 1e-5.
    np.testing.assert_allclose(envelope.distance(new), expected, rtol=1e-5)


def test_fewer_components_give_the_probabilistic_pca_distance():
    X = _correlated(2000, k=6)
    envelope = TrainingEnvelope.fit(X, n_components=2)
    Z = (X - X.mean(0)) / X.std(0)
    values, vectors = np.linalg.eigh(np.cov(Z.T, bias=True))
    values, vectors = values[::-1], vectors[:, ::-1]
    V, s2 = vectors[:, :2], values[2:].mean()
    covariance = V @ np.diag(values[:2]) @ V.T + s2 * (np.eye(6) - V @ V.T)
    new = _correlated(50, k=6, rng=np.random.default_rng(2))
    z = (new - X.mean(0)) / X.std(0)
    expected = np.sqrt(np.einsum("ni,ij,nj->n", z, np.linalg.inv(covariance), z))
    np.testing.assert_allclose(envelope.distance(new), expected, rtol=1e-5)
    assert envelope.residual_variance == pytest.approx(s2, rel=1e-12)


def test_threshold_flags_about_one_percent_of_the_same_law():
    X = _correlated(20000, k=4)
    envelope = TrainingEnvelope.fit(X)
    assert np.mean(envelope.distance(X) > envelope.distance_threshold) <= 0.0101
    same = envelope.check(_correlated(20000, k=4, rng=np.random.default_rng(3)))
    assert 0.005 < np.mean(same.beyond_distance) < 0.02
    # chi-squared with 4 degrees of freedom, 0.99 quantile: 13.28 (from memory)
    assert envelope.distance_threshold**2 == pytest.approx(13.28, rel=0.05)


def test_ranges_distance_and_gate_make_the_flag():
    X = _correlated(3000, k=3)
    envelope = TrainingEnvelope.fit(X)
    inside = X.mean(0)
    columns = np.array([inside, inside, inside, inside, inside])
    columns[1, 2] = np.nextafter(envelope.feature_max[2], np.inf)   # just beyond one range
    columns[2, 0] = np.nan                                    # missing: outside
    columns[3] = inside + 0.9 * (X.max(0) - inside)           # within every range, far from the data's shape
    columns[4, 1] = X[:, 1].min() - 1.0
    gated = np.array([False, False, False, False, True])
    check = envelope.check(columns, gated)
    assert check.outside_range.tolist() == [False, True, True, False, True]
    assert check.first_feature_outside.tolist() == [-1, 2, 0, -1, 1]
    assert check.beyond_distance[2] and check.beyond_distance[3] and not check.beyond_distance[0]
    assert check.outside.tolist() == [False, True, True, True, False]
    assert check.n_outside == 3 and check.share_outside == pytest.approx(0.6)


def test_single_precision_ranges_keep_every_training_column_inside():
    X = _correlated(3000, k=3) * np.pi
    envelope = TrainingEnvelope.fit(X)
    assert np.all(envelope.feature_min <= X.min(0)) and np.all(envelope.feature_max >= X.max(0))
    np.testing.assert_allclose(envelope.feature_max, X.max(0), rtol=2e-7)
    assert np.all(envelope.components.astype(np.float32).astype(np.float64) == envelope.components)
    assert not envelope.check(X).outside_range.any()


def test_constant_feature_has_a_point_range():
    # A feature constant in training (a surface albedo of 0.06 everywhere) has scale 1 in
    # the envelope and a range of one single-precision step either side of its value; any
    # other value of it is outside.
    X = np.column_stack([_correlated(500, k=2), np.full(500, 0.06)])
    envelope = TrainingEnvelope.fit(X)
    assert envelope.scale[2] == 1.0
    assert envelope.feature_min[2] <= 0.06 <= envelope.feature_max[2] < envelope.feature_min[2] + 1e-8
    assert np.all(envelope.component_variance >= ENVELOPE_VARIANCE_FLOOR)
    column = X[:1].copy()
    column[0, 2] = 0.3
    assert envelope.check(column).outside_range.tolist() == [True]
    assert not envelope.check(X[:1]).outside_range[0]


def test_exported_models_carry_their_envelope(built, run, held_out_features):
    for name in ("ridge", "boosted"):
        model = load_coefficients(built["export_dir"] / f"{name}.coefficients.json")
        estimator = run.models[name].estimator
        assert model.envelope.n_samples == estimator.envelope_.n_samples
        np.testing.assert_array_equal(model.envelope.components, estimator.envelope_.components)
        check = model.envelope_check(held_out_features)
        expected = estimator.envelope_check(held_out_features)
        np.testing.assert_array_equal(check.outside, expected.outside)
        np.testing.assert_allclose(check.distance, expected.distance, rtol=1e-12)
        assert not check.outside[model.clear_sky_mask(held_out_features)].any()


def test_prediction_warns_only_outside(built, held_out_features):
    model = load_coefficients(built["export_dir"] / "boosted.coefficients.json")
    training = model.envelope.center[None, :]
    with warnings.catch_warnings():
        warnings.simplefilter("error", EnvelopeWarning)
        model.predict(training)
    far = training.copy()
    far[0, :] = model.envelope.feature_max + 1.0
    with pytest.warns(EnvelopeWarning, match="1 of 1 columns lie outside the training envelope of model 'boosted'"):
        model.predict(far)
    with warnings.catch_warnings():
        warnings.simplefilter("error", EnvelopeWarning)
        model.predict(far, check_envelope=False)


def test_file_without_envelope_flags_nothing_with_a_note(built, tmp_path):
    content = json.loads((built["export_dir"] / "ridge.coefficients.json").read_text())
    content.pop("training_envelope")
    content["format_version"] = "1.1"
    path = tmp_path / "old.coefficients.json"
    path.write_text(json.dumps(content))
    model = load_coefficients(path)
    assert model.envelope is None
    features = np.full((3, model.n_features), 1e6)
    with warnings.catch_warnings():
        warnings.simplefilter("error", EnvelopeWarning)
        model.predict(features)
    check = model.envelope_check(features)
    assert not check.available and check.n_outside == 0 and "has no training envelope" in check.note


def _set_first(field, name, value):
    array = decode_array(field[name], name).copy()
    array[0] = value
    field[name] = encode_array(array)


@pytest.mark.parametrize("change, message", [
    (lambda e: e.pop("quantile"), "must be an object with exactly"),
    (lambda e: e.update(distance_threshold=-1.0), "distance_threshold must be a finite number >= 0"),
    (lambda e: e.update(n_samples=1), "n_samples must be an integer >= 2"),
    (lambda e: _set_first(e, "scale", 0.0), r"training_envelope.scale must be > 0; got 0.0 \(at index 0\)"),
    (lambda e: _set_first(e, "feature_max", -1e300),
     r"feature_max must be >= feature_min; got -1e\+300 \(at index 0\)"),
], ids=["keys", "threshold", "samples", "scale", "range"])
def test_malformed_envelope_is_refused(built, tmp_path, change, message):
    content = json.loads((built["export_dir"] / "ridge.coefficients.json").read_text())
    changed = copy.deepcopy(content)
    change(changed["training_envelope"])
    path = tmp_path / "bad.coefficients.json"
    path.write_text(json.dumps(changed))
    with pytest.raises(FormatError, match=message):
        load_coefficients(path)


def test_a_target_falls_back_to_its_offset_outside_the_envelope_in_the_runtime():
    # The shipped longwave model with the fallback switched on for its first target (its
    # offset: the effective-cloud-fraction prior): columns outside the envelope get the
    # prior alone, the others keep the learned correction; other targets do not change.
    from pathlib import Path

    from surrogate3d.core.coefficient_file import read_coefficients
    from surrogate3d.runtime.model import CorrectionModel

    path = Path(__file__).resolve().parents[2] / "models" / "longwave" / "boosted.coefficients.json"
    document = read_coefficients(path)
    plain = CorrectionModel.from_document(copy.deepcopy(document))
    document["target_transforms"][0]["outside_envelope"] = "offset"
    model = CorrectionModel.from_document(document)
    X = np.loadtxt(path.parent / "fortran" / "boosted_sample_features.txt", skiprows=1, ndmin=2)
    X = X[~model.clear_sky_mask(X)]       # the gate's columns get zero and are never flagged
    far = X.copy()
    far[:, model.feature_names.index("liquid_water_path")] = 1e5       # far beyond the training range
    prior = model.feature_names.index("effective_cloud_fraction_prior")
    assert len(far) and model.envelope_check(far).outside.all()
    got = model.predict(far, check_envelope=False)
    np.testing.assert_array_equal(got[:, 0], far[:, prior])
    np.testing.assert_array_equal(got[:, 1:], plain.predict(far, check_envelope=False)[:, 1:])
    inside = ~model.envelope_check(X).outside
    assert inside.any()
    np.testing.assert_array_equal(model.predict(X, check_envelope=False)[inside],
                                  plain.predict(X, check_envelope=False)[inside])
    document["target_transforms"][0]["outside_envelope"] = "learned"
    with pytest.raises(FormatError, match=r"target_transforms\[0\]\.outside_envelope must be 'offset'"):
        CorrectionModel.from_document(document)
