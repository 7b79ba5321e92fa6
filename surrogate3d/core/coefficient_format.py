"""The coefficient document: what a coefficient file holds, its JSON encoding and its checks.

A coefficient file holds one trained correction model.  In memory it is a *document*:
a dict of plain JSON values whose numeric arrays are numpy arrays.  The JSON twin
stores every array as an object ``{"dtype", "shape", "data" | "packed"}``; the NetCDF
file (written by :mod:`surrogate3d.export.coefficients`) stores the same arrays as
variables.  ``docs/export-format.md`` documents every field.

This module imports only numpy and the standard library: the numpy-only runtime reads
coefficient files with it, and the export stage writes them.
"""

import base64
import binascii
import math
import re
import zlib

import numpy as np

from ..errors import FormatError
from .data_model import COEFFICIENT_FORMAT_NAME as FORMAT_NAME
from .data_model import COEFFICIENT_FORMAT_VERSION as FORMAT_VERSION
from .validation import first_true, message


#: Model kinds a coefficient file may hold.
KINDS = ("ridge", "boosted")

#: Arrays of each model section: name -> (dimension names, dtype kind).  ``"f"`` is
#: float64; ``"i"`` a signed integer type (int8, int16 or int32, the smallest that
#: holds the values).
ARRAYS = {
    "ridge": {
        "feature_mean": (("feature",), "f"),
        "feature_scale": (("feature",), "f"),
        "interaction_pairs": (("pair", "pair_member"), "i"),
        "coef": (("target", "term"), "f"),
        "intercept": (("target",), "f"),
    },
    "boosted": {
        "baseline": (("target",), "f"),
        "tree_target": (("tree",), "i"),
        "tree_offset": (("tree_edge",), "i"),
        "feature": (("node",), "i"),
        "threshold_index": (("node",), "i"),
        "left": (("node",), "i"),
        "right": (("node",), "i"),
        "missing_go_left": (("node",), "i"),
        "leaf_value": (("leaf",), "f"),
        "threshold_values": (("threshold",), "f"),
    },
}

#: Top-level keys of a document and the JSON type each must have.
TOP_LEVEL = {"format": str, "format_version": str, "model": dict, "features": dict, "feature_recipe": dict,
             "targets": dict, "provenance": dict, "skill": (dict, type(None))}

#: Optional top-level field: the clear-sky gate (absent in files of format 1.0: no gate).
GATE_FIELD = "clear_sky_gate"

#: Optional top-level field: the training envelope (absent before format 1.2: nothing flagged).
ENVELOPE_FIELD = "training_envelope"

#: First format whose ridge clips every feature to the training envelope's range before it
#: standardizes it (files of 1.2 to 1.4 have the envelope but extrapolate linearly).
RIDGE_CLIPPING_VERSION = (1, 5)

#: First format whose target transforms may say ``outside_envelope`` (the Fortran data file
#: then carries ``target_offset_outside``).
OUTSIDE_ENVELOPE_VERSION = (1, 6)


def ridge_clips_features(document):
    """Whether a coefficient document's ridge clips its features to the envelope's ranges.

    Parameters
    ----------
    document : dict
        A coefficient document (:func:`check_document` passed).

    Returns
    -------
    bool
        True for format 1.5 and later with a training envelope.

    Examples
    --------
    >>> ridge_clips_features({"format_version": "1.4", "training_envelope": {}})
    False
    """
    version = tuple(int(part) for part in document["format_version"].split("."))
    return version >= RIDGE_CLIPPING_VERSION and document.get(ENVELOPE_FIELD) is not None


#: Optional top-level field: per target, the offset and scale that turn the model's output
#: into the correction (absent before format 1.3: none).
TRANSFORM_FIELD = "target_transforms"
_TRANSFORM_KEYS = {"scale_feature", "scale_floor", "offset_features", "offset_coefficients"}
#: Optional key of a target transform (format 1.6): ``"offset"`` when a column outside the
#: training envelope gets the offset alone.
_TRANSFORM_OPTIONAL = {"outside_envelope"}

#: Optional top-level field of a heating-rate (profile) model (absent before format 1.4:
#: a column model): ``layer_features``, the names of the last features, which describe one
#: host layer, and ``target_units``; the single target is the layer's absorption change per km.
PROFILE_FIELD = "profile"
#: The target of a profile model.
PROFILE_TARGET = "layer_absorption_density"
#: The target of a longwave profile model: the layer's net-absorption change per km [W m-2 km-1].
LONGWAVE_PROFILE_TARGET = "longwave_layer_net_absorption_density"

