"""Coefficient files as NetCDF, and the reader of both forms (NetCDF and the JSON twin).

The NetCDF file holds the same *document* as the JSON twin
(:mod:`~surrogate3d.core.coefficient_format`); :mod:`surrogate3d.export.coefficients`
writes both, the evaluation stage scores either.  The file is classic NetCDF (64-bit
offset): HDF5, under NetCDF-4, spends one to four kilobytes of headers on every variable
and dimension, more than the arrays of a small model hold.

Examples
--------
>>> read_coefficients("models/default/ridge.coefficients.nc")["model"]["kind"]
'ridge'
"""

import json
from pathlib import Path

import numpy as np
import xarray as xr

from ..errors import FormatError
from .coefficient_format import (ARRAYS, ENVELOPE_ARRAYS, ENVELOPE_FIELD, ENVELOPE_SCALARS, FORMAT_NAME, GATE_FIELD,
                                 PROFILE_FIELD, TRANSFORM_FIELD, check_document, document_from_json)
from .netcdf import open_dataset

#: Flavour of the NetCDF file (classic format with 64-bit offsets).
NETCDF_FORMAT = "NETCDF3_64BIT"


def document_to_dataset(document):
    """The NetCDF form (an xarray Dataset) of a document.

    Feature and target names are the coordinates ``feature`` and ``target``; every
    model array is a variable ``<kind>_<name>``, every array of the training envelope a
    variable ``envelope_<name>``; the other fields (the clear-sky gate and the envelope's
    numbers included) are JSON text in global attributes of the same names.
    """
    kind = document["model"]["kind"]
    ds = xr.Dataset(coords={"feature": list(document["features"]["names"]), "target": list(document["targets"]["names"])})
    for name, (dims, _) in ARRAYS[kind].items():
        variable = f"{kind}_{name}"
        ds[variable] = (dims, np.asarray(document[kind][name]))
        ds[variable].encoding = {"_FillValue": None}
    ds.attrs = {"format": document["format"], "format_version": document["format_version"],
                "model_name": document["model"]["name"], "model_kind": kind}
    ds.attrs["features"] = json.dumps({k: v for k, v in document["features"].items() if k != "names"})
    ds.attrs["targets"] = json.dumps({k: v for k, v in document["targets"].items() if k != "names"})
    for key in ("model", "feature_recipe", "provenance", "skill", GATE_FIELD, TRANSFORM_FIELD, PROFILE_FIELD):
        if key in document:
            ds.attrs[key] = json.dumps(document[key], allow_nan=False)
    if ENVELOPE_FIELD in document:
        field = document[ENVELOPE_FIELD]
        for name, dims in ENVELOPE_ARRAYS.items():
            values = np.asarray(field[name], dtype=np.float64)
            # The envelope is rounded to single precision (runtime/envelope.py): stored so
            # when that is exact, which halves its share of the file.
            single = values.astype(np.float32)
            exact = np.array_equal(single.astype(np.float64), values)
            ds[f"envelope_{name}"] = (dims, single if exact else values)
            ds[f"envelope_{name}"].encoding = {"_FillValue": None}
        ds.attrs[ENVELOPE_FIELD] = json.dumps({name: field[name] for name in ENVELOPE_SCALARS}, allow_nan=False)
    return ds


def dataset_to_document(ds, source):
    """The document held by a coefficient NetCDF Dataset; checked (FormatError naming the field)."""
    attrs = ds.attrs
    if attrs.get("format") != FORMAT_NAME:
        raise FormatError(f"{source!r} is not a surrogate3d coefficient file: attribute format is "
                          f"{attrs.get('format')!r}; expected {FORMAT_NAME!r}")
    content = {"format": attrs["format"], "format_version": attrs.get("format_version")}
    for key in ("model", "features", "targets", "feature_recipe", "provenance", "skill", GATE_FIELD, ENVELOPE_FIELD,
                TRANSFORM_FIELD, PROFILE_FIELD):
        if key not in attrs:
            if key in (GATE_FIELD, ENVELOPE_FIELD, TRANSFORM_FIELD, PROFILE_FIELD):   # optional: older files lack them
                continue
            raise FormatError(f"coefficient file {source!r} lacks attribute {key!r}")
        try:
            content[key] = json.loads(attrs[key])
        except (TypeError, ValueError) as exc:
            raise FormatError(f"coefficient file {source!r}: attribute {key!r} is not valid JSON ({exc})") from None
    for coord in ("feature", "target"):
        if coord not in ds.coords:
            raise FormatError(f"coefficient file {source!r} lacks the coordinate {coord!r}")
    if not isinstance(content["features"], dict) or not isinstance(content["targets"], dict):
        raise FormatError(f"coefficient file {source!r}: attributes features and targets must be JSON objects")
    content["features"] = {"names": [str(v) for v in ds["feature"].values], **content["features"]}
    content["targets"] = {"names": [str(v) for v in ds["target"].values], **content["targets"]}
    kind = content["model"].get("kind") if isinstance(content["model"], dict) else None
    if kind not in ARRAYS:
        raise FormatError(f"coefficient file {source!r}: model kind {kind!r} is not one of {sorted(ARRAYS)}")
    missing = [f"{kind}_{name}" for name in ARRAYS[kind] if f"{kind}_{name}" not in ds]
    if missing:
        raise FormatError(f"coefficient file {source!r} lacks variables {missing}")
    content[kind] = {name: np.asarray(ds[f"{kind}_{name}"].values) for name in ARRAYS[kind]}
    if ENVELOPE_FIELD in content:
        missing = [f"envelope_{name}" for name in ENVELOPE_ARRAYS if f"envelope_{name}" not in ds]
        if missing or not isinstance(content[ENVELOPE_FIELD], dict):
            raise FormatError(f"coefficient file {source!r}: attribute {ENVELOPE_FIELD} needs a JSON object and "
                              f"the variables envelope_*; lacks {missing}")
        content[ENVELOPE_FIELD].update({name: np.asarray(ds[f"envelope_{name}"].values, dtype=np.float64)
                                        for name in ENVELOPE_ARRAYS})
    check_document(content, source)
    return content


def read_coefficients(path):
    """Read a coefficient file, NetCDF or JSON twin, into a checked document.

    Parameters
    ----------
    path : str or Path

    Returns
    -------
    dict

    Raises
    ------
    surrogate3d.errors.FormatError
        Unreadable file, other format version, missing or inconsistent fields.
    """
    path = Path(path)
    if path.suffix.lower() == ".nc":
        return dataset_to_document(open_dataset(path, what="coefficient file"), str(path))
    if not path.is_file():
        raise FormatError(f"coefficient file {str(path)!r} does not exist")
    try:
        content = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, ValueError) as exc:
        raise FormatError(f"coefficient file {str(path)!r} is not valid JSON ({exc})") from None
    document = document_from_json(content, str(path))
    check_document(document, str(path))
    return document
