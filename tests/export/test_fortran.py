"""The generated Fortran module compiles as standard Fortran 2008 and matches Python.

References: the Python runtime and the scikit-learn estimators (Pedregosa et al.
2011); gfortran's -std=f2008 conformance checks.  Decimal numbers with 17 significant
digits read back to the same double (IEEE 754-2008, section 5.12.2), so the Fortran
coefficients equal the Python ones exactly.
"""

import copy
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest

from surrogate3d.errors import ValidationError
from surrogate3d.export.fortran import data_file_text, features_file_text, fortran_files, fortran_name, fortran_sources
from surrogate3d.export import read_coefficients
from surrogate3d.learn.transforms import apply_transforms
from surrogate3d.runtime import FORMAT_VERSION, CorrectionModel, load_coefficients

GFORTRAN = shutil.which("gfortran")
needs_gfortran = pytest.mark.skipif(GFORTRAN is None, reason="gfortran is not installed (make test installs "
                                                              "Debian's gfortran)")
FLAGS = ["-std=f2008", "-Wall", "-Werror", "-O2"]


@pytest.fixture(scope="module")
def drivers(built, tmp_path_factory):
    """Compiled driver of each model (module and driver built in a scratch directory)."""
    if GFORTRAN is None:
        pytest.skip("gfortran is not installed (make test installs Debian's gfortran)")
    source = built["export_dir"] / "fortran"
    out = {}
    for name in ("ridge", "boosted"):
        work = tmp_path_factory.mktemp(f"fortran_{name}")
        for f in (f"{name}_correction.f90", f"{name}_correction_driver.f90"):
            shutil.copy(source / f, work / f)
        result = subprocess.run([GFORTRAN, *FLAGS, f"{name}_correction.f90", f"{name}_correction_driver.f90",
                                 "-o", "driver"], cwd=work, capture_output=True, text=True)
        assert result.returncode == 0, result.stderr
        out[name] = work / "driver"
    return out


def _run(driver, coefficients, features):
    result = subprocess.run([str(driver), str(coefficients), str(features)], capture_output=True, text=True)
    assert result.returncode == 0, result.stderr
    return np.array([[float(v) for v in line.split()] for line in result.stdout.splitlines()])


def _run_envelope(driver, coefficients, features):
    """The driver's envelope mode: flag (bool) and distance per column, and the count."""
    result = subprocess.run([str(driver), str(coefficients), str(features), "envelope"], capture_output=True,
                            text=True)
    assert result.returncode == 0, result.stderr
    *rows, last = result.stdout.splitlines()
    assert last.startswith("n_outside ")
    values = np.array([[float(v) for v in row.split()] for row in rows])
    return values[:, 0] == 1, values[:, 1], int(last.split()[1])


@needs_gfortran
@pytest.mark.parametrize("name", ["ridge", "boosted"])
def test_fortran_matches_python(built, run, drivers, name):
    fortran = built["export_dir"] / "fortran"
    got = _run(drivers[name], fortran / f"{name}.coefficients.txt", fortran / f"{name}_sample_features.txt")
    expected = np.loadtxt(fortran / f"{name}_sample_corrections.txt")
    features = np.loadtxt(fortran / f"{name}_sample_features.txt", skiprows=1)
    assert got.shape == expected.shape == (features.shape[0], 5)
    scale = np.abs(expected).max(axis=0)
    # Required: 1e-10 relative in double precision (trees: the same additions in the same order).
    assert (np.abs(got - expected) / scale).max() <= 1e-10
    estimator = run.models[name].estimator.predict(features)
    assert (np.abs(got - estimator) / scale).max() <= 1e-10
    if name == "boosted":
        np.testing.assert_array_equal(got, estimator)