#: Arrays of the training envelope: name -> dimension names.
ENVELOPE_ARRAYS = {"feature_min": ("feature",), "feature_max": ("feature",), "center": ("feature",),
          "scale": ("feature",), "components": ("component", "feature"), "component_variance": ("component",)}

#: Numbers of the training envelope besides its arrays.
ENVELOPE_SCALARS = ("residual_variance", "distance_threshold", "quantile", "n_samples")

#: Arrays with at most this many finite values are written as plain JSON lists.
PLAIN_LIMIT = 64

_DTYPES = {"float64": np.float64, "int8": np.int8, "int16": np.int16, "int32": np.int32}


def smallest_int_dtype(values):
    """The smallest of int8, int16, int32 that holds every value of an integer array."""
    values = np.asarray(values)
    low, high = (int(values.min()), int(values.max())) if values.size else (0, 0)
    for dtype in (np.int8, np.int16, np.int32):
        info = np.iinfo(dtype)
        if info.min <= low and high <= info.max:
            return dtype
    raise FormatError(f"integer values from {low} to {high} do not fit in int32")


def _shuffle(raw, itemsize):
    """Byte-transpose: all first bytes of the items, then all second bytes, ... (compresses better)."""
    return np.frombuffer(raw, dtype=np.uint8).reshape(-1, itemsize).T.tobytes()


def _unshuffle(raw, itemsize):
    return np.frombuffer(raw, dtype=np.uint8).reshape(itemsize, -1).T.tobytes()


def encode_array(array, plain_limit=PLAIN_LIMIT):
    """JSON object of a numpy array (see ``docs/export-format.md``, "Arrays in the JSON twin").

    Small all-finite arrays become plain lists (``data``); others are ``packed``: the
    little-endian bytes, byte-shuffled, zlib-compressed and base64-encoded.

    Parameters
    ----------
    array : ndarray
        float64, int8, int16 or int32.
    plain_limit : int
        Largest array written as a plain list (0: always packed).

    Returns
    -------
    dict
    """
    array = np.ascontiguousarray(array)
    if array.dtype.name not in _DTYPES:
        raise FormatError(f"cannot encode arrays of dtype {array.dtype.name}; allowed: {sorted(_DTYPES)}")
    entry = {"dtype": array.dtype.name, "shape": [int(n) for n in array.shape]}
    if array.size <= plain_limit and np.all(np.isfinite(array)):
        entry["data"] = array.ravel().tolist()
    else:
        raw = array.astype(array.dtype.newbyteorder("<"), copy=False).tobytes()
        packed = zlib.compress(_shuffle(raw, array.dtype.itemsize), 9)
        entry["packed"] = base64.b64encode(packed).decode("ascii")
    return entry


def decode_array(entry, name):
    """Numpy array from its JSON object; raise FormatError naming the field if malformed.

    Parameters
    ----------
    entry : dict
        As written by :func:`encode_array`.
    name : str
        Field name for messages, e.g. ``"boosted.leaf_value"``.

    Returns
    -------
    ndarray
    """
    if not isinstance(entry, dict) or "dtype" not in entry or "shape" not in entry:
        raise FormatError(f"field {name} must be an array object with dtype, shape and data or packed; "
                          f"got {_short(entry)}")
    dtype = _DTYPES.get(entry["dtype"])
    if dtype is None:
        raise FormatError(f"field {name} has dtype {entry['dtype']!r}; allowed: {sorted(_DTYPES)}")
    shape = entry["shape"]
    if not isinstance(shape, list) or not all(isinstance(n, int) and not isinstance(n, bool) and n >= 0
                                              for n in shape):
        raise FormatError(f"field {name} has shape {shape!r}; expected a list of non-negative integers")
    size = math.prod(shape)
    if ("data" in entry) == ("packed" in entry):
        raise FormatError(f"field {name} must hold exactly one of 'data' and 'packed'")
    if "data" in entry:
        data = entry["data"]
        if not isinstance(data, list) or len(data) != size:
            count = len(data) if isinstance(data, list) else type(data).__name__
            raise FormatError(f"field {name} has {count} values in 'data'; its shape {shape} needs {size}")
        integer = np.issubdtype(dtype, np.integer)
        ok = all(isinstance(v, int) if integer else isinstance(v, (int, float)) for v in data)
        if not ok or any(isinstance(v, bool) for v in data):
            kind = "integers" if integer else "numbers"
            raise FormatError(f"field {name} 'data' must hold only {kind} (dtype {entry['dtype']})")
        wide = np.asarray(data, dtype=np.float64 if not integer else np.int64)
        if integer and wide.size and (wide.min() < np.iinfo(dtype).min or wide.max() > np.iinfo(dtype).max):
            raise FormatError(f"field {name} holds values outside the range of {entry['dtype']}")
        return wide.astype(dtype).reshape(shape)
    try:
        raw = zlib.decompress(base64.b64decode(entry["packed"], validate=True))
    except (binascii.Error, zlib.error, TypeError, ValueError) as exc:
        raise FormatError(f"field {name}: 'packed' is not base64 of zlib data ({exc})") from None
    itemsize = np.dtype(dtype).itemsize
    if len(raw) != size * itemsize:
        raise FormatError(f"field {name} unpacks to {len(raw)} bytes; its shape {shape} and dtype "
                          f"{entry['dtype']} need {size * itemsize}")
    little = np.dtype(dtype).newbyteorder("<")
    return np.frombuffer(_unshuffle(raw, itemsize), dtype=little).astype(dtype).reshape(shape)


