"""Loading refuses files of another version, with missing, corrupted or inconsistent fields.

Reference: the checks listed in docs/export-format.md ("Checks on load"); refusing a
file rather than predicting from it is common practice for model files read by host
models.
"""

import base64
import copy
import json
import zlib

import numpy as np
import pytest

from surrogate3d.errors import FormatError
from surrogate3d.runtime import FORMAT_VERSION, load_coefficients
from surrogate3d.core.coefficient_format import PLAIN_LIMIT, decode_array, encode_array


@pytest.fixture(scope="module")
def contents(built):
    return {name: json.loads((built["export_dir"] / f"{name}.coefficients.json").read_text())
            for name in ("ridge", "boosted")}


def _load(tmp_path, content):
    path = tmp_path / "changed.coefficients.json"
    path.write_text(json.dumps(content))
    return load_coefficients(path)


def _array(content, kind, name):
    return decode_array(content[kind][name], name)


def _with_array(content, kind, name, array):
    changed = copy.deepcopy(content)
    changed[kind][name] = encode_array(np.asarray(array))
    return changed


def test_unchanged_files_load(tmp_path, contents):
    for content in contents.values():
        assert _load(tmp_path, content).n_targets == 5


@pytest.mark.parametrize("change, message", [
    (lambda c: c.update(format_version="2.0"), f"format_version '2.0'; this version reads {FORMAT_VERSION}"),
    (lambda c: c.update(format_version="1.5b"), r"format_version '1.5b'; this version reads .* \(MAJOR.MINOR"),
    (lambda c: c.update(format="something-else"), "not a surrogate3d coefficient file"),
    (lambda c: c.pop("provenance"), "lacks field 'provenance'"),
    (lambda c: c["model"].update(kind="forest"), "model.kind is 'forest'"),
    (lambda c: c["ridge"].pop("coef"), r"lacks fields \['ridge.coef'\]"),
    (lambda c: (c["features"]["names"].pop(), c["features"]["units"].pop()),
     r"has length (\d+) along feature; features.names has (\d+)"),
    (lambda c: c["features"]["units"].pop(), "features.units must list one unit string per feature"),
    (lambda c: c["targets"]["names"].__setitem__(0, "cloud_albedo"), "unknown targets"),
    (lambda c: c["features"]["names"].__setitem__(0, "slant_optical_depth"),
     r"features \['slant_optical_depth'\] are not columns of the stored feature recipe"),
    (lambda c: c["features"]["units"].__setitem__(0, "m"), "has units 'm'; the feature recipe gives '1'"),
    (lambda c: c["feature_recipe"].update(features=["no_such_feature"]),
     "feature_recipe is not a valid feature recipe"),
    (lambda c: c["ridge"]["coef"].update(shape=[5, 3]), "'data' has \\d+ values|unpacks to"),
    (lambda c: c["ridge"]["feature_scale"].update(dtype="float16"), "dtype 'float16'"),
], ids=["version", "minor-version", "format", "missing-section", "kind", "missing-array", "names-vs-arrays", "units-count",
        "target", "feature-not-in-recipe", "units", "recipe", "shape", "dtype"])
def test_ridge_file_errors(tmp_path, contents, change, message):
    content = copy.deepcopy(contents["ridge"])
    change(content)
    with pytest.raises(FormatError, match=message):
        _load(tmp_path, content)


def test_array_value_errors(tmp_path, contents):
    ridge = contents["ridge"]
    scale = _array(ridge, "ridge", "feature_scale").copy()
    scale[3] = 0.0
    with pytest.raises(FormatError, match=r"feature_scale must be > 0; got 0.0 \(at index 3\)"):
        _load(tmp_path, _with_array(ridge, "ridge", "feature_scale", scale))
    coef = _array(ridge, "ridge", "coef")
    with pytest.raises(FormatError, match=f"has {coef.shape[1] - 1} terms"):
        _load(tmp_path, _with_array(ridge, "ridge", "coef", coef[:, 1:]))
    pairs = _array(ridge, "ridge", "interaction_pairs").copy()
    pairs[0] = pairs[0][::-1]
    with pytest.raises(FormatError, match="interaction_pairs must be feature indices i < j"):
        _load(tmp_path, _with_array(ridge, "ridge", "interaction_pairs", pairs))
    nan = coef.copy()
    nan[1, 2] = np.nan
    with pytest.raises(FormatError, match=r"ridge.coef must be finite; got nan \(at index \(1, 2\)\)"):
        _load(tmp_path, _with_array(ridge, "ridge", "coef", nan))


def test_corrupted_packed_array(tmp_path, contents):
    content = copy.deepcopy(contents["boosted"])
    packed = content["boosted"]["leaf_value"]["packed"]
    content["boosted"]["leaf_value"]["packed"] = packed[:-12] + "AAAAAAAAAAAA"
    with pytest.raises(FormatError, match="boosted.leaf_value: 'packed' is not base64 of zlib data"):
        _load(tmp_path, content)
    content["boosted"]["leaf_value"]["packed"] = base64.b64encode(zlib.compress(b"\0" * 24)).decode()
    with pytest.raises(FormatError, match="unpacks to 24 bytes"):
        _load(tmp_path, content)