@needs_gfortran
@pytest.mark.parametrize("name", ["ridge", "boosted"])
def test_fortran_applies_the_clear_sky_gate(built, run, helpers, drivers, tmp_path, name):
    # No cloud in or next to the column: no 3D effect (common practice), so the module
    # returns exactly 0 there and the model's own prediction elsewhere, like Python.
    fortran = built["export_dir"] / "fortran"
    features = np.loadtxt(fortran / f"{name}_sample_features.txt", skiprows=1)
    estimator = run.models[name].estimator
    columns = [estimator.feature_names_.index(f) for f in helpers.GATE]
    features[::3, columns] = 0.0                          # every third column clear far from cloud
    features[1::6, columns[0]] = 2 * estimator.clear_sky_tolerance_   # just outside the gate
    (tmp_path / "gated.txt").write_text(features_file_text(features))
    got = _run(drivers[name], fortran / f"{name}.coefficients.txt", tmp_path / "gated.txt")
    expected = estimator.predict(features)
    gated = estimator.clear_sky_mask(features)
    assert gated[::3].all() and not gated[1::6].any()
    assert np.all(got[gated] == 0.0) and np.all(np.any(got[~gated] != 0.0, axis=1))
    assert (np.abs(got - expected) / np.abs(expected).max(axis=0)).max() <= 1e-10


@needs_gfortran
def test_fortran_clips_a_round_off_scale_like_python(built, helpers, drivers, tmp_path):
    # A file written before format 1.2 may hold the round-off spread of a feature that was
    # constant in training as its scale; both runtimes clip its standardized value to
    # [-1, 1] (docs/export-format.md), so another value of the feature cannot blow up.
    fortran = built["export_dir"] / "fortran"
    document = read_coefficients(built["export_dir"] / "ridge.coefficients.json")
    names = document["features"]["names"]
    k = next(i for i, name in enumerate(names) if name not in helpers.GATE)
    document["ridge"]["feature_mean"][k] = 0.059999999999986266
    document["ridge"]["feature_scale"][k] = 1.3704315460216776e-14
    (tmp_path / "old.txt").write_text(data_file_text(document))
    features = np.loadtxt(fortran / "ridge_sample_features.txt", skiprows=1)
    features[::2, k] = 0.06
    features[1::2, k] = 0.3
    (tmp_path / "features.txt").write_text(features_file_text(features))
    got = _run(drivers["ridge"], tmp_path / "old.txt", tmp_path / "features.txt")
    expected = CorrectionModel.from_document(document).predict(features, check_envelope=False)
    assert np.abs(expected).max() < 10.0
    assert (np.abs(got - expected) / np.abs(expected).max(axis=0)).max() <= 1e-10


@needs_gfortran
def test_ridge_holds_features_beyond_the_training_range_at_its_edge_like_python(built, run, helpers, drivers,
                                                                                 tmp_path):
    # Beyond the training envelope's range a feature is held at the range's edge before the
    # ridge standardizes it (format 1.5, docs/export-format.md), in Fortran as in numpy and
    # in the estimator: far beyond the range the correction is that at the edge.
    fortran = built["export_dir"] / "fortran"
    model = load_coefficients(built["export_dir"] / "ridge.coefficients.json")
    features = np.loadtxt(fortran / "ridge_sample_features.txt", skiprows=1)
    k = next(i for i, name in enumerate(model.feature_names) if name not in helpers.GATE)
    low, high = model.envelope.feature_min[k], model.envelope.feature_max[k]
    far = features.copy()
    far[::2, k] = high + 100.0 * (high - low + 1.0)
    far[1::2, k] = low - 100.0 * (high - low + 1.0)
    edge = far.copy()
    edge[::2, k], edge[1::2, k] = high, low
    (tmp_path / "far.txt").write_text(features_file_text(far))
    got = _run(drivers["ridge"], fortran / "ridge.coefficients.txt", tmp_path / "far.txt")
    expected = model.predict(edge, check_envelope=False)
    scale = np.abs(expected).max(axis=0)
    assert (np.abs(got - expected) / scale).max() <= 1e-10
    assert (np.abs(run.models["ridge"].estimator.predict(far) - expected) / scale).max() <= 1e-12
    np.testing.assert_array_equal(model.predict(far, check_envelope=False), expected)
    # The module follows the data file's own version: a file of format 1.4 is not clipped.
    document = read_coefficients(built["export_dir"] / "ridge.coefficients.json")
    document["format_version"] = "1.4"
    (tmp_path / "old.txt").write_text(data_file_text(document))
    got = _run(drivers["ridge"], tmp_path / "old.txt", tmp_path / "far.txt")
    unclipped = CorrectionModel.from_document(document).predict(far, check_envelope=False)
    assert np.abs(unclipped - expected).max() > 1e-3 * scale.max()
    assert (np.abs(got - unclipped) / np.abs(unclipped).max(axis=0)).max() <= 1e-10