def _short(value, limit=80):
    text = repr(value)
    return text if len(text) <= limit else text[:limit] + "..."


def document_to_json(document):
    """Plain-JSON form of a document: arrays of the model section encoded by :func:`encode_array`."""
    out = dict(document)
    kind = document["model"]["kind"]
    out[kind] = {name: encode_array(np.asarray(value)) for name, value in document[kind].items()}
    if document.get(ENVELOPE_FIELD) is not None:
        # Always packed: the envelope's single-precision values pack to half their decimal length.
        out[ENVELOPE_FIELD] = {name: encode_array(np.asarray(value), plain_limit=0) if name in ENVELOPE_ARRAYS
                               else value for name, value in document[ENVELOPE_FIELD].items()}
    return out


def document_from_json(content, source):
    """Document from parsed JSON content: checks the layout and decodes the arrays.

    Parameters
    ----------
    content : object
        ``json.loads`` of a coefficient file.
    source : str
        File name for messages.

    Returns
    -------
    dict
        A document whose arrays are numpy arrays; not yet checked for consistency
        (see :func:`check_document`).
    """
    if not isinstance(content, dict):
        raise FormatError(f"coefficient file {source!r} must hold a JSON object; got {type(content).__name__}")
    check_header(content, source)
    kind = content["model"]["kind"]
    section = content.get(kind)
    if not isinstance(section, dict):
        raise FormatError(f"coefficient file {source!r} lacks the {kind!r} section of its model kind")
    out = dict(content)
    out[kind] = {name: decode_array(section[name], f"{kind}.{name}") if name in section else None
                 for name in ARRAYS[kind]}
    missing = [f"{kind}.{name}" for name, value in out[kind].items() if value is None]
    if missing:
        raise FormatError(f"coefficient file {source!r} lacks fields {missing}")
    field = content.get(ENVELOPE_FIELD)
    if isinstance(field, dict):
        out[ENVELOPE_FIELD] = {name: decode_array(value, f"{ENVELOPE_FIELD}.{name}") if name in ENVELOPE_ARRAYS
                               else value for name, value in field.items()}
    return out


def check_header(content, source):
    """Check format name, version, top-level keys and the model kind of a document."""
    found = content.get("format")
    if found != FORMAT_NAME:
        raise FormatError(f"{source!r} is not a surrogate3d coefficient file: field format is {_short(found)}; "
                          f"expected {FORMAT_NAME!r}")
    version = content.get("format_version")
    if (not isinstance(version, str) or re.fullmatch(r"\d+\.\d+", version) is None
            or version.split(".")[0] != FORMAT_VERSION.split(".")[0]):
        raise FormatError(f"coefficient file {source!r} has format_version {_short(version)}; this version "
                          f"reads {FORMAT_VERSION} (MAJOR.MINOR, the same major version)")
    for key, kind in TOP_LEVEL.items():
        if key not in content:
            raise FormatError(f"coefficient file {source!r} lacks field {key!r}")
        if not isinstance(content[key], kind):
            raise FormatError(f"coefficient file {source!r}: field {key!r} has type {type(content[key]).__name__}")
    model = content["model"]
    for key in ("name", "kind"):
        if not isinstance(model.get(key), str):
            raise FormatError(f"coefficient file {source!r}: field model.{key} must be a string; "
                              f"got {_short(model.get(key))}")
    if model["kind"] not in KINDS:
        raise FormatError(f"coefficient file {source!r}: model.kind is {model['kind']!r}; known kinds: {list(KINDS)}")


