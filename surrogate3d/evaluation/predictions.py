"""The corrections every predictor makes on an evaluation set.

The reference predictors are no correction (the independent column itself) and the two
published simple corrections stored in the pairs table; learned models predict from
the table's features and, by default, go through
:func:`surrogate3d.learn.consistency.apply_correction` as they would in a host model.
"""

import numpy as np

from ..errors import ValidationError
from ..learn.consistency import apply_correction
from ..learn.pairs_table import BASELINES, domain_groups, feature_matrix, target_matrix

NO_CORRECTION = "no correction"
_BALANCE_TARGETS = ("surface_downward_flux", "toa_upward_flux", "atmosphere_absorption")


def reference_predictions(pairs, targets):
    """Corrections of no correction and of the baselines, (n_sample, n_target) each [1].

    Returns
    -------
    dict of str -> ndarray
        ``"no correction"`` (zeros), ``"tilted independent column"``, ``"non-local independent pixel"``.
    """
    out = {NO_CORRECTION: np.zeros((pairs.sizes["sample"], len(targets)))}
    for name, variable in BASELINES.items():
        out[name] = target_matrix(pairs, targets, variable)
    return out


def model_correction(estimator, pairs, targets, consistency=True):
    """A learned model's correction of every sample, columns in ``targets`` order.

    Parameters
    ----------
    estimator : RidgeCorrection or BoostedCorrection
        Fitted with :meth:`fit_pairs`.
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
    model_targets = list(estimator.target_names_)
    missing = [t for t in targets if t not in model_targets]
    if missing:
        raise ValidationError(f"model predicts {model_targets}; it lacks targets {missing}")
    raw = estimator.predict_pairs(pairs)
    correction = raw[:, [model_targets.index(t) for t in targets]]
    if not consistency:
        return correction, None
    outcome = apply_correction(
        target_matrix(pairs, targets, "independent_column_flux"), correction, pairs["surface_albedo"].values,
        domain_groups(pairs), clip_nonnegative=True, energy_balance=all(t in targets for t in _BALANCE_TARGETS),
        targets=targets, clear_sky=estimator.clear_sky_mask(feature_matrix(pairs, estimator.feature_names_)))
    return outcome.correction, outcome
