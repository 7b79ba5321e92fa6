"""The numpy-only runtime: imports, reproduces the trained models, computes host features.

References: the trained scikit-learn estimators themselves (Pedregosa et al. 2011) and
the feature library of the pairs stage; "importing only numpy" is the contract of the
runtime (common practice for code embedded in host models).
"""

import json
import subprocess
import sys

import numpy as np
import pytest

from surrogate3d.errors import ValidationError
from surrogate3d.pairs.features import compute_features
from surrogate3d.runtime import FORMAT_VERSION, CorrectionModel, load_coefficients

HEAVY = ("sklearn", "xarray", "scipy", "numba", "joblib", "pandas", "h5py", "h5netcdf", "matplotlib", "dask")


def _json(built, name):
    return built["export_dir"] / f"{name}.coefficients.json"


def test_runtime_imports_only_numpy(built, held_out_features):
    # A host process: import the runtime, load both files, predict from features and from host fields.
    np.save(built["export_dir"] / "probe.npy", held_out_features[:50])
    script = f"""
import sys
import numpy as np
import surrogate3d.runtime as runtime
for name in ("ridge", "boosted"):
    model = runtime.load_coefficients({str(built['export_dir'])!r} + "/" + name + ".coefficients.json")
    assert model.predict(np.load({str(built['export_dir'] / 'probe.npy')!r})).shape == (50, 5)
heavy = [m for m in {HEAVY!r} if m in sys.modules]
print("HEAVY", heavy)
"""
    out = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True, check=True)
    assert "HEAVY []" in out.stdout, out.stdout + out.stderr


@pytest.mark.parametrize("name", ["ridge", "boosted"])
def test_reproduces_trained_estimator(built, run, held_out_features, name):
    model = load_coefficients(_json(built, name))
    estimator = run.models[name].estimator
    rng = np.random.default_rng(3)
    X = np.vstack([held_out_features, held_out_features * rng.uniform(0.8, 1.2, held_out_features.shape)])
    expected = estimator.predict(X)
    got = model.predict(X, check_envelope=False)       # compared as numbers, wherever the columns lie
    # Required: 1e-9 relative to the size of each target's correction.
    relative = np.abs(got - expected) / np.abs(expected).max(axis=0)
    assert relative.max() <= 1e-9, relative.max()
    if name == "boosted":
        np.testing.assert_array_equal(got, expected)           # same leaves, same additions
    assert model.feature_names == run.record["feature_names"] and model.target_names == run.record["targets"]


@pytest.mark.parametrize("name", ["ridge", "boosted"])
def test_clear_sky_gate_is_applied(built, run, helpers, held_out_features, name):
    # No cloud in or next to the column: no 3D effect, so exactly zero correction
    # (common practice); the runtime applies the gate stored in the file as the estimator does.
    model = load_coefficients(_json(built, name))
    estimator = run.models[name].estimator
    assert model.clear_sky_features == helpers.GATE
    gated = model.clear_sky_mask(held_out_features)
    columns = [model.feature_names.index(f) for f in helpers.GATE]
    np.testing.assert_array_equal(gated, np.all(held_out_features[:, columns] == 0.0, axis=1))
    np.testing.assert_array_equal(gated, estimator.clear_sky_mask(held_out_features))
    assert 0 < gated.sum() < gated.size
    got = model.predict(held_out_features, check_envelope=False)
    assert np.all(got[gated] == 0.0) and np.all(np.any(got[~gated] != 0.0, axis=1))
    # Ungated columns are the model's own prediction (with its target transforms): the gate
    # changes nothing else.
    ungated = held_out_features[~gated]
    np.testing.assert_allclose(got[~gated], model._transformed(ungated, model._evaluator.predict(ungated)), rtol=0,
                               atol=0)
    # A gate feature just above the tolerance opens the gate.
    nudged = held_out_features[gated][:3].copy()
    nudged[:, columns[0]] = 2 * model.clear_sky_tolerance
    assert not model.clear_sky_mask(nudged).any()
    np.testing.assert_allclose(model.predict(nudged, check_envelope=False), estimator.predict(nudged), rtol=0,
                               atol=1e-9 * np.abs(estimator.predict(held_out_features)).max())


@pytest.mark.parametrize("name", ["ridge", "boosted"])
def test_predict_host_matches_feature_library(built, run, make_host_fields, name):
    model = load_coefficients(_json(built, name))
    fields = make_host_fields(seed=7)
    features = model.host_features(fields)
    full = compute_features(fields, model.recipe)
    columns = model.recipe.column_names()
    np.testing.assert_array_equal(features, full[:, [columns.index(c) for c in model.feature_names]])
    corrections = model.predict_host(fields, check_envelope=False)     # random fields: outside the envelope
    assert corrections.shape == (6 * 5, model.n_targets)
    expected = run.models[name].estimator.predict(features)
    np.testing.assert_allclose(corrections, expected, rtol=0, atol=1e-9 * np.abs(expected).max())


def test_predict_checks_its_input(built, make_host_fields):
    model = load_coefficients(_json(built, "boosted"))
    with pytest.raises(ValidationError, match=rf"shape \(n_column, {model.n_features}\)"):
        model.predict(np.zeros((3, 4)))
    bad = np.zeros((3, model.n_features))
    bad[2, 1] = np.nan
    with pytest.raises(ValidationError, match=f"column 2, feature '{model.feature_names[1]}'"):
        model.predict(bad)
    fields = make_host_fields()
    del fields["surface_albedo"]
    with pytest.raises(ValidationError, match="surface_albedo"):
        model.predict_host(fields)


def test_metadata_is_carried(built):
    model = load_coefficients(_json(built, "ridge"))
    assert model.kind == "ridge" and model.name == "ridge"
    assert model.document["provenance"]["archive_fingerprint"]
    assert model.document["provenance"]["training_scenes"]
    assert model.document["skill"]["rows"] and "ridge" in repr(model)
    assert isinstance(CorrectionModel.from_document(model.document), CorrectionModel)
    text = _json(built, "ridge").read_text()
    content = json.loads(text)
    assert content["format_version"] == FORMAT_VERSION
    assert text == json.dumps(content, separators=(",", ":")) + "\n"          # compact separators