def _names(content, section, key, source):
    values = content[section].get(key)
    if not isinstance(values, list) or not values or not all(isinstance(v, str) and v for v in values):
        raise FormatError(f"coefficient file {source!r}: field {section}.{key} must be a non-empty list of "
                          f"strings; got {_short(values)}")
    if len(set(values)) != len(values):
        raise FormatError(f"coefficient file {source!r}: field {section}.{key} repeats names: {values}")
    return values


def check_document(document, source):
    """Check that the fields of a document agree with each other; raise FormatError if not.

    Checks the array dimensions against each other and against the feature and
    target lists, the model-specific rules, the clear-sky gate's feature indices and the
    training envelope
    (``docs/export-format.md``, "Checks on load").  Does not check the feature recipe
    (:mod:`surrogate3d.runtime.model` does).

    Parameters
    ----------
    document : dict
        From :func:`document_from_json` or the NetCDF reader.
    source : str
        File name for messages.
    """
    check_header(document, source)
    feature_names = _names(document, "features", "names", source)
    units = document["features"].get("units")
    if not isinstance(units, list) or len(units) != len(feature_names) or not all(isinstance(u, str) for u in units):
        raise FormatError(f"coefficient file {source!r}: features.units must list one unit string per feature "
                          f"({len(feature_names)}); got {_short(units)}")
    target_names = _names(document, "targets", "names", source)
    kind = document["model"]["kind"]
    arrays = document[kind]
    sizes = {"feature": (len(feature_names), "features.names"), "target": (len(target_names), "targets.names"),
             "pair_member": (2, "the pair layout")}
    for name, (dims, dtype_kind) in ARRAYS[kind].items():
        array = arrays[name]
        label = f"{kind}.{name}"
        if not isinstance(array, np.ndarray):
            raise FormatError(f"coefficient file {source!r}: field {label} is not an array")
        if array.ndim != len(dims):
            raise FormatError(f"coefficient file {source!r}: field {label} has {array.ndim} dimensions; "
                              f"expected {len(dims)} {dims}")
        if (dtype_kind == "f") != (array.dtype == np.float64) or array.dtype.kind not in "fi":
            expected = "float64" if dtype_kind == "f" else "a signed integer type"
            raise FormatError(f"coefficient file {source!r}: field {label} has dtype {array.dtype}; "
                              f"expected {expected}")
        for dim, n in zip(dims, array.shape):
            known, where = sizes.setdefault(dim, (n, label))
            if n != known:
                raise FormatError(f"coefficient file {source!r}: field {label} has length {n} along {dim}; "
                                  f"{where} has {known}")
    if kind == "ridge":
        _check_ridge(arrays, sizes, source)
    else:
        _check_trees(arrays, sizes, source)
    _check_gate(document, len(feature_names), source)
    _check_transforms(document, len(feature_names), len(target_names), source)
    if ENVELOPE_FIELD in document:
        check_envelope_field(document[ENVELOPE_FIELD], len(feature_names), source)
    if PROFILE_FIELD in document:
        _check_profile(document[PROFILE_FIELD], feature_names, target_names, source)


def _check_profile(field, feature_names, target_names, source):
    layer = field.get("layer_features") if isinstance(field, dict) else None
    if not isinstance(layer, list) or not layer or not all(isinstance(n, str) for n in layer) \
            or feature_names[-len(layer):] != layer or len(layer) >= len(feature_names):
        raise FormatError(f"coefficient file {source!r}: field {PROFILE_FIELD}.layer_features must list the last "
                          f"features.names (after at least one column feature); got {_short(layer)}")
    if target_names not in ([PROFILE_TARGET], [LONGWAVE_PROFILE_TARGET]):
        raise FormatError(f"coefficient file {source!r}: a profile model has the single target {PROFILE_TARGET!r} "
                          f"(longwave: {LONGWAVE_PROFILE_TARGET!r}); targets.names is {target_names}")