@needs_gfortran
@pytest.mark.parametrize("name", ["ridge", "boosted"])
def test_fortran_flags_the_columns_python_flags(built, helpers, drivers, tmp_path, name):
    # The training envelope (ranges and Mahalanobis distance, docs/export-format.md) gives
    # the same flag and distance in Fortran as in the numpy runtime, and a NaN is outside.
    fortran = built["export_dir"] / "fortran"
    model = load_coefficients(built["export_dir"] / f"{name}.coefficients.json")
    features = np.loadtxt(fortran / f"{name}_sample_features.txt", skiprows=1)
    rng = np.random.default_rng(4)
    features[::4] *= rng.uniform(0.5, 1.5, features[::4].shape)          # some leave the envelope
    features[1::8, 0] = model.envelope.feature_max[0] + 1.0               # one range exceeded
    gate = [model.feature_names.index(f) for f in helpers.GATE]
    features[2::8][:, gate] = 0.0                                          # gated: never flagged
    (tmp_path / "features.txt").write_text(features_file_text(features))
    outside, distance, count = _run_envelope(drivers[name], fortran / f"{name}.coefficients.txt",
                                             tmp_path / "features.txt")
    check = model.envelope_check(features)
    assert 0 < check.n_outside < features.shape[0] and not check.outside[2::8].any()
    np.testing.assert_array_equal(outside, check.outside)
    np.testing.assert_allclose(distance, check.distance, rtol=1e-10)
    assert count == check.n_outside
    if name == "boosted":
        features[0, 3] = np.nan
        (tmp_path / "nan.txt").write_text(features_file_text(features[:1]))
        assert _run_envelope(drivers[name], fortran / f"{name}.coefficients.txt", tmp_path / "nan.txt")[0][0]


@needs_gfortran
def test_fortran_routes_missing_values(built, run, drivers, tmp_path):
    # NaN follows each node's missing-value direction, as in scikit-learn.
    fortran = built["export_dir"] / "fortran"
    features = np.loadtxt(fortran / "boosted_sample_features.txt", skiprows=1)
    rng = np.random.default_rng(0)
    features[rng.uniform(size=features.shape) < 0.3] = np.nan
    (tmp_path / "nan.txt").write_text(features_file_text(features))
    got = _run(drivers["boosted"], fortran / "boosted.coefficients.txt", tmp_path / "nan.txt")
    estimator = run.models["boosted"].estimator
    expected = np.column_stack([r.predict(features) for r in estimator.estimators_])
    apply_transforms(estimator.target_transform_, features, expected)  # a NaN offset or scale feature gives NaN
    # A missing gate feature is not zero: only columns whose gate features are all present and 0 are gated.
    expected[np.all(np.abs(features[:, estimator.clear_sky_indices_]) <= estimator.clear_sky_tolerance_, axis=1)] = 0
    np.testing.assert_array_equal(got, expected)


