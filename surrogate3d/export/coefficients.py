"""Coefficient files: one trained model as a NetCDF file and its JSON twin.

Both files hold the same *document* (:mod:`surrogate3d.core.coefficient_format`): format
version, model kind and hyperparameters, the ordered features with units and their
recipe, the targets, the model arrays, the training provenance and, when a report
directory is given, the model's rows of the held-out skill table.  The JSON twin is
what the numpy-only runtime reads; the NetCDF file is for archives and for tools that
read NetCDF.  The NetCDF file is classic NetCDF (64-bit offset): HDF5, under NetCDF-4,
spends one to four kilobytes of headers on every variable and dimension, more than the
arrays of a small model hold.  ``docs/export-format.md`` documents every field.
"""

import csv
import json
import math
from pathlib import Path

from .. import __version__
from .._atomic import atomic_path, write_text_atomic
from ..core.coefficient_file import NETCDF_FORMAT, document_to_dataset
from ..core.coefficient_format import ENVELOPE_FIELD, FORMAT_NAME, FORMAT_VERSION, GATE_FIELD, \
    LONGWAVE_PROFILE_TARGET, PROFILE_FIELD, PROFILE_TARGET, TRANSFORM_FIELD, check_document, document_to_json
from ..core.netcdf import ENGINE
from ..errors import FormatError, ParameterError, ValidationError
from ..evaluation.metrics import HEADLINE_UNITS
from ..learn.model_directory import ESTIMATOR_FILE, file_sha256
from ..pairs.layer_features import LAYER_FEATURES
from ..pairs.longwave_layer_features import LONGWAVE_LAYER_FEATURES
from ..pairs.longwave_features import feature_recipe_from_dict, recipe_spectrum
from .flatten import clear_sky_gate, flatten, target_transforms, training_envelope

#: Suffixes of the two files of one model.
NETCDF_SUFFIX = ".coefficients.nc"
JSON_SUFFIX = ".coefficients.json"

#: Definition of the targets, stored with their names.
TARGET_DEFINITION = ("3D minus independent-column flux, host-column mean, as a fraction of the incident flux on "
                     "the horizontal (S0 cos(theta0))")

#: Definition of the targets of a longwave model.
LONGWAVE_TARGET_DEFINITION = "3D minus independent-column longwave field, host-column mean, in W m-2"

#: Definition of a profile model's target.
PROFILE_DEFINITION = ("3D minus independent-column absorption of a host layer per km of its thickness, as a fraction "
                      "of the incident flux on the horizontal")

#: Definition of a longwave profile model's target.
LONGWAVE_PROFILE_DEFINITION = ("3D minus independent-column longwave net absorption of a host layer per km of its "
                               "thickness, in W m-2 km-1")

#: Model-card kinds of profile models.
_PROFILE_KINDS = ("profile", "longwave_profile")

#: Provenance keys copied from the model card.
_CARD_PROVENANCE = ("archive_fingerprint", "pairs_file", "pairs_sha256", "recipe_file", "recipe_text",
                    "package_version", "scikit_learn_version", "numpy_version", "training_scenes",
                    "held_out_scenes", "excluded_regime")

#: Significant digits of the numbers of the skill table (metrics.csv, named with its
#: SHA-256, holds them in full).
_SKILL_DIGITS = 6

#: Columns of metrics.csv that are the same on every row of the whole-set table.
_CONSTANT_COLUMNS = ("breakdown", "group", "group_order", "group_value")

_SKILL_KEYS = ("evaluation_set", "predictor", "target", "units")