def clear_sky_gate(document):
    """The clear-sky gate of a checked document: ``(feature indices, tolerance)``.

    A sample whose features at these indices all have ``|x| <= tolerance`` gets exactly
    zero correction.  A document without the field (format 1.0) has no gate: ``([], 0.0)``.

    Parameters
    ----------
    document : dict

    Returns
    -------
    (list of int, float)
    """
    gate = document.get(GATE_FIELD) or {"feature_indices": [], "tolerance": 0.0}
    return [int(k) for k in gate["feature_indices"]], float(gate["tolerance"])


def _check_gate(document, n_feature, source):
    if GATE_FIELD not in document:
        return
    gate = document[GATE_FIELD]
    if not isinstance(gate, dict) or set(gate) != {"feature_indices", "tolerance"}:
        raise FormatError(f"coefficient file {source!r}: field {GATE_FIELD} must be an object with exactly "
                          f"feature_indices and tolerance; got {_short(gate)}")
    indices = gate["feature_indices"]
    if not isinstance(indices, list) or not all(isinstance(k, int) and not isinstance(k, bool) for k in indices):
        raise FormatError(f"coefficient file {source!r}: field {GATE_FIELD}.feature_indices must be a list of "
                          f"integers; got {_short(indices)}")
    for i, k in enumerate(indices):
        if not 0 <= k < n_feature:
            _fail_at(source, f"{GATE_FIELD}.feature_indices", i, k, f"a feature index < {n_feature}")
    if len(set(indices)) != len(indices):
        raise FormatError(f"coefficient file {source!r}: field {GATE_FIELD}.feature_indices repeats an index: "
                          f"{indices}")
    tolerance = gate["tolerance"]
    if isinstance(tolerance, bool) or not isinstance(tolerance, (int, float)) or not math.isfinite(tolerance) \
            or tolerance < 0:
        raise FormatError(f"coefficient file {source!r}: field {GATE_FIELD}.tolerance must be a finite number "
                          f">= 0; got {_short(tolerance)}")


def target_transforms(document):
    """The target transforms of a checked document, one ``dict`` or None per target.

    The correction of target ``m`` is ``offset + scale * y[m]``, where ``y`` is the model's
    output, ``offset = sum_k offset_coefficients[k] * x[offset_features[k]]`` and ``scale =
    max(x[scale_feature], scale_floor)`` (1 when ``scale_feature`` is -1); with
    ``outside_envelope = "offset"`` (format 1.6) a column outside the training envelope
    gets the offset alone.  A document without the field (before format 1.3) has none: a
    list of None.
    """
    field = document.get(TRANSFORM_FIELD)
    return list(field) if field is not None else [None] * len(document["targets"]["names"])


def _check_transforms(document, n_feature, n_target, source):
    if TRANSFORM_FIELD not in document:
        return
    field = document[TRANSFORM_FIELD]
    if not isinstance(field, list) or len(field) != n_target:
        raise FormatError(f"coefficient file {source!r}: field {TRANSFORM_FIELD} must be a list with one entry "
                          f"per target ({n_target}); got {_short(field)}")
    for m, spec in enumerate(field):
        label = f"{TRANSFORM_FIELD}[{m}]"
        if spec is None:
            continue
        if not isinstance(spec, dict) or not _TRANSFORM_KEYS <= set(spec) <= _TRANSFORM_KEYS | _TRANSFORM_OPTIONAL:
            raise FormatError(f"coefficient file {source!r}: field {label} must be null or an object with exactly "
                              f"{sorted(_TRANSFORM_KEYS)} (and optionally {sorted(_TRANSFORM_OPTIONAL)}); got "
                              f"{_short(spec)}")
        if spec.get("outside_envelope", "offset") != "offset":
            raise FormatError(f"coefficient file {source!r}: field {label}.outside_envelope must be 'offset' when "
                              f"given; got {_short(spec['outside_envelope'])}")
        scale, offsets, coefficients = spec["scale_feature"], spec["offset_features"], spec["offset_coefficients"]
        if isinstance(scale, bool) or not isinstance(scale, int) or not -1 <= scale < n_feature:
            raise FormatError(f"coefficient file {source!r}: field {label}.scale_feature must be a feature index "
                              f"< {n_feature} or -1; got {_short(scale)}")
        floor = spec["scale_floor"]
        if isinstance(floor, bool) or not isinstance(floor, (int, float)) or not math.isfinite(floor) or floor < 0:
            raise FormatError(f"coefficient file {source!r}: field {label}.scale_floor must be a finite number "
                              f">= 0; got {_short(floor)}")
        if not isinstance(offsets, list) or not isinstance(coefficients, list) or len(offsets) != len(coefficients):
            raise FormatError(f"coefficient file {source!r}: fields {label}.offset_features and "
                              f"offset_coefficients must be lists of one length")
        for i, k in enumerate(offsets):
            if isinstance(k, bool) or not isinstance(k, int) or not 0 <= k < n_feature:
                _fail_at(source, f"{label}.offset_features", i, k, f"a feature index < {n_feature}")
        for i, c in enumerate(coefficients):
            if isinstance(c, bool) or not isinstance(c, (int, float)) or not math.isfinite(c):
                _fail_at(source, f"{label}.offset_coefficients", i, c, "a finite number")


