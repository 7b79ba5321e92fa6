"""Metric tables: every predictor on the same samples, overall and broken down.

Breakdowns: regime, solar zenith angle bin, host-column cloud fraction bin, host
resolution, and regime and solar zenith bin together (for the left-out families).  Each row of a table is one (evaluation set, breakdown, group, predictor,
target, units) with the metrics of :func:`surrogate3d.evaluation.metrics.error_metrics`.
"""

import numpy as np
import pandas as pd

from ..errors import ParameterError
from ..learn.pairs_table import target_matrix
from .metrics import METRICS, error_metrics

#: Solar zenith angle bin edges [degree].
SOLAR_ZENITH_BINS = (0.0, 30.0, 45.0, 60.0, 75.0, 90.0)
#: Host-column cloud fraction bin edges [1]; the first bin is (nearly) clear, the last overcast.
CLOUD_FRACTION_BINS = (0.0, 0.01, 0.25, 0.5, 0.75, 0.99, 1.0)
#: Breakdowns of a metric table, in report order ("all" is the whole evaluation set).
BREAKDOWNS = ("all", "regime", "solar_zenith", "cloud_fraction", "host_resolution")
#: Breakdowns of the left-out families: each family, each sun, each family under each sun.
FAMILY_BREAKDOWNS = ("all", "regime", "solar_zenith", "regime_solar_zenith")
#: Breakdowns of a longwave metric table (no sun) and of its left-out families.
LONGWAVE_BREAKDOWNS = ("all", "regime", "cloud_fraction", "host_resolution")
LONGWAVE_FAMILY_BREAKDOWNS = ("all", "regime")
#: Units of the metric rows: normalized (fraction of the incident flux) and W m-2.
UNITS = ("1", "W m-2")

#: The variable each numeric breakdown bins (its group mean is the ``group_value`` column).
BINNED_VARIABLES = {"solar_zenith": "solar_zenith_angle", "cloud_fraction": "cloud_fraction",
                    "host_resolution": "host_resolution", "regime_solar_zenith": "solar_zenith_angle"}

TABLE_COLUMNS = ("evaluation_set", "breakdown", "group", "group_order", "group_value", "predictor", "target",
                 "units") + METRICS


def _binned(values, edges, unit):
    """Bin label of each value; bins are [a, b) except the last, which includes its upper edge."""
    values = np.asarray(values, dtype=np.float64)
    index = np.clip(np.searchsorted(edges, values, side="right") - 1, 0, len(edges) - 2)
    labels = [f"{edges[k]:g}-{edges[k + 1]:g}{unit}" for k in range(len(edges) - 1)]
    return np.asarray(labels, dtype=object)[index], index


def group_labels(pairs, breakdown):
    """Group label and sort order of every sample for one breakdown.

    Parameters
    ----------
    pairs : xarray.Dataset
    breakdown : str
        One of :data:`BREAKDOWNS` or ``"regime_solar_zenith"``.

    Returns
    -------
    labels : ndarray of str (n_sample,)
    order : ndarray of int (n_sample,)
        Sort key of the groups (bins in increasing order).
    """
    n = pairs.sizes["sample"]
    if breakdown == "all":
        return np.full(n, "all", dtype=object), np.zeros(n, dtype=int)
    if breakdown == "regime":
        labels = np.asarray(pairs["regime"].values).astype(str).astype(object)
        return labels, np.unique(labels, return_inverse=True)[1].ravel()
    if breakdown == "solar_zenith":
        return _binned(pairs["solar_zenith_angle"].values, SOLAR_ZENITH_BINS, " deg")
    if breakdown == "regime_solar_zenith":
        regimes, regime_order = group_labels(pairs, "regime")
        zeniths, zenith_order = group_labels(pairs, "solar_zenith")
        labels = np.asarray([f"{r}, {z}" for r, z in zip(regimes, zeniths)], dtype=object)
        return labels, regime_order * len(SOLAR_ZENITH_BINS) + zenith_order
    if breakdown == "cloud_fraction":
        return _binned(pairs["cloud_fraction"].values, CLOUD_FRACTION_BINS, "")
    if breakdown == "host_resolution":
        res = np.asarray(pairs["host_resolution"].values, dtype=np.float64)
        return np.asarray([f"{r / 1000.0:g} km" for r in res], dtype=object), np.unique(res, return_inverse=True)[1]
    raise ParameterError(f"breakdown must be one of {BREAKDOWNS + FAMILY_BREAKDOWNS[-1:]}; got {breakdown!r}")


def metric_table(pairs, predictions, targets, evaluation_set, breakdowns=BREAKDOWNS):
    """Metrics of every predictor, target and group, in normalized units and W m-2.

    Parameters
    ----------
    pairs : xarray.Dataset
        The evaluation samples.
    predictions : dict of str -> ndarray (n_sample, n_target)
        Predicted corrections of each predictor [1], columns in ``targets`` order.
    targets : sequence of str
    evaluation_set : str
        Label of the sample set (e.g. ``"held-out scenes"``).
    breakdowns : sequence of str

    Returns
    -------
    pandas.DataFrame
        Columns :data:`TABLE_COLUMNS`; ``group_value`` is the mean over the group of the
        binned variable (solar zenith angle [degree], cloud fraction [1], host resolution
        [m]), NaN for the other breakdowns.  A longwave table (no ``incident_flux``:
        targets in W m-2 already) has the W m-2 rows only.
    """
    true = target_matrix(pairs, targets)
    se = target_matrix(pairs, targets, "target_standard_error")
    flux = np.asarray(pairs["incident_flux"].values, dtype=np.float64) if "incident_flux" in pairs else None
    units_of_rows = UNITS if flux is not None else ("W m-2",)
    rows = []
    for breakdown in breakdowns:
        labels, order = group_labels(pairs, breakdown)
        binned = BINNED_VARIABLES.get(breakdown)
        for key in sorted(set(zip(order.tolist(), labels.tolist()))):
            members = (order == key[0]) & (labels == key[1])
            value = float(np.mean(pairs[binned].values[members])) if binned else float("nan")
            for name, predicted in predictions.items():
                for m, target in enumerate(targets):
                    for units in units_of_rows:
                        scale = flux[members] if units == "W m-2" and flux is not None else None
                        metrics = error_metrics(predicted[members, m], true[members, m], se[members, m], scale)
                        rows.append({"evaluation_set": evaluation_set, "breakdown": breakdown, "group": key[1],
                                     "group_order": key[0], "group_value": value, "predictor": name,
                                     "target": target, "units": units, **metrics})
    return pd.DataFrame(rows, columns=list(TABLE_COLUMNS))