@needs_gfortran
def test_fortran_reports_bad_data_files(built, drivers, tmp_path):
    fortran = built["export_dir"] / "fortran"
    features = fortran / "boosted_sample_features.txt"
    result = subprocess.run([str(drivers["boosted"]), str(fortran / "ridge.coefficients.txt"), str(features)],
                            capture_output=True, text=True)
    assert result.returncode != 0 and 'expected "kind boosted", found "kind ridge"' in result.stderr
    text = (fortran / "boosted.coefficients.txt").read_text().splitlines()
    first_feature = text.index("features") + 1
    text[first_feature] = "slant_optical_depth"
    (tmp_path / "renamed.txt").write_text("\n".join(text) + "\n")
    result = subprocess.run([str(drivers["boosted"]), str(tmp_path / "renamed.txt"), str(features)],
                            capture_output=True, text=True)
    assert result.returncode != 0 and 'features entry 1 is "slant_optical_depth"' in result.stderr
    text = (fortran / "boosted.coefficients.txt").read_text().replace(
        f"surrogate3d-correction-coefficients {FORMAT_VERSION}", "surrogate3d-correction-coefficients 2.0")
    (tmp_path / "v2.txt").write_text(text)
    result = subprocess.run([str(drivers["boosted"]), str(tmp_path / "v2.txt"), str(features)],
                            capture_output=True, text=True)
    assert result.returncode != 0 and "this module reads major version 1" in result.stderr
    text = (fortran / "boosted.coefficients.txt").read_text().splitlines()
    n_features = int(next(line for line in text if line.startswith("n_features ")).split()[1])
    text[text.index("clear_sky_features") + 1] = f"0 {n_features}"       # one past the last feature
    (tmp_path / "gate.txt").write_text("\n".join(text) + "\n")
    result = subprocess.run([str(drivers["boosted"]), str(tmp_path / "gate.txt"), str(features)],
                            capture_output=True, text=True)
    assert result.returncode != 0 and "clear_sky_features index is out of range" in result.stderr


def _breadth_first(document):
    """A copy of a boosted document with every tree's nodes in breadth-first order (children still after
    their parent, as the format asks, but a left child no longer right after its parent)."""
    document = copy.deepcopy(document)
    trees = document["boosted"]
    offset, feature, left, right = (np.asarray(trees[k], dtype=np.int64) for k in ("tree_offset", "feature", "left",
                                                                                   "right"))
    leaves = np.flatnonzero(feature < 0)
    leaf_value = dict(zip(leaves, np.asarray(trees["leaf_value"])))
    order = []
    for first, last in zip(offset[:-1], offset[1:]):
        queue = [0]
        for node in queue:
            if feature[first + node] >= 0:
                queue += [left[first + node], right[first + node]]
        assert len(queue) == last - first
        order.append((first, queue))
    new = {k: [] for k in ("feature", "threshold_index", "left", "right", "missing_go_left", "leaf_value")}
    for first, queue in order:
        position = {node: i for i, node in enumerate(queue)}
        for node in queue:
            g = first + node
            for k in ("feature", "threshold_index", "missing_go_left"):
                new[k].append(trees[k][g])
            new["left"].append(position[left[g]] if feature[g] >= 0 else -1)
            new["right"].append(position[right[g]] if feature[g] >= 0 else -1)
            if feature[g] < 0:
                new["leaf_value"].append(leaf_value[g])
    for k, values in new.items():
        trees[k] = np.asarray(values, dtype=np.asarray(trees[k]).dtype if k != "left" else np.int16)
    trees["right"] = trees["right"].astype(np.int16)
    return document


@needs_gfortran
def test_fortran_reads_trees_in_any_node_order(built, drivers, tmp_path):
    # The format asks only that children come after their parent (docs/export-format.md); the reader puts
    # every tree in preorder for its walk. The same trees breadth first give the same corrections, bit for
    # bit, equal to Python's to 1e-10; a node with two parents is refused.
    fortran = built["export_dir"] / "fortran"
    samples = fortran / "boosted_sample_features.txt"
    reordered = _breadth_first(read_coefficients(built["export_dir"] / "boosted.coefficients.json"))
    first_tree = slice(0, int(reordered["boosted"]["tree_offset"][1]))
    assert np.any(reordered["boosted"]["left"][first_tree][reordered["boosted"]["feature"][first_tree] >= 0]
                  != np.flatnonzero(reordered["boosted"]["feature"][first_tree] >= 0) + 1)
    (tmp_path / "breadth_first.txt").write_text(data_file_text(reordered))
    got = _run(drivers["boosted"], tmp_path / "breadth_first.txt", samples)
    np.testing.assert_array_equal(got, _run(drivers["boosted"], fortran / "boosted.coefficients.txt", samples))
    expected = CorrectionModel.from_document(reordered).predict(np.loadtxt(samples, skiprows=1),
                                                                check_envelope=False)
    assert (np.abs(got - expected) / np.abs(expected).max(axis=0)).max() <= 1e-10
    shared = copy.deepcopy(reordered)
    shared["boosted"]["right"][0] = shared["boosted"]["left"][0]
    (tmp_path / "shared.txt").write_text(data_file_text(shared))
    result = subprocess.run([str(drivers["boosted"]), str(tmp_path / "shared.txt"), str(samples)],
                            capture_output=True, text=True)
    assert result.returncode != 0 and "tree 1 has a node with two parents or none" in result.stderr


