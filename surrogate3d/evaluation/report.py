"""The held-out skill report of a training run: ``surrogate3d evaluate``.

:func:`evaluate` scores every model of a model directory on the scenes the training run
held out (unseen seeds) and, leaving out every family (regime) in turn, on the families
the models never saw (:mod:`surrogate3d.evaluation.family_transfer`); every model is
compared on the same samples with no correction and the two published baselines.
:func:`write_report` (:mod:`surrogate3d.evaluation.report_writer`) writes the tables
(CSV and Markdown), the figures (PNG) and one self-contained HTML page.
"""

import html

import numpy as np

from tqdm import tqdm

from ..errors import ValidationError
from ..learn.model_directory import file_sha256, load_training_run
from ..core.pairs_table import read_pairs_table, table_spectrum
from ..learn.pairs_table import scene_table, select_scenes
from ..pairs.layer_features import layer_sum
from .breakdown import BREAKDOWNS, FAMILY_BREAKDOWNS, LONGWAVE_BREAKDOWNS, LONGWAVE_FAMILY_BREAKDOWNS
from .evaluation_sets import Evaluation, EvaluationSet, score_set, set_tables
from .family_transfer import LEFT_OUT, leave_one_family_out
from .importance import permutation_importance
from .learning_curve import learning_curve
from .predictions import consistent_correction, raw_correction
from .longwave_profile_skill import longwave_profile_skill
from .profile_skill import score_profiles
from .report_writer import write_report
from .scored_model import ScoredModel, profile_column_model

__all__ = ["HELD_OUT", "LEFT_OUT", "evaluate", "write_report"]

HELD_OUT = "held-out scenes"


def _check_scenes(pairs, scenes, what):
    present = scene_table(pairs)
    missing = [s for s in scenes if s not in present]
    if missing:
        raise ValidationError(f"pairs table lacks the {what} {missing[:8]}"
                              f"{' ...' if len(missing) > 8 else ''} named in training.json")


def _families(split, pairs, notes):
    """The families to leave out: the run's list (every regime for runs that have none), those in ``pairs``."""
    present = scene_table(pairs)
    regimes = sorted({regime for regime, _ in present.values()})
    families = split.get("left_out_families")
    if families is None:
        families = regimes if len(regimes) > 1 else []
    absent = [f for f in families if f not in regimes]
    if absent:
        notes.append(f"The left-out families {absent} have no scenes in the pairs file and are not evaluated.")
    families = [f for f in families if f in regimes]
    if families and not all(s in present for s in split["training_scenes"]):
        notes.append("The leave-one-family-out evaluation is left out: the pairs file lacks some training scenes.")
        return []
    return families


