"""How many evaluated columns lie outside each model's training envelope, and how they are corrected.

For every evaluation set and learned model: the columns outside the feature ranges,
beyond the distance threshold and flagged (either, gate excepted), with the skill of
the model on the flagged and on the other columns, per target, in W m-2 (the headline
skill).  A flag that works picks out columns the model corrects worse.
"""

import numpy as np
import pandas as pd

from ..learn.pairs_table import target_matrix
from .metrics import error_metrics, watts_scale

#: Columns of the table.
ENVELOPE_COLUMNS = ("evaluation_set", "predictor", "group", "target", "n", "outside_range", "beyond_distance",
                    "outside", "share_outside", "skill_inside", "skill_outside", "rmse_inside", "rmse_outside")


def envelope_table(label, pairs, predictions, checks, targets, by_regime=False):
    """Flag counts and skill inside and outside the envelope of every checked model.

    Parameters
    ----------
    label : str
        Evaluation set.
    pairs : xarray.Dataset
    predictions : dict of str -> ndarray (n_sample, n_target) [1]
    checks : dict of str -> surrogate3d.runtime.envelope.EnvelopeCheck
        Models whose envelope was checked (a model without an envelope gives NaN counts).
    targets : sequence of str
    by_regime : bool
        Also one group per regime (the families of the left-out set).

    Returns
    -------
    pandas.DataFrame
        Columns :data:`ENVELOPE_COLUMNS`; RMSEs in W m-2, skills of the W m-2 errors.
    """
    true = target_matrix(pairs, targets)
    flux = watts_scale(pairs)
    groups = [("all", np.ones(pairs.sizes["sample"], dtype=bool))]
    if by_regime:
        regime = np.asarray(pairs["regime"].values).astype(str)
        groups += [(r, regime == r) for r in sorted(set(regime))]
    rows = []
    for name, check in checks.items():
        for group, members in groups:
            for m, target in enumerate(targets):
                row = {"evaluation_set": label, "predictor": name, "group": group, "target": target,
                       "n": int(members.sum())}
                if not check.available:
                    rows.append(row)
                    continue
                outside = check.outside & members
                inside = ~check.outside & members
                metrics = {part: error_metrics(predictions[name][mask, m], true[mask, m], scale=None if flux is None else flux[mask])
                           for part, mask in (("inside", inside), ("outside", outside))}
                row.update(outside_range=int((check.outside_range & members).sum()),
                           beyond_distance=int((check.beyond_distance & members).sum()),
                           outside=int(outside.sum()), share_outside=float(outside.sum() / max(members.sum(), 1)),
                           skill_inside=metrics["inside"]["skill"], skill_outside=metrics["outside"]["skill"],
                           rmse_inside=metrics["inside"]["rmse"], rmse_outside=metrics["outside"]["rmse"])
                rows.append(row)
    return pd.DataFrame(rows, columns=list(ENVELOPE_COLUMNS))
