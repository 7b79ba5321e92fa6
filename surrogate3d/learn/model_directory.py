"""The trained-model directory: one subdirectory per model plus the training record.

Layout (``docs/methods/models-and-metrics.md``)::

    MODEL_DIR/
      training.json                 split, recipe, provenance; written last
      <model>/model.json            model card: kind, hyperparameters, targets, features, CV scores
      <model>/estimator.joblib      the fitted estimator
      profile/                      the heating-rate (profile) model, when the recipe has one:
                                    model.json (kind "profile", longwave "longwave_profile")
                                    and estimator.joblib

``estimator.joblib`` is a pickle: load model directories only from sources you trust.
"""

import hashlib
import json
from dataclasses import dataclass
from pathlib import Path

import joblib

from .._atomic import atomic_path, write_text_atomic
from ..core.data_model import MODEL_FORMAT_VERSION
from ..errors import FormatError
from .models import MODEL_KINDS
from .longwave_profile_model import LongwaveProfileCorrection
from .profile_model import ProfileCorrection

MODEL_CARD = "model.json"
ESTIMATOR_FILE = "estimator.joblib"
#: Subdirectory of the profile model (``training.json`` names it as ``profile_model``).
PROFILE_MODEL = "profile"
#: The model-card kind of the profile model of each spectrum.
PROFILE_KINDS = {"shortwave": "profile", "longwave": "longwave_profile"}
#: Every estimator class a model card's ``kind`` may name.
_KINDS = {**MODEL_KINDS, "profile": ProfileCorrection, "longwave_profile": LongwaveProfileCorrection}
TRAINING_FILE = "training.json"

_CARD_KEYS = ("format_version", "name", "kind", "hyperparameters", "targets", "feature_names", "feature_recipe",
              "cross_validation", "provenance")
_TRAINING_KEYS = ("format_version", "models", "split", "provenance")


@dataclass
class TrainedModel:
    """A model loaded from its directory.

    Attributes
    ----------
    name : str
    kind : str
        ``"ridge"`` or ``"boosted"``.
    estimator : RidgeCorrection or BoostedCorrection
        Fitted, with ``feature_names_`` and ``target_names_``.
    card : dict
        The content of ``model.json``.
    path : Path
    """

    name: str
    kind: str
    estimator: object
    card: dict
    path: Path


@dataclass
class TrainingRun:
    """A whole model directory: the training record and every model.

    Attributes
    ----------
    record : dict
        The content of ``training.json``.
    models : dict of str -> TrainedModel
    path : Path
    profile : TrainedModel or None
        The heating-rate (profile) model, if the recipe had one.
    """

    record: dict
    models: dict
    path: Path
    profile: TrainedModel = None


def file_sha256(path):
    """SHA-256 hex digest of a file's bytes."""
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def _json_text(content):
    return json.dumps(content, indent=2, sort_keys=False, allow_nan=True) + "\n"


def write_model(directory, estimator, card):
    """Write one model directory (estimator first, then the card), each file atomically.

    Parameters
    ----------
    directory : str or Path
        Created if missing.
    estimator : RidgeCorrection or BoostedCorrection
        Fitted.
    card : dict
        Must hold the keys of a model card (see the module docstring).
    """
    directory = Path(directory)
    directory.mkdir(parents=True, exist_ok=True)
    missing = [k for k in _CARD_KEYS if k not in card]
    if missing:
        raise FormatError(f"model card for {str(directory)!r} lacks keys {missing}")
    with atomic_path(directory / ESTIMATOR_FILE) as tmp:
        joblib.dump(estimator, tmp, compress=3)
    write_text_atomic(directory / MODEL_CARD, _json_text(card))
    return directory


def write_training_record(model_dir, record):
    """Write ``training.json`` atomically (the last file of a training run)."""
    missing = [k for k in _TRAINING_KEYS if k not in record]
    if missing:
        raise FormatError(f"training record for {str(model_dir)!r} lacks keys {missing}")
    write_text_atomic(Path(model_dir) / TRAINING_FILE, _json_text(record))