def build_document(trained, report_dir=None):
    """The coefficient document of a trained model.

    Parameters
    ----------
    trained : surrogate3d.learn.TrainedModel
        From :func:`surrogate3d.learn.load_model` or :func:`~surrogate3d.learn.load_training_run`.
    report_dir : str or Path, optional
        Report directory written by ``surrogate3d evaluate``; the model's rows of its
        ``metrics.csv`` become the skill table.

    Returns
    -------
    dict
        A checked document (arrays as numpy arrays).

    Raises
    ------
    surrogate3d.errors.FormatError
        The model card's feature recipe is not a valid recipe or does not make the
        model's features; ``metrics.csv`` is missing or malformed.
    surrogate3d.errors.ValidationError
        The estimator cannot be exported, or the report has no rows of this model.
    """
    card = trained.card
    profile = trained.kind in _PROFILE_KINDS
    # A profile model is evaluated by its boosted ensemble on (column, layer) rows.
    estimator = trained.estimator.boosted_ if profile else trained.estimator
    kind, arrays = flatten(estimator)
    if kind != trained.kind and not profile:
        raise ValidationError(f"model {trained.name!r}: model.json says kind {trained.kind!r}; the estimator is {kind}")
    try:
        recipe = feature_recipe_from_dict(card["feature_recipe"])
    except (ParameterError, FormatError, TypeError, ValueError) as exc:
        raise FormatError(f"model {trained.name!r}: the feature recipe in model.json is not a valid feature "
                          f"recipe: {exc}") from None
    units = dict(zip(recipe.column_names(), recipe.column_units()))
    names = list(card["feature_names"])
    missing = [n for n in names if n not in units]
    if missing:
        raise FormatError(f"model {trained.name!r}: features {missing} are not columns of its feature recipe, which "
                          f"makes {list(units)}")
    provenance = {key: card["provenance"].get(key) for key in _CARD_PROVENANCE}
    estimator_path = Path(trained.path) / ESTIMATOR_FILE
    provenance.update(model_format_version=card["format_version"],
                      estimator_sha256=file_sha256(estimator_path) if estimator_path.is_file() else None,
                      exported_with=f"surrogate3d {__version__}")
    cv = card.get("cross_validation") or {}
    # The chosen values of the searched parameters; fixed ones are in the hyperparameters.
    grid = cv.get("grid") or {}
    chosen = {k: v for k, v in (cv.get("best_params") or {}).items() if len(grid.get(k, [None, None])) > 1}
    document = {
        "format": FORMAT_NAME,
        "format_version": FORMAT_VERSION,
        "model": {"name": trained.name, "kind": kind, "hyperparameters": card["hyperparameters"],
                  "cross_validation": {**{k: cv.get(k) for k in ("grouping", "folds")}, "best_params": chosen,
                                       "best_score": cv.get("best_score")}},
        "features": {"names": names, "units": [units[n] for n in names],
                     "normalization": "standardize" if kind == "ridge" else "none"},
        "feature_recipe": recipe.to_dict(),
        "targets": ({"names": list(card["targets"]), "units": "W m-2", "definition": LONGWAVE_TARGET_DEFINITION}
                    if recipe_spectrum(recipe) == "longwave" else
                    {"names": list(card["targets"]), "units": "1", "definition": TARGET_DEFINITION}),
        kind: arrays,
        GATE_FIELD: clear_sky_gate(estimator),
        "provenance": provenance,
        "skill": None if report_dir is None else (profile_skill_table if profile else skill_table)(report_dir,
                                                                                                  trained.name),
    }
    if trained.kind == "longwave_profile":
        document["features"]["names"] = names + list(LONGWAVE_LAYER_FEATURES)
        document["features"]["units"] += [units for units, _ in LONGWAVE_LAYER_FEATURES.values()]
        document["targets"] = {"names": [LONGWAVE_PROFILE_TARGET], "units": "W m-2 km-1",
                               "definition": LONGWAVE_PROFILE_DEFINITION}
        document[PROFILE_FIELD] = {"layer_features": list(LONGWAVE_LAYER_FEATURES), "target_units": "W m-2 km-1"}
    elif profile:
        document["features"]["names"] = names + list(LAYER_FEATURES)
        document["features"]["units"] += [units for units, _ in LAYER_FEATURES.values()]
        document["targets"] = {"names": [PROFILE_TARGET], "units": "km-1", "definition": PROFILE_DEFINITION}
        document[PROFILE_FIELD] = {"layer_features": list(LAYER_FEATURES), "target_units": "km-1"}
    envelope = training_envelope(estimator)
    if envelope is not None:
        document[ENVELOPE_FIELD] = envelope
    transforms = target_transforms(estimator)
    if transforms is not None:
        document[TRANSFORM_FIELD] = transforms
    check_document(document, f"model {trained.name!r}")
    return document


def _cell(text):
    """A metrics.csv cell: a float to 6 significant digits (None for an empty or NaN cell) or the text."""
    try:
        value = float(text)
    except ValueError:
        return text if text != "" else None
    return float(f"{value:.{_SKILL_DIGITS}g}") if math.isfinite(value) else None