@needs_gfortran
def test_driver_timing_mode(built, drivers):
    fortran = built["export_dir"] / "fortran"
    result = subprocess.run([str(drivers["ridge"]), str(fortran / "ridge.coefficients.txt"),
                             str(fortran / "ridge_sample_features.txt"), "3"], capture_output=True, text=True)
    assert result.returncode == 0 and result.stdout.startswith("columns_per_second ")


def test_generated_names_and_layout(built):
    assert fortran_name("Boosted-2") == "boosted_2" and fortran_name("3d") == "m_3d"
    document = read_coefficients(built["export_dir"] / "boosted.coefficients.json")
    sources = fortran_sources(document)
    module = sources["boosted_correction.f90"]
    assert "module boosted_correction" in module and "pure subroutine boosted_correct_columns" in module
    for name in document["features"]["names"]:
        assert f'"{name}"' in module
    document["features"]["names"][0] = "x" * 140
    with pytest.raises(ValidationError, match="longer than 132 characters"):
        fortran_sources(document)


@needs_gfortran
@pytest.mark.parametrize("name", ["ridge", "boosted"])
def test_fortran_falls_back_to_the_offset_outside_the_envelope_like_python(tmp_path, name):
    # A target whose transform says outside_envelope = "offset" (format 1.6) gets its offset
    # alone in the columns outside the training envelope, in Fortran as in numpy; a 1.5 data
    # file of the same model says nothing of it and gets the learned correction everywhere.
    shipped = Path(__file__).resolve().parents[2] / "models" / "longwave"
    document = read_coefficients(shipped / f"{name}.coefficients.json")
    for spec in document["target_transforms"]:
        if spec is not None:
            spec["outside_envelope"] = "offset"
    document["format_version"] = FORMAT_VERSION
    model = CorrectionModel.from_document(document)
    files = fortran_files(document, np.zeros((1, model.n_features)), np.zeros((1, model.n_targets)))
    for key in ("module", "driver", "coefficients"):
        (tmp_path / files[key][0]).write_text(files[key][1])
    built = subprocess.run([GFORTRAN, *FLAGS, files["module"][0], files["driver"][0], "-o", "driver"], cwd=tmp_path,
                           capture_output=True, text=True)
    assert built.returncode == 0, built.stderr
    features = np.loadtxt(shipped / "fortran" / f"{name}_sample_features.txt", skiprows=1)
    far = features.copy()
    # Every other column the clear-sky gate leaves alone (a gated column is never flagged).
    pushed = np.flatnonzero(~model.clear_sky_mask(features))[::2]
    far[pushed, model.feature_names.index("liquid_water_path")] = 1e5
    (tmp_path / "far.txt").write_text(features_file_text(far))
    got = _run(tmp_path / "driver", tmp_path / files["coefficients"][0], tmp_path / "far.txt")
    expected = model.predict(far, check_envelope=False)
    outside = model.envelope_check(far).outside
    assert pushed.size and outside[pushed].all() and not outside.all()
    np.testing.assert_allclose(got, expected, rtol=1e-10, atol=1e-9)
    prior = far[:, model.feature_names.index("effective_cloud_fraction_prior")]
    m = model.target_names.index("longwave_surface_downward_flux")
    np.testing.assert_array_equal(expected[outside, m], prior[outside])
    document["format_version"] = "1.5"
    (tmp_path / "old.txt").write_text(data_file_text(document))
    assert "target_offset_outside" not in (tmp_path / "old.txt").read_text()
    plain = copy.deepcopy(document)
    for spec in plain["target_transforms"]:
        if spec is not None:
            del spec["outside_envelope"]
    learned = CorrectionModel.from_document(plain)
    np.testing.assert_allclose(_run(tmp_path / "driver", tmp_path / "old.txt", tmp_path / "far.txt"),
                               learned.predict(far, check_envelope=False), rtol=1e-10, atol=1e-9)
