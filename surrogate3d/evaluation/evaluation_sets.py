"""What a skill report holds: evaluation sets with every predictor's corrections, and their tables.

``surrogate3d evaluate`` (:mod:`surrogate3d.evaluation.report`) and ``surrogate3d score``
(:mod:`surrogate3d.evaluation.scoring`) both build an :class:`Evaluation`;
:func:`surrogate3d.evaluation.report_writer.write_report` writes any of them.
"""

from dataclasses import dataclass, field

import pandas as pd

from .breakdown import BREAKDOWNS, metric_table
from .envelope_table import envelope_table
from .predictions import consistent_correction, raw_correction, reference_predictions


@dataclass
class EvaluationSet:
    """Predictions of every predictor on one set of samples.

    Attributes
    ----------
    label : str
    pairs : xarray.Dataset
    predictions : dict of str -> ndarray (n_sample, n_target)
        Every predictor's correction [1] as scored (learned ones after the consistency step).
    outcomes : dict of str -> CorrectedFluxes or None
        The learned models' consistency counts.
    raw : dict of str -> ndarray
        The learned models' corrections as predicted (with the consistency step only).
    envelope : dict of str -> EnvelopeCheck
        The learned models' training-envelope flags of the samples.
    breakdowns : tuple of str
        Breakdowns of the metric table.
    """

    label: str
    pairs: object
    predictions: dict
    outcomes: dict = field(default_factory=dict)
    raw: dict = field(default_factory=dict)
    envelope: dict = field(default_factory=dict)
    breakdowns: tuple = BREAKDOWNS

    @property
    def models(self):
        """The learned predictors of the set."""
        return [name for name in self.predictions if name in self.outcomes]


@dataclass
class Evaluation:
    """Everything a report shows.

    Attributes
    ----------
    title : str
        Page title.
    intro : str
        HTML of the summary section's first paragraph.
    targets : list of str
    sets : list of EvaluationSet
        The first set gets the maps, scatter plots and histograms.
    table : pandas.DataFrame
        Metric table of every set (:func:`surrogate3d.evaluation.breakdown.metric_table`).
    envelope : pandas.DataFrame
        Flag counts and skill inside and outside the envelopes
        (:func:`surrogate3d.evaluation.envelope_table.envelope_table`).
    consistency : bool
    notes : list of str
    provenance : list of (str, str)
        Items of the provenance table.
    recipe_text : str
        The training recipe, verbatim ("" if unknown).
    summary : dict
        Extra fields of ``summary.json`` (model and pairs file, whether it is the training file).
    importance : dict of str -> pandas.DataFrame
    curve : pandas.DataFrame or None
    curve_model : str or None
    family_runs : pandas.DataFrame or None
        The leave-one-family-out fits (:mod:`surrogate3d.evaluation.family_transfer`).
    record : dict or None
        ``training.json`` of the evaluated run (None when scoring a coefficient file).
    profile : surrogate3d.evaluation.profile_skill.ProfileEvaluation or None
        The heating-rate (profile) model's skill on the held-out scenes, if the run has one.
    spectrum : str
        ``"shortwave"`` or ``"longwave"`` (targets and errors in W m-2, no sun, no baselines).
    """

    title: str
    intro: str
    targets: list
    sets: list
    table: pd.DataFrame
    envelope: pd.DataFrame
    consistency: bool
    notes: list
    provenance: list
    recipe_text: str
    summary: dict
    importance: dict = field(default_factory=dict)
    curve: pd.DataFrame | None = None
    curve_model: str | None = None
    family_runs: pd.DataFrame | None = None
    record: dict | None = None
    profile: object = None
    spectrum: str = "shortwave"


def score_set(label, pairs, models, targets, consistency, breakdowns=BREAKDOWNS):
    """Every predictor's corrections of one set of samples.

    Parameters
    ----------
    label : str
    pairs : xarray.Dataset
        Whole domains.
    models : dict of str -> surrogate3d.evaluation.scored_model.ScoredModel
    targets : sequence of str
    consistency : bool
        Score learned corrections after the consistency step.
    breakdowns : tuple of str

    Returns
    -------
    EvaluationSet
    """
    predictions = reference_predictions(pairs, targets)
    outcomes, raw, envelope = {}, {}, {}
    for name, model in models.items():
        correction, gated, X = raw_correction(model, pairs, targets)
        envelope[name] = model.envelope_check(X)
        if consistency:
            outcomes[name] = consistent_correction(pairs, targets, correction, gated)
            predictions[name] = outcomes[name].correction
            raw[name] = correction
        else:
            outcomes[name] = None
            predictions[name] = correction
    return EvaluationSet(label=label, pairs=pairs, predictions=predictions, outcomes=outcomes, raw=raw,
                         envelope=envelope, breakdowns=breakdowns)


def set_tables(sets, targets, by_regime=()):
    """The metric table and the envelope table of evaluation sets.

    Parameters
    ----------
    sets : list of EvaluationSet
    targets : sequence of str
    by_regime : sequence of str
        Labels of the sets whose envelope counts are also given per regime.

    Returns
    -------
    (pandas.DataFrame, pandas.DataFrame)
    """
    table = pd.concat([metric_table(s.pairs, s.predictions, targets, s.label, s.breakdowns) for s in sets],
                      ignore_index=True)
    envelope = pd.concat([envelope_table(s.label, s.pairs, s.predictions, s.envelope, targets,
                                         by_regime=s.label in by_regime) for s in sets], ignore_index=True)
    return table, envelope
