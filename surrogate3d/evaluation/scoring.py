"""Scoring any trained correction on any pairs table: ``surrogate3d score``.

:func:`score` loads an exported coefficient file (JSON twin or NetCDF) or a trained model
directory, checks that the pairs table holds the model's features, computed with the
model's feature recipe, and its targets, and scores the model on every sample of the
table against no correction and the published baselines, with the report of
``surrogate3d evaluate``: this is how a user checks the shipped model on their own
benchmarks (``docs/bring-your-own-benchmarks.md``).  Columns outside a model's training
envelope are flagged and counted, never refused.
"""

import html
import json
from pathlib import Path

from ..core.coefficient_file import read_coefficients
from ..core.pairs_table import read_pairs_table, table_spectrum
from ..errors import FormatError, ParameterError, ValidationError
from ..learn.model_directory import MODEL_CARD, TRAINING_FILE, file_sha256, load_model, load_training_run
from ..learn.pairs_table import feature_names, scene_table, target_names
from ..pairs.features import FEATURES
from ..pairs.recipe import FeatureRecipe
from ..runtime.model import CorrectionModel
from .breakdown import BREAKDOWNS, LONGWAVE_BREAKDOWNS
from .evaluation_sets import Evaluation, score_set, set_tables
from .importance import permutation_importance
from .scored_model import ScoredModel

#: Label of the evaluation set: every sample of the scored pairs table.
SCORED = "scored samples"


def load_scored_models(source):
    """The models of a coefficient file or model directory, with what the report says about them.

    Parameters
    ----------
    source : str or Path
        A coefficient file (``.json`` twin or ``.nc``), a model directory written by
        ``surrogate3d train`` (``training.json``: every model of the run) or one model's
        subdirectory (``model.json``).

    Returns
    -------
    models : dict of str -> ScoredModel
    recipes : dict of str -> dict
        Each model's feature recipe (as stored).
    provenance : dict
        Of the file or run: the training pairs file and its SHA-256, training scenes,
        recipe text ...

    Raises
    ------
    surrogate3d.errors.FormatError
        Neither a coefficient file nor a model directory, or an unreadable one.
    """
    path = Path(source)
    if path.is_file():
        document = read_coefficients(path)
        model = CorrectionModel.from_document(document, str(path))
        if model.layer_feature_names:
            _refuse_profile(path)
        provenance = {**document["provenance"], "coefficient_file": str(path), "format_version":
                      document["format_version"], "coefficient_sha256": file_sha256(path)}
        return {model.name: ScoredModel.from_runtime(model)}, {model.name: document["feature_recipe"]}, provenance
    if (path / TRAINING_FILE).is_file():
        run = load_training_run(path)
        trained = run.models
        provenance = dict(run.record["provenance"], training_scenes=run.record["split"]["training_scenes"])
    elif (path / MODEL_CARD).is_file():
        one = load_model(path)
        if one.kind in ("profile", "longwave_profile"):
            _refuse_profile(path)
        trained = {one.name: one}
        provenance = dict(one.card["provenance"])
    else:
        raise FormatError(f"{str(path)!r} is neither a coefficient file (.coefficients.json or .coefficients.nc) nor a "
                          f"model directory ({TRAINING_FILE} or {MODEL_CARD}); see 'surrogate3d score --help'")
    provenance["model_dir"] = str(path)
    models = {name: ScoredModel.from_estimator(name, model.kind, model.estimator) for name, model in trained.items()}
    return models, {name: model.card["feature_recipe"] for name, model in trained.items()}, provenance


def _recipe(data):
    try:
        return FeatureRecipe.from_dict(data)
    except (ParameterError, FormatError, TypeError, ValueError):
        return None


def check_pairs_match(model, recipe, pairs, label="the pairs table"):
    """Raise ValidationError naming the first feature (or target) of ``model`` that ``pairs`` lacks or computes
    otherwise.

    A feature matches when the table has a column of its name, of the same unit, computed
    with the same values of the recipe parameters it depends on (``docs/features.md``).

    Parameters
    ----------
    model : ScoredModel
    recipe : dict
        The model's feature recipe, as stored.
    pairs : xarray.Dataset
    label : str
        How to name the table in messages.
    """
    available = feature_names(pairs)
    missing = [f for f in model.feature_names if f not in available]
    if missing:
        more = f" (and {len(missing) - 1} more)" if len(missing) > 1 else ""
        raise ValidationError(f"{label} lacks feature {missing[0]!r}{more} needed by model {model.name!r}; make "
                              f"the pairs with the model's feature recipe (surrogate3d pairs ... --recipe FILE; "
                              f"the shipped models': training/features.toml)")
    theirs_text = pairs.attrs.get("feature_recipe", "{}")
    ours, theirs = _recipe(recipe), _recipe(json.loads(theirs_text))
    if ours is None or theirs is None:
        # Recipes of our feature library are compared feature by feature; others must be the same.
        if recipe != json.loads(theirs_text):
            raise ValidationError(f"{label} was made with another feature recipe than model {model.name!r}; its "
                                  f"features {model.feature_names[:3]}... may be computed otherwise")
    else:
        _check_recipes(model, ours, theirs, label)
    missing = [t for t in model.target_names if t not in target_names(pairs)]
    if missing:
        raise ValidationError(f"{label} lacks target {missing[0]!r} predicted by model {model.name!r}")


