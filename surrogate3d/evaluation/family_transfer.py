"""Leave-one-family-out evaluation: how the corrections hold on a cloud family they never saw.

For every left-out family (regime), every model of the run is refitted on the run's
training scenes outside that family, with the hyperparameters the run chose (no new
search: a fit per model and family, on one thread, each cheaper than the final refit of
``train``), and scored on every scene of the family.  The predictions of all families form one
evaluation set, "left-out families": each sample is corrected by the models that never
saw its family, next to no correction and the two published baselines on the same
samples, and the report breaks it down by family, by solar zenith and by both.
"""

import time
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from threadpoolctl import threadpool_limits
from tqdm import tqdm

from ..learn.cv import family_splits
from ..learn.models import make_estimator
from ..learn.pairs_table import select_scenes
from ..runtime.envelope import EnvelopeCheck
from .predictions import consistent_correction, raw_correction, reference_predictions
from .scored_model import ScoredModel

#: Label of the evaluation set.
LEFT_OUT = "left-out families"

#: Suffix of the learned predictors' names in that set.
WITHOUT_FAMILY = " (trained without the family)"


@dataclass
class FamilyTransfer:
    """The left-out-families evaluation set and what its fits cost.

    Attributes
    ----------
    pairs : xarray.Dataset
        Every sample of the left-out families.
    predictions : dict of str -> ndarray (n_sample, n_target)
        No correction, the baselines, and every model as ``NAME (trained without the family)``.
    raw : dict of str -> ndarray
        The models' corrections before the consistency step (empty without it).
    outcomes : dict of str -> CorrectedFluxes or None
    envelope : dict of str -> EnvelopeCheck
        Each sample checked against the envelope of the model that predicted it.
    runs : pandas.DataFrame
        One row per family and model: training scenes and samples, test scenes and
        samples, fit CPU and wall seconds.
    """

    pairs: object
    predictions: dict
    raw: dict = field(default_factory=dict)
    outcomes: dict = field(default_factory=dict)
    envelope: dict = field(default_factory=dict)
    runs: pd.DataFrame = None


def leave_one_family_out(run, pairs, families, targets, consistency=True, quiet=False):
    """Refit every model without each family and score it on that family.

    Parameters
    ----------
    run : surrogate3d.learn.TrainingRun
        The trained run: its models' kinds and hyperparameters, its training scenes.
    pairs : xarray.Dataset
        Holds the run's training scenes and every scene of ``families``.
    families : sequence of str
        Regimes to leave out in turn (at least one).
    targets : sequence of str
    consistency : bool
        Score the corrections after the consistency step, as the other sets.
    quiet : bool
        Hide the progress bar.

    Returns
    -------
    FamilyTransfer
    """
    splits = family_splits(pairs, run.record["split"]["training_scenes"], families)
    tested = select_scenes(pairs, [s for split in splits for s in split.test_scenes])
    regime = np.asarray(tested["regime"].values).astype(str)
    n = tested.sizes["sample"]
    predictions = reference_predictions(tested, targets)
    raw, gated, checks, rows = {}, {}, {}, []
    for name in run.models:
        raw[name] = np.zeros((n, len(targets)))
        gated[name] = np.zeros(n, dtype=bool)
        checks[name] = []
    with tqdm(total=len(splits) * len(run.models), desc="leave one family out", unit="fit",
              disable=True if quiet else None, leave=False) as bar:
        for split in splits:
            rows_of_family = np.flatnonzero(regime == split.family)
            test = tested.isel(sample=rows_of_family)
            training = select_scenes(pairs, split.training_scenes)
            for name, trained in run.models.items():
                wall, cpu = time.perf_counter(), time.process_time()
                # One thread: the fits of a family are small, and OpenMP and BLAS threads spinning
                # on a busy machine made them 30 times as costly (demo pairs, 2 cores: 62 s of CPU
                # for the 12 fits against 2.0 s on one thread).
                with threadpool_limits(limits=1):
                    estimator = make_estimator(trained.kind, trained.card["hyperparameters"]).fit_pairs(
                        training, trained.card["feature_names"], targets)
                rows.append({"family": split.family, "model": name,
                             "training_scenes": len(split.training_scenes),
                             "training_samples": int(training.sizes["sample"]),
                             "test_scenes": len(split.test_scenes), "test_samples": int(rows_of_family.size),
                             "fit_cpu_seconds": time.process_time() - cpu,
                             "fit_wall_seconds": time.perf_counter() - wall})
                model = ScoredModel.from_estimator(name, trained.kind, estimator)
                correction, mask, X = raw_correction(model, test, targets)
                raw[name][rows_of_family] = correction
                gated[name][rows_of_family] = mask
                checks[name].append((rows_of_family, model.envelope_check(X)))
                bar.update()
    outcomes, envelope, as_predicted = {}, {}, {}
    for name in run.models:
        label = name + WITHOUT_FAMILY
        envelope[label] = _assemble(checks[name], n)
        if consistency:
            # Domains (one scene, sun and resolution) never straddle families: one pass serves all.
            outcomes[label] = consistent_correction(tested, targets, raw[name], gated[name])
            predictions[label] = outcomes[label].correction
            as_predicted[label] = raw[name]
        else:
            outcomes[label] = None
            predictions[label] = raw[name]
    return FamilyTransfer(pairs=tested, predictions=predictions, raw=as_predicted, outcomes=outcomes,
                          envelope=envelope, runs=pd.DataFrame(rows))


def _assemble(parts, n):
    """One EnvelopeCheck of all samples from the checks of each family's rows."""
    out = EnvelopeCheck(np.zeros(n, dtype=bool), np.zeros(n, dtype=bool), np.zeros(n, dtype=bool),
                        np.full(n, np.nan), np.full(n, -1))
    for rows, check in parts:
        if not check.available:
            return EnvelopeCheck.unavailable(n, check.note)
        for name in ("outside", "outside_range", "beyond_distance", "distance", "first_feature_outside"):
            getattr(out, name)[rows] = getattr(check, name)
    return out
