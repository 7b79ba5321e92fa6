"""The corrections every predictor makes on an evaluation set.

The reference predictors are no correction (the independent column itself), the two
published simple corrections stored in the pairs table and, where the table has it as a
feature, the host's own direct-beam prior; learned models predict from
the table's features and, by default, go through
:func:`surrogate3d.learn.consistency.apply_correction` as they would in a host model.
"""

import numpy as np

from ..errors import ValidationError
from ..learn.consistency import apply_correction
from ..core.data_model import BASELINES, LONGWAVE_BASELINES
from ..learn.pairs_table import domain_groups, target_matrix

NO_CORRECTION = "no correction"
#: The direct-beam prior as a predictor (``docs/features.md``, "The direct-beam prior").
DIRECT_BEAM_PRIOR = "direct-beam prior"
_PRIOR_FEATURE = "direct_beam_prior_slant_minus_vertical"
_PRIOR_TARGETS = ("surface_downward_flux", "surface_downward_direct_flux")
_BALANCE_TARGETS = ("surface_downward_flux", "toa_upward_flux", "atmosphere_absorption")


def reference_predictions(pairs, targets):
    """Corrections of no correction and of the baselines, (n_sample, n_target) each [1].

    Returns
    -------
    dict of str -> ndarray
        ``"no correction"`` (zeros), ``"tilted independent column"``, ``"non-local independent pixel"``;
        for a longwave table ``"effective cloud fraction"`` (:mod:`surrogate3d.baselines.effective_cloud_fraction`)
        when the table has it; ``"direct-beam prior"`` when the table has the feature
        ``direct_beam_prior_slant_minus_vertical``: that prior direct correction for the
        direct and the total surface flux, nothing for the other targets (what a host gets
        by using the prior alone, the diffuse flux unchanged).
    """
    out = {NO_CORRECTION: np.zeros((pairs.sizes["sample"], len(targets)))}
    for baseline in (*BASELINES.values(), *LONGWAVE_BASELINES.values()):
        if baseline.variable in pairs:
            out[baseline.label] = target_matrix(pairs, targets, baseline.variable)
    if "feature" in pairs.coords and _PRIOR_FEATURE in pairs["feature"].values:
        prior = np.asarray(pairs["features"].sel(feature=_PRIOR_FEATURE).values, dtype=np.float64)
        row = np.zeros((prior.size, len(targets)))
        for k, target in enumerate(targets):
            if target in _PRIOR_TARGETS:
                row[:, k] = prior
        out[DIRECT_BEAM_PRIOR] = row
    return out


def corrects(predictor, target):
    """Whether a reference predictor corrects a target at all (the direct-beam prior leaves
    all but the direct and total surface flux alone; their rows equal no correction)."""
    return predictor != DIRECT_BEAM_PRIOR or target in _PRIOR_TARGETS


def skill_lines(rows):
    """Console lines ``  target: predictor skill (rmse), ...`` of a metric table's rows, leaving out
    reference predictors where they correct nothing (:func:`corrects`)."""
    lines = []
    for target, part in rows.groupby("target", sort=False):
        cells = ", ".join(f"{r.predictor} {r.skill:.2f} ({r.rmse:.1f})" for r in part.itertuples()
                          if corrects(r.predictor, target))
        lines.append(f"  {target}: {cells}")
    return lines


def raw_correction(model, pairs, targets):
    """A learned model's correction as predicted, and its clear-sky gate, on every sample.

    Parameters
    ----------
    model : surrogate3d.evaluation.scored_model.ScoredModel
    pairs : xarray.Dataset
    targets : sequence of str
        Must all be targets of the model.

    Returns
    -------
    correction : ndarray (n_sample, n_target) [1]
        Columns in ``targets`` order.
    gated : ndarray of bool (n_sample,)
        Samples the clear-sky gate sets to zero.
    X : ndarray (n_sample, n_feature)
        The model's features.
    """
    missing = [t for t in targets if t not in model.target_names]
    if missing:
        raise ValidationError(f"model {model.name!r} predicts {model.target_names}; it lacks targets {missing}")
    X = model.features(pairs)
    raw = model.predict(X)
    return raw[:, [model.target_names.index(t) for t in targets]], model.clear_sky_mask(X), X


def consistent_correction(pairs, targets, correction, clear_sky):
    """The consistency step of a host model applied to a correction (non-negative fluxes, energy balance).

    Parameters
    ----------
    pairs : xarray.Dataset
        Whole domains (all host columns of a scene at one sun geometry and resolution).
    targets : sequence of str
    correction : ndarray (n_sample, n_target) [1]
    clear_sky : ndarray of bool (n_sample,)
        Gated samples: they keep a zero correction.

    Returns
    -------
    surrogate3d.learn.consistency.CorrectedFluxes
    """
    return apply_correction(
        target_matrix(pairs, targets, "independent_column_flux"), correction, pairs["surface_albedo"].values,
        domain_groups(pairs), clip_nonnegative=True, energy_balance=all(t in targets for t in _BALANCE_TARGETS),
        targets=targets, clear_sky=clear_sky)


def model_correction(model, pairs, targets, consistency=True):
    """A learned model's correction of every sample, columns in ``targets`` order.

    Parameters
    ----------
    model : surrogate3d.evaluation.scored_model.ScoredModel
    pairs : xarray.Dataset
        Evaluation samples; whole domains (all host columns of a scene at one sun
        geometry and resolution) for the energy balance to be meaningful.
    targets : sequence of str
        Must all be targets of the model.
    consistency : bool
        Apply :func:`~surrogate3d.learn.consistency.apply_correction` (non-negative
        fluxes; energy balance when total, TOA and absorption are all targets), keeping
        the samples of the model's clear-sky gate at zero.

    Returns
    -------
    correction : ndarray (n_sample, n_target) [1]
    outcome : CorrectedFluxes or None
        Clipping and balance counts (None without ``consistency``).
    """
    correction, gated, _ = raw_correction(model, pairs, targets)
    if not consistency:
        return correction, None
    outcome = consistent_correction(pairs, targets, correction, gated)
    return outcome.correction, outcome