def _check_recipes(model, ours, theirs, label):
    units = dict(zip(theirs.column_names(), theirs.column_units()))
    our_units = dict(zip(ours.column_names(), ours.column_units()))
    producer = dict(zip(theirs.column_names(), theirs.column_features()))
    for name in model.feature_names:
        if name not in units:
            raise ValidationError(f"{label}'s feature recipe does not make feature {name!r} of model {model.name!r}")
        if units[name] != our_units.get(name, units[name]):
            raise ValidationError(f"feature {name!r} of model {model.name!r} is in {our_units[name]!r}; {label} has "
                                  f"it in {units[name]!r}")
        for parameter in FEATURES[producer[name]].parameters:
            if ours.parameters[parameter] != theirs.parameters[parameter]:
                raise ValidationError(f"feature {name!r} of model {model.name!r} was computed with {parameter} = "
                                      f"{ours.parameters[parameter]!r} in training; {label}'s feature recipe uses "
                                      f"{theirs.parameters[parameter]!r}")


def _refuse_profile(path):
    raise ValidationError(f"{str(path)!r} is a heating-rate (profile) model; 'surrogate3d score' scores column "
                          "corrections: 'surrogate3d evaluate MODEL_DIR PAIRS' scores the profile model of a run")


def score(source, pairs_path, *, consistency=True, importance_repeats=3, seed=0, quiet=False):
    """Score a coefficient file or trained model directory on every sample of a pairs table.

    Parameters
    ----------
    source : str or Path
        A coefficient file (``.json`` or ``.nc``) or a model directory (every model of the
        run) or one model's subdirectory.
    pairs_path : str or Path
        A pairs table (``docs/pairs-format.md``), e.g. made from your own benchmarks.
    consistency : bool
        Score learned corrections after the consistency step, as a host model applies them.
    importance_repeats : int
        Permutations per feature for the importance (0 skips it).
    seed : int
        Seed of the permutations.
    quiet : bool
        Hide progress bars.

    Returns
    -------
    surrogate3d.evaluation.evaluation_sets.Evaluation

    Raises
    ------
    surrogate3d.errors.FormatError
        Unreadable model or pairs file.
    surrogate3d.errors.ValidationError
        The pairs table lacks a feature or target of a model, or computes a feature with
        other recipe parameters (the first one is named).
    """
    models, recipes, provenance = load_scored_models(source)
    pairs = read_pairs_table(pairs_path)
    spectrum = table_spectrum(pairs)
    for name, model in models.items():
        theirs = recipes[name].get("spectrum", "shortwave") if isinstance(recipes[name], dict) else "shortwave"
        if theirs != spectrum:
            raise ValidationError(f"model {name!r} is a {theirs} correction; pairs table {str(pairs_path)!r} is a "
                                  f"{spectrum} table")
        check_pairs_match(model, recipes[name], pairs, label=f"pairs table {str(pairs_path)!r}")
    longwave = spectrum == "longwave"
    consistency = consistency and not longwave
    targets = list(next(iter(models.values())).target_names)
    scored = score_set(SCORED, pairs, models, targets, consistency, LONGWAVE_BREAKDOWNS if longwave else BREAKDOWNS)
    table, envelope = set_tables([scored], targets, by_regime=(SCORED,))

    notes = []
    scenes = scene_table(pairs)
    training = set(provenance.get("training_scenes") or [])
    matches = file_sha256(pairs_path) == provenance.get("pairs_sha256")
    if matches or training & set(scenes):
        notes.append(f"{len(training & set(scenes))} of the {len(scenes)} scenes of the pairs file are training "
                     f"scenes of the model{' (it is the training pairs file)' if matches else ''}: their skill is "
                     "not a held-out skill.")
    for name, check in scored.envelope.items():
        if not check.available:
            notes.append(f"Model {name}: {check.note}.")
    importance = ({name: permutation_importance(model, pairs, targets, importance_repeats, seed)
                   for name, model in models.items()} if importance_repeats > 0 else {})

    flagged = "; ".join(f"{name}: {check.n_outside} of {check.outside.size} columns outside its training envelope"
                        for name, check in scored.envelope.items() if check.available)
    if longwave:
        compared = ("against no correction and the effective cloud fraction of broken clouds (longwave: targets and "
                    "errors in W m-2, scored as predicted). ")
    else:
        compared = ("against no correction, the two published baselines and the direct-beam prior (where the pairs "
                    "have it) on the same samples. "
                    + ("Learned corrections are scored after the consistency step (non-negative fluxes, direct + "
                       "diffuse = total, energy balance per domain). " if consistency
                       else "Learned corrections are scored as predicted (no consistency step). "))
    intro = (f"<p>{html.escape(', '.join(models))} of <code>{html.escape(str(source))}</code> scored on every sample "
             f"of <code>{html.escape(str(pairs_path))}</code> ({len(scenes)} scenes, {pairs.sizes['sample']} "
             f"samples), {compared}"
             + "Skill is that of the errors in W m-2 throughout." + (f" {html.escape(flagged)}." if flagged else "")
             + "</p>")
    title = f"Skill of the {'longwave ' if longwave else ''}3D corrections on a pairs table"
    return Evaluation(title=title, intro=intro, targets=targets,
                      sets=[scored], table=table, envelope=envelope, consistency=consistency, notes=notes,
                      provenance=[(k, v) for k, v in provenance.items() if k != "recipe_text"],
                      recipe_text=provenance.get("recipe_text") or "",
                      summary={"scored": str(source), "pairs_file": str(pairs_path), "pairs_matches_training": matches},
                      importance=importance, spectrum=spectrum)