def _fail_at(source, label, index, value, rule, count=1):
    raise FormatError(f"coefficient file {source!r}: " + message(f"field {label}", rule, value, index, count))


def _check_rule(source, label, values, bad, rule):
    """FormatError at the first element of ``values`` where ``bad`` is True."""
    found = first_true(bad)
    if found is not None:
        index, count = found
        _fail_at(source, label, index, values[index].tolist(), rule, count)


def _check_finite(arrays, kind, names, source):
    for name in names:
        _check_rule(source, f"{kind}.{name}", arrays[name], ~np.isfinite(arrays[name]), "finite")


def _check_ridge(arrays, sizes, source):
    _check_finite(arrays, "ridge", ("feature_mean", "feature_scale", "coef", "intercept"), source)
    _check_rule(source, "ridge.feature_scale", arrays["feature_scale"], arrays["feature_scale"] <= 0.0, "> 0")
    n_feature, n_pair = sizes["feature"][0], arrays["interaction_pairs"].shape[0]
    n_term = sizes["term"][0]
    if n_term != n_feature + n_pair:
        raise FormatError(f"coefficient file {source!r}: ridge.coef has {n_term} terms; {n_feature} features and "
                          f"{n_pair} interaction pairs make {n_feature + n_pair}")
    pairs = arrays["interaction_pairs"]
    _check_rule(source, "ridge.interaction_pairs", pairs,
                (pairs[:, 0] < 0) | (pairs[:, 0] >= pairs[:, 1]) | (pairs[:, 1] >= n_feature),
                f"feature indices i < j < {n_feature}")
    if len({tuple(p) for p in pairs.tolist()}) != n_pair:
        raise FormatError(f"coefficient file {source!r}: ridge.interaction_pairs lists a pair twice")