def _read_json(path, what):
    if not path.is_file():
        raise FormatError(f"{what} {str(path)!r} does not exist")
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, ValueError) as exc:
        raise FormatError(f"{what} {str(path)!r} is not valid JSON ({exc})") from None


def _check_version(content, path, what):
    found = content.get("format_version") if isinstance(content, dict) else None
    if found is None:
        raise FormatError(f"{what} {str(path)!r} has no format_version; is it a surrogate3d model directory?")
    if str(found).split(".")[0] != MODEL_FORMAT_VERSION.split(".")[0]:
        raise FormatError(f"{what} {str(path)!r} has format_version {found}; this version reads "
                          f"{MODEL_FORMAT_VERSION}")


def load_model(path):
    """Load one trained model from its directory and check it against its card.

    Parameters
    ----------
    path : str or Path
        A model subdirectory holding ``model.json`` and ``estimator.joblib``.

    Returns
    -------
    TrainedModel

    Raises
    ------
    surrogate3d.errors.FormatError
        A file is missing or unreadable, the format version differs, the card lacks keys,
        or the estimator does not match the card (kind, features, targets).
    """
    path = Path(path)
    if not path.is_dir():
        raise FormatError(f"model directory {str(path)!r} does not exist")
    card_path = path / MODEL_CARD
    card = _read_json(card_path, "model card")
    _check_version(card, card_path, "model card")
    missing = [k for k in _CARD_KEYS if k not in card]
    if missing:
        raise FormatError(f"model card {str(card_path)!r} lacks keys {missing}")
    if card["kind"] not in _KINDS:
        raise FormatError(f"model card {str(card_path)!r} has kind {card['kind']!r}; known: {sorted(_KINDS)}")
    estimator_path = path / ESTIMATOR_FILE
    if not estimator_path.is_file():
        raise FormatError(f"model directory {str(path)!r} lacks {ESTIMATOR_FILE}")
    try:
        estimator = joblib.load(estimator_path)
    except Exception as exc:  # joblib re-raises whatever unpickling hits
        raise FormatError(f"cannot read {str(estimator_path)!r}: {type(exc).__name__}: {exc}") from None
    expected = _KINDS[card["kind"]]
    if type(estimator) is not expected:
        raise FormatError(f"{str(estimator_path)!r} holds a {type(estimator).__name__}; model.json says "
                          f"{card['kind']} ({expected.__name__})")
    for attribute, key in (("feature_names_", "feature_names"), ("target_names_", "targets")):
        if list(getattr(estimator, attribute, None) or []) != list(card[key]):
            raise FormatError(f"{str(estimator_path)!r}: {attribute} {getattr(estimator, attribute, None)} "
                              f"differs from {key} {card[key]} in model.json")
    return TrainedModel(name=card["name"], kind=card["kind"], estimator=estimator, card=card, path=path)


def load_training_run(model_dir):
    """Load a model directory written by ``surrogate3d train``.

    Parameters
    ----------
    model_dir : str or Path

    Returns
    -------
    TrainingRun

    Raises
    ------
    surrogate3d.errors.FormatError
        ``training.json`` is missing (an unfinished run), of another format version, or
        lists a model that cannot be loaded.
    """
    model_dir = Path(model_dir)
    if not model_dir.is_dir():
        raise FormatError(f"model directory {str(model_dir)!r} does not exist")
    record_path = model_dir / TRAINING_FILE
    record = _read_json(record_path, "training record")
    _check_version(record, record_path, "training record")
    missing = [k for k in _TRAINING_KEYS if k not in record]
    if missing:
        raise FormatError(f"training record {str(record_path)!r} lacks keys {missing}")
    # Directories written before leave-one-family-out evaluation also hold regime-transfer
    # models (transfer/); evaluate refits them, with the same result, so they are not read.
    models = {name: load_model(model_dir / name) for name in record["models"]}
    profile = record.get("profile_model")
    return TrainingRun(record=record, models=models, path=model_dir,
                       profile=load_model(model_dir / profile) if profile else None)