def evaluate(model_dir, pairs_path, *, consistency=True, learning_curve_points=4, importance_repeats=3, seed=0,
             quiet=False):
    """Score the models of a model directory on its held-out scenes and on every left-out family.

    Parameters
    ----------
    model_dir : str or Path
        Written by ``surrogate3d train``.
    pairs_path : str or Path
        Pairs table holding the held-out scenes (normally the training file; the
        leave-one-family-out evaluation and the learning curve also need the training
        scenes).
    consistency : bool
        Score learned corrections after :func:`~surrogate3d.learn.consistency.apply_correction`
        (non-negative fluxes, energy balance), as a host model would apply them.
    learning_curve_points : int
        Subset sizes of the learning curve (0 skips it).
    importance_repeats : int
        Permutations per feature for the importance (0 skips it).
    seed : int
        Seed of the permutations and of the learning-curve scene order.
    quiet : bool
        Hide progress bars.

    Returns
    -------
    surrogate3d.evaluation.evaluation_sets.Evaluation

    Raises
    ------
    surrogate3d.errors.FormatError
        Unreadable model directory or pairs file.
    surrogate3d.errors.ValidationError
        The pairs table lacks held-out scenes or features the models need.
    """
    run = load_training_run(model_dir)
    pairs = read_pairs_table(pairs_path)
    record, targets = run.record, list(run.record["targets"])
    spectrum = record.get("spectrum", "shortwave")
    if table_spectrum(pairs) != spectrum:
        raise ValidationError(f"the models of {str(model_dir)!r} are {spectrum} corrections; the pairs table "
                              f"{str(pairs_path)!r} is a {table_spectrum(pairs)} table")
    longwave = spectrum == "longwave"
    # The consistency step closes the solar budget; its longwave counterpart (surface net =
    # down - up, and the domain's net absorption balancing the outgoing flux) is not built yet.
    consistency = consistency and not longwave
    breakdowns, family_breakdowns = (LONGWAVE_BREAKDOWNS, LONGWAVE_FAMILY_BREAKDOWNS) if longwave \
        else (BREAKDOWNS, FAMILY_BREAKDOWNS)
    split = record["split"]
    if not split["held_out_scenes"]:
        raise ValidationError(f"model directory {str(model_dir)!r} held out no scenes "
                              "(split.held_out_scene_fraction = 0): nothing to evaluate")
    _check_scenes(pairs, split["held_out_scenes"], "held-out scenes")
    notes = []
    matches = file_sha256(pairs_path) == record["provenance"]["pairs_sha256"]
    if not matches:
        notes.append("The pairs file differs from the one the models were trained on (SHA-256); held-out scenes "
                     "are taken by name from training.json.")
    models = {name: ScoredModel.from_estimator(name, model.kind, model.estimator) for name, model in run.models.items()}
    steps = tqdm(total=4, desc="evaluate", unit="step", disable=True if quiet else None)
    held = select_scenes(pairs, split["held_out_scenes"])
    sets = [score_set(HELD_OUT, held, models, targets, consistency, breakdowns)]
    notes += [f"Model {name}: {check.note}." for name, check in sets[0].envelope.items() if not check.available]
    steps.update()

    family_runs = None
    families = _families(split, pairs, notes)
    if families:
        transfer = leave_one_family_out(run, pairs, families, targets, consistency, quiet)
        sets.append(EvaluationSet(LEFT_OUT, transfer.pairs, transfer.predictions, transfer.outcomes, transfer.raw,
                                  transfer.envelope, family_breakdowns))
        family_runs = transfer.runs
    table, envelope = set_tables(sets, targets, by_regime=(LEFT_OUT,))
    steps.update()

    importance = {}
    if importance_repeats > 0:
        importance = {name: permutation_importance(model, held, targets, importance_repeats, seed)
                      for name, model in models.items()}
    steps.update()

    curve, curve_model = None, None
    if learning_curve_points > 0:
        kinds = {name: model.kind for name, model in run.models.items()}
        curve_model = next((n for n, k in kinds.items() if k == "boosted"), next(iter(kinds)))
        training = split["training_scenes"]
        present = scene_table(pairs)
        if all(s in present for s in training):
            model = run.models[curve_model]
            curve = learning_curve(model.kind, model.card["hyperparameters"], pairs, training, held,
                                   model.card["feature_names"], targets, points=learning_curve_points, seed=seed,
                                   consistency=consistency, quiet=quiet)
        else:
            notes.append("The learning curve is left out: the pairs file lacks some training scenes.")
    steps.update()
    steps.close()
    profile = (longwave_profile_skill if longwave else _profile_skill)(run, held, targets, notes)

    intro = (f"<p>Models of <code>{html.escape(str(model_dir))}</code> (recipe "
             f"<code>{html.escape(str(record.get('recipe_name')))}</code>) scored on {len(split['held_out_scenes'])} "
             f"held-out scenes of unseen seeds ({held.sizes['sample']} samples)"
             + (f" and, trained without each in turn, on the families {', '.join(families)}" if family_runs is not None
                else "")
             + (", against no correction (the independent column) and the effective cloud fraction of broken clouds "
                "(after Killen and Ellingson 1994, docs/methods/longwave.md) on the same samples" if longwave
                else ", against no correction, the two published baselines and the direct-beam prior (where the "
                "pairs have it) on the same samples")
             + ". Pairs file "
             f"<code>{html.escape(str(pairs_path))}</code>"
             f"{' (the training file)' if matches else ' (not the training file)'}. "
             + ("Longwave corrections are scored as predicted (the consistency step is shortwave only); targets and "
                "errors are in W m-2." if longwave
                else "Learned corrections are scored after the consistency step (non-negative fluxes, direct + diffuse = "
                "total, energy balance per domain)." if consistency
                else "Learned corrections are scored as predicted (no consistency step).")
             + " Skill is that of the errors in W m-2 throughout.</p>")
    provenance = [(k, v) for k, v in record["provenance"].items() if k != "recipe_text"]
    provenance += [("training scenes", ", ".join(split["training_scenes"])),
                   ("held-out scenes", ", ".join(split["held_out_scenes"]))]
    title = "Held-out skill of the longwave 3D corrections" if longwave else "Held-out skill of the 3D corrections"
    return Evaluation(title=title, intro=intro, targets=targets, sets=sets,
                      table=table, envelope=envelope, consistency=consistency, notes=notes, provenance=provenance,
                      recipe_text=record["provenance"].get("recipe_text", ""),
                      summary={"model_dir": str(model_dir), "pairs_file": str(pairs_path),
                               "pairs_matches_training": matches},
                      importance=importance, curve=curve, curve_model=curve_model, family_runs=family_runs,
                      record=record, profile=profile, spectrum=spectrum)


def _profile_skill(run, held, targets, notes):
    """The profile model's held-out skill, or None without a profile model.

    As a host would use it: the column model's corrections (the first boosted model, else
    the first) with the absorption replaced by the profile's own column sum go through the
    consistency step, and the layers are matched to the absorption that comes out (when
    the absorption is a target); otherwise the layers keep their own sum.  Where the
    column model's clear-sky gate holds, the layers are zero too.
    """
    if run.profile is None:
        return None
    if "layer_absorption_target" not in held:
        notes.append("The profile model is not scored: the pairs table has no per-layer variables.")
        return None
    estimator = run.profile.estimator
    layers = estimator.predict_pairs(held)
    if "atmosphere_absorption" not in targets:
        return score_profiles(run.profile.name, estimator, held, layers=layers)
    model = profile_column_model(run)
    correction, gated, _ = raw_correction(model, held, targets)
    layers = np.where(gated[:, None] & np.isfinite(layers), 0.0, layers)
    m = targets.index("atmosphere_absorption")
    correction[:, m] = layer_sum(layers)
    column = consistent_correction(held, targets, correction, gated).correction[:, m]
    return score_profiles(run.profile.name, estimator, held, column, model.name, layers=layers)