def _report_table(report_dir, name, columns, written_for):
    """``(path, header, rows)`` of a CSV table of a report, with the ``columns`` it must have."""
    path = Path(report_dir) / name
    if not path.is_file():
        raise FormatError(f"report directory {str(report_dir)!r} has no {name}; is it written by "
                          f"'surrogate3d evaluate'{written_for}?")
    try:
        with open(path, newline="", encoding="utf-8") as handle:
            table = list(csv.reader(handle))
    except (OSError, UnicodeDecodeError, csv.Error) as exc:
        raise FormatError(f"cannot read {str(path)!r}: {exc}") from None
    if not table or any(key not in table[0] for key in columns):
        raise FormatError(f"{str(path)!r} lacks the columns {list(columns)} of a skill table")
    header = table[0]
    if any(len(row) != len(header) for row in table[1:]):
        raise FormatError(f"{str(path)!r} has rows of another length than its header")
    return path, header, table


def skill_table(report_dir, model_name):
    """The rows of a report's ``metrics.csv`` that score ``model_name``, in the headline units (W m-2).

    Parameters
    ----------
    report_dir : str or Path
        Written by ``surrogate3d evaluate``.
    model_name : str
        Predictor name; its rows trained without the scored family
        (``"<name> (trained without ...)"``: the left-out families, or the held-out regime
        of older reports) are kept too.

    Returns
    -------
    dict
        ``source`` (file name), ``sha256``, ``columns`` and ``rows`` (lists of floats to
        6 significant digits, strings, or None for empty cells).
    """
    path, header, table = _report_table(report_dir, "metrics.csv", _SKILL_KEYS, "")
    keep = [i for i, column in enumerate(header) if column not in _CONSTANT_COLUMNS]
    predictor = header.index("predictor")
    # One skill everywhere (the W m-2 errors); the fractions' rows stay in metrics.csv.
    units = header.index("units")
    rows = [row for row in table[1:] if row[units] == HEADLINE_UNITS
            and (row[predictor] == model_name or row[predictor].startswith(f"{model_name} (trained without "))]
    if not rows:
        found = sorted({row[predictor] for row in table[1:]})
        raise ValidationError(f"{str(path)!r} has no rows of model {model_name!r}; its predictors are {found}")
    text = {header.index(k) for k in _SKILL_KEYS}
    return {"source": str(path), "sha256": file_sha256(path), "columns": [header[i] for i in keep],
            "rows": [[row[i] if i in text else _cell(row[i]) for i in keep] for row in rows]}


def profile_skill_table(report_dir, model_name):
    """The profile model's skill table: the rows of a report's ``profile_metrics.csv`` (as :func:`skill_table`)."""
    labels = ("quantity", "units", "predictor")
    path, header, table = _report_table(report_dir, "profile_metrics.csv", labels,
                                        " for a model directory with a profile model")
    text = {header.index(k) for k in labels}
    return {"source": str(path), "sha256": file_sha256(path), "columns": header,
            "rows": [[row[i] if i in text else _cell(row[i]) for i in range(len(header))] for row in table[1:]]}


def coefficient_json_text(document):
    """The JSON twin's text: compact separators, arrays encoded, standard JSON (no NaN)."""
    return json.dumps(document_to_json(document), separators=(",", ":"), allow_nan=False) + "\n"


def write_coefficients(document, out_dir, stem=None):
    """Write a document as ``<stem>.coefficients.nc`` and ``<stem>.coefficients.json`` (atomically).

    Parameters
    ----------
    document : dict
        From :func:`build_document`.
    out_dir : str or Path
        Created if missing.
    stem : str, optional
        File name stem; default the model name.

    Returns
    -------
    (Path, Path)
        The NetCDF and the JSON file.
    """
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    stem = stem or document["model"]["name"]
    netcdf = out_dir / f"{stem}{NETCDF_SUFFIX}"
    with atomic_path(netcdf, suffix=".tmp.nc") as tmp:
        document_to_dataset(document).to_netcdf(tmp, engine=ENGINE, format=NETCDF_FORMAT)
    twin = out_dir / f"{stem}{JSON_SUFFIX}"
    write_text_atomic(twin, coefficient_json_text(document))
    return netcdf, twin