def _check_trees(arrays, sizes, source):
    label = "boosted"
    n_feature, n_target = sizes["feature"][0], sizes["target"][0]
    n_tree, n_node = arrays["tree_target"].size, arrays["feature"].size
    offset = arrays["tree_offset"].astype(np.int64)
    if n_tree < 1:
        raise FormatError(f"coefficient file {source!r}: {label}.tree_target lists no tree")
    if offset[0] != 0 or offset[-1] != n_node or np.any(np.diff(offset) < 1):
        raise FormatError(f"coefficient file {source!r}: {label}.tree_offset must rise strictly from 0 to the "
                          f"node count {n_node}; got {_short(offset.tolist())}")
    target = arrays["tree_target"]
    _check_rule(source, f"{label}.tree_target", target, (target < 0) | (target >= n_target),
                f"a target index < {n_target}")
    _check_finite(arrays, label, ("baseline", "leaf_value"), source)
    thresholds = arrays["threshold_values"]
    if np.any(np.isnan(thresholds)) or np.any(np.diff(thresholds) <= 0):
        raise FormatError(f"coefficient file {source!r}: {label}.threshold_values must be strictly increasing "
                          "and not NaN")
    feature, index = arrays["feature"].astype(np.int64), arrays["threshold_index"].astype(np.int64)
    left, right = arrays["left"].astype(np.int64), arrays["right"].astype(np.int64)
    missing = arrays["missing_go_left"]
    leaf = feature == -1
    if arrays["leaf_value"].size != np.count_nonzero(leaf):
        raise FormatError(f"coefficient file {source!r}: {label}.leaf_value has {arrays['leaf_value'].size} values; "
                          f"{label}.feature marks {np.count_nonzero(leaf)} leaves")
    rules = [("feature", feature, (feature < -1) | (feature >= n_feature),
              f"-1 (leaf) or a feature index < {n_feature}"),
             ("threshold_index", index, np.where(leaf, index != -1, (index < 0) | (index >= thresholds.size)),
              f"-1 at a leaf and an index < {thresholds.size} elsewhere"),
             ("missing_go_left", missing, (missing != 0) & (missing != 1), "0 or 1")]
    tree_of_node = np.repeat(np.arange(n_tree), np.diff(offset))
    local = np.arange(n_node) - offset[tree_of_node]
    size = np.diff(offset)[tree_of_node]
    for name, child in (("left", left), ("right", right)):
        # Children come after their parent within the tree, so every path ends at a leaf.
        rules.append((name, child, np.where(leaf, child != -1, (child <= local) | (child >= size)),
                      "-1 at a leaf and a later node of the same tree elsewhere"))
    for name, values, bad, rule in rules:
        _check_rule(source, f"{label}.{name}", values, bad, rule)
    children = np.concatenate([(left + offset[tree_of_node])[~leaf], (right + offset[tree_of_node])[~leaf]])
    expected = np.setdiff1d(np.arange(n_node), offset[:-1])
    if children.size != expected.size or not np.array_equal(np.sort(children), expected):
        raise FormatError(f"coefficient file {source!r}: {label}.left and {label}.right do not form trees "
                          "(every node but a root must be the child of exactly one node)")


def check_envelope_field(field, n_feature, source, label="training_envelope"):
    """Check the ``training_envelope`` field of a coefficient document; raise FormatError naming the problem.

    Parameters
    ----------
    field : dict
        Arrays as numpy arrays, scalars as numbers.
    n_feature : int
        Length of ``features.names``.
    source : str
        File name for messages.
    """
    where = f"coefficient file {source!r}: field {label}"
    if not isinstance(field, dict) or set(field) != set(ENVELOPE_ARRAYS) | set(ENVELOPE_SCALARS):
        found = sorted(field) if isinstance(field, dict) else type(field).__name__
        raise FormatError(f"{where} must be an object with exactly "
                          f"{sorted(set(ENVELOPE_ARRAYS) | set(ENVELOPE_SCALARS))}; "
                          f"got {found}")
    for name, dims in ENVELOPE_ARRAYS.items():
        array = field[name]
        if not isinstance(array, np.ndarray) or array.dtype != np.float64 or array.ndim != len(dims):
            raise FormatError(f"{where}.{name} must be a float64 array of dimensions {dims}")
        if dims[-1] == "feature" and array.shape[-1] != n_feature:
            raise FormatError(f"{where}.{name} has length {array.shape[-1]} along feature; features.names has "
                              f"{n_feature}")
        _check_rule(source, f"{label}.{name}", array, ~np.isfinite(array), "finite")
    n_component = field["components"].shape[0]
    if not 1 <= n_component <= n_feature or field["component_variance"].shape != (n_component,):
        raise FormatError(f"{where}: components has {n_component} rows and component_variance "
                          f"{field['component_variance'].shape[0]} values; both must be the same count in "
                          f"[1, {n_feature}]")
    rules = [("feature_max", field["feature_max"] < field["feature_min"], ">= feature_min"),
             ("scale", field["scale"] <= 0.0, "> 0"),
             ("component_variance", field["component_variance"] <= 0.0, "> 0")]
    for name, bad, rule in rules:
        _check_rule(source, f"{label}.{name}", field[name], bad, rule)
    for name, low, low_open in (("residual_variance", 0.0, True), ("distance_threshold", 0.0, False),
                                ("quantile", 0.0, True)):
        value = field[name]
        if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value) \
                or (value <= low if low_open else value < low):
            raise FormatError(f"{where}.{name} must be a finite number {'>' if low_open else '>='} {low:g}; "
                              f"got {value!r}")
    if field["quantile"] > 1.0:
        raise FormatError(f"{where}.quantile must be at most 1; got {field['quantile']!r}")
    n = field["n_samples"]
    if isinstance(n, bool) or not isinstance(n, int) or n < 2:
        raise FormatError(f"{where}.n_samples must be an integer >= 2; got {n!r}")