def test_tree_structure_errors(tmp_path, contents):
    boosted = contents["boosted"]
    right = _array(boosted, "boosted", "right").copy()
    internal = int(np.flatnonzero(right >= 0)[3])
    right[internal] = 0                                          # back to the root: a cycle
    with pytest.raises(FormatError, match=f"boosted.right must be -1 at a leaf and a later node .* index {internal}"):
        _load(tmp_path, _with_array(boosted, "boosted", "right", right))
    left = _array(boosted, "boosted", "left").copy()
    first = int(np.flatnonzero(left >= 0)[0])
    left[first] = _array(boosted, "boosted", "right")[first]    # two parents, one orphan
    with pytest.raises(FormatError, match="do not form trees"):
        _load(tmp_path, _with_array(boosted, "boosted", "left", left))
    offset = _array(boosted, "boosted", "tree_offset").copy()
    offset[-1] += 1
    with pytest.raises(FormatError, match="tree_offset must rise strictly from 0 to the node count"):
        _load(tmp_path, _with_array(boosted, "boosted", "tree_offset", offset))
    feature = _array(boosted, "boosted", "feature").copy()
    feature[0] = 40
    with pytest.raises(FormatError, match=r"boosted.feature must be -1 .*; got 40 \(at index 0\)"):
        _load(tmp_path, _with_array(boosted, "boosted", "feature", feature))
    target = _array(boosted, "boosted", "tree_target").copy()
    target[-1] = 5
    with pytest.raises(FormatError, match="tree_target must be a target index < 5"):
        _load(tmp_path, _with_array(boosted, "boosted", "tree_target", target))
    leaves = _array(boosted, "boosted", "leaf_value")
    with pytest.raises(FormatError, match=f"leaf_value has {leaves.size - 1} values; .* marks {leaves.size} leaves"):
        _load(tmp_path, _with_array(boosted, "boosted", "leaf_value", leaves[1:]))
    thresholds = _array(boosted, "boosted", "threshold_values")[::-1]
    with pytest.raises(FormatError, match="threshold_values must be strictly increasing"):
        _load(tmp_path, _with_array(boosted, "boosted", "threshold_values", thresholds))


@pytest.mark.parametrize("gate, message", [
    ({"feature_indices": [0, 99], "tolerance": 1e-9},
     r"clear_sky_gate.feature_indices must be a feature index < \d+; got 99 \(at index 1\)"),
    ({"feature_indices": [-1], "tolerance": 1e-9}, "clear_sky_gate.feature_indices must be a feature index"),
    ({"feature_indices": [1, 1], "tolerance": 1e-9}, "repeats an index"),
    ({"feature_indices": [0.5], "tolerance": 1e-9}, "must be a list of integers"),
    ({"feature_indices": [0], "tolerance": -1.0}, "clear_sky_gate.tolerance must be a finite number >= 0"),
    ({"feature_indices": [0]}, "exactly feature_indices and tolerance"),
    ([0, 1], "must be an object"),
], ids=["index-too-large", "negative-index", "repeated", "not-integer", "tolerance", "no-tolerance", "not-object"])
def test_clear_sky_gate_errors(tmp_path, contents, gate, message):
    for content in contents.values():
        changed = copy.deepcopy(content)
        changed["clear_sky_gate"] = gate
        with pytest.raises(FormatError, match=message):
            _load(tmp_path, changed)


def test_files_without_a_gate_load_without_one(tmp_path, contents):
    # Files of format 1.0 have no clear_sky_gate field: same major version, so they load, ungated.
    for content in contents.values():
        older = copy.deepcopy(content)
        del older["clear_sky_gate"]
        older["format_version"] = "1.0"
        model = _load(tmp_path, older)
        assert model.clear_sky_features == [] and not model.clear_sky_mask(np.zeros((2, model.n_features))).any()


def test_unreadable_files(tmp_path):
    with pytest.raises(FormatError, match="does not exist"):
        load_coefficients(tmp_path / "absent.coefficients.json")
    broken = tmp_path / "broken.coefficients.json"
    broken.write_text('{"format": ')
    with pytest.raises(FormatError, match="is not valid JSON"):
        load_coefficients(broken)
    broken.write_text("[1, 2]")
    with pytest.raises(FormatError, match="must hold a JSON object"):
        load_coefficients(broken)
    netcdf = tmp_path / "model.coefficients.nc"
    netcdf.write_bytes(b"\x89HDF")
    with pytest.raises(FormatError, match="reads its JSON twin 'model.coefficients.json'"):
        load_coefficients(netcdf)


@pytest.mark.parametrize("array", [np.arange(5, dtype=np.int8), np.linspace(0, 1, PLAIN_LIMIT + 1),
                                   np.array([[1.5, -np.inf], [np.nan, 0.0]]), np.zeros((0, 2), dtype=np.int16),
                                   np.array([2**31 - 1, -2**31], dtype=np.int32)])
def test_array_encoding_round_trip(array):
    entry = json.loads(json.dumps(encode_array(array), allow_nan=False))
    back = decode_array(entry, "x")
    assert back.dtype == array.dtype and back.shape == array.shape
    np.testing.assert_array_equal(back, array)
    if array.size > PLAIN_LIMIT:                 # packed: about 8 bytes per float64 or less
        assert len(entry["packed"]) <= 4 / 3 * array.nbytes + 64


def test_array_entry_errors():
    with pytest.raises(FormatError, match="x 'data' must hold only integers"):
        decode_array({"dtype": "int16", "shape": [2], "data": [1, 2.5]}, "x")
    with pytest.raises(FormatError, match="outside the range of int8"):
        decode_array({"dtype": "int8", "shape": [1], "data": [300]}, "x")
    with pytest.raises(FormatError, match="exactly one of 'data' and 'packed'"):
        decode_array({"dtype": "int8", "shape": [1]}, "x")
    with pytest.raises(FormatError, match="shape"):
        decode_array({"dtype": "int8", "shape": [-1], "data": []}, "x")
