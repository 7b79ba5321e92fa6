"""Flattening fitted estimators into the plain arrays of a coefficient file.

:func:`ridge_arrays` copies the standardization and coefficients of a
:class:`~surrogate3d.learn.models.RidgeCorrection`.  :func:`tree_arrays` turns the
scikit-learn histogram gradient-boosting ensembles of a
:class:`~surrogate3d.learn.models.BoostedCorrection` into node arrays: each fitted tree
(``HistGradientBoostingRegressor._predictors[iteration][0].nodes``, a structured array
in depth-first order) keeps its node order, so children stay indexed within their tree.
A node goes left when ``x[feature_idx] <= num_threshold`` or, for NaN, when
``missing_go_to_left`` (scikit-learn's ``_predictor.pyx``); the learning rate is
already in the leaf values; the prediction is ``_baseline_prediction`` plus the leaf
values of the trees in iteration order.

The float64 thresholds are kept exactly but stored once each: nodes hold an index into
the sorted distinct thresholds of the whole ensemble (gradient boosting on histograms
splits on at most 255 bin edges per feature, so thresholds repeat across trees).
"""

import numpy as np

from ..errors import ValidationError
from ..learn.models import BoostedCorrection, RidgeCorrection
from ..core.coefficient_format import smallest_int_dtype


def ridge_arrays(estimator):
    """The ``ridge`` arrays of a coefficient file from a fitted RidgeCorrection.

    Parameters
    ----------
    estimator : surrogate3d.learn.models.RidgeCorrection
        Fitted on several targets (2-D ``Y``).

    Returns
    -------
    dict of str -> ndarray
        ``feature_mean``, ``feature_scale`` (n_feature,), ``interaction_pairs``
        (n_pair, 2), ``coef`` (n_target, n_feature + n_pair), ``intercept`` (n_target,).
    """
    if not isinstance(estimator, RidgeCorrection) or not hasattr(estimator, "coef_"):
        raise ValidationError(f"expected a fitted RidgeCorrection; got {type(estimator).__name__}")
    pairs = np.asarray(estimator.interaction_pairs_, dtype=np.int64).reshape(-1, 2)
    coef = np.atleast_2d(np.asarray(estimator.coef_, dtype=np.float64))
    return {
        "feature_mean": np.asarray(estimator.feature_mean_, dtype=np.float64).copy(),
        "feature_scale": np.asarray(estimator.feature_scale_, dtype=np.float64).copy(),
        "interaction_pairs": pairs.astype(smallest_int_dtype(pairs)),
        "coef": np.ascontiguousarray(coef),
        "intercept": np.atleast_1d(np.asarray(estimator.intercept_, dtype=np.float64)).copy(),
    }


def _check_regressor(regressor, target):
    if getattr(regressor, "n_trees_per_iteration_", None) != 1:
        raise ValidationError(f"target {target}: expected one tree per boosting iteration (a regressor); got "
                              f"{getattr(regressor, 'n_trees_per_iteration_', None)}")
    link = type(getattr(getattr(regressor, "_loss", None), "link", None)).__name__
    if link != "IdentityLink":
        raise ValidationError(f"target {target}: only losses whose prediction is the raw sum of the trees (identity "
                              f"link, e.g. squared error) can be exported; got loss {getattr(regressor, 'loss', None)!r}")


def tree_arrays(estimator):
    """The ``boosted`` arrays of a coefficient file from a fitted BoostedCorrection.

    Parameters
    ----------
    estimator : surrogate3d.learn.models.BoostedCorrection
        Fitted; its ensembles must have numeric splits only (no categorical features).

    Returns
    -------
    dict of str -> ndarray
        ``baseline`` (n_target,); ``tree_target`` (n_tree,); ``tree_offset``
        (n_tree + 1,); per node: ``feature`` (-1 at leaves), ``threshold_index`` (into
        ``threshold_values``; -1 at leaves), ``left``, ``right`` (within the tree; -1 at
        leaves), ``missing_go_left`` (0 or 1); ``leaf_value`` (the leaves' values in node
        order); and ``threshold_values`` (sorted distinct thresholds).

    Raises
    ------
    surrogate3d.errors.ValidationError
        Not a fitted BoostedCorrection, a loss other than squared error, or a
        categorical split.
    """
    if not isinstance(estimator, BoostedCorrection) or not hasattr(estimator, "estimators_"):
        raise ValidationError(f"expected a fitted BoostedCorrection; got {type(estimator).__name__}")
    baseline, tree_target, parts = [], [], []
    for target, regressor in enumerate(estimator.estimators_):
        _check_regressor(regressor, target)
        baseline.append(float(np.asarray(regressor._baseline_prediction).ravel()[0]))
        for iteration in regressor._predictors:
            nodes = iteration[0].nodes
            if np.any(nodes["is_categorical"][nodes["is_leaf"] == 0]):
                raise ValidationError(f"target {target}: the ensemble has categorical splits, which the coefficient "
                                      "format does not hold")
            parts.append(nodes)
            tree_target.append(target)
    nodes = np.concatenate(parts)
    leaf = nodes["is_leaf"].astype(bool)
    thresholds = np.unique(nodes["num_threshold"][~leaf])
    index = np.where(leaf, -1, np.searchsorted(thresholds, nodes["num_threshold"]))
    sizes = np.array([p.size for p in parts])
    local = {name: np.where(leaf, -1, nodes[name].astype(np.int64)) for name in ("left", "right")}
    feature = np.where(leaf, -1, nodes["feature_idx"].astype(np.int64))
    offset = np.concatenate([[0], np.cumsum(sizes)])
    tree_target = np.asarray(tree_target, dtype=np.int64)
    return {
        "baseline": np.asarray(baseline, dtype=np.float64),
        "tree_target": tree_target.astype(smallest_int_dtype(tree_target)),
        "tree_offset": offset.astype(smallest_int_dtype(offset)),
        "feature": feature.astype(smallest_int_dtype(feature)),
        "threshold_index": index.astype(smallest_int_dtype(index)),
        "left": local["left"].astype(smallest_int_dtype(local["left"])),
        "right": local["right"].astype(smallest_int_dtype(local["right"])),
        "missing_go_left": np.where(leaf, 0, nodes["missing_go_to_left"]).astype(np.int8),
        "leaf_value": nodes["value"][leaf].astype(np.float64),
        "threshold_values": thresholds.astype(np.float64),
    }


def clear_sky_gate(estimator):
    """The ``clear_sky_gate`` field of a coefficient file from a fitted estimator.

    Returns
    -------
    dict
        ``feature_indices`` (list of int, into the model's features; empty without a
        gate) and ``tolerance`` (float): the estimator predicts 0 where every listed
        feature has ``|x| <= tolerance``.
    """
    indices = getattr(estimator, "clear_sky_indices_", [])   # none on estimators pickled before the gate
    return {"feature_indices": [int(k) for k in indices],
            "tolerance": float(getattr(estimator, "clear_sky_tolerance_", 0.0))}


def target_transforms(estimator):
    """The ``target_transforms`` field of a coefficient file from a fitted estimator.

    Returns
    -------
    list or None
        Per target, None or ``scale_feature`` (index, -1 for none), ``scale_floor``,
        ``offset_features`` (indices) and ``offset_coefficients`` (and ``outside_envelope``:
        ``"offset"`` when the target falls back to its offset outside the training
        envelope); None when no target has a transform (the field is then left out).
    """
    resolved = getattr(estimator, "target_transform_", None)  # none on estimators fitted before transforms
    if resolved is None:
        return None
    scale_index, scale_floor, offset_index, offset_coef = resolved[:4]
    offset_outside = resolved[5] if len(resolved) > 5 else np.zeros(scale_index.size, dtype=bool)
    field = [None if scale_index[m] < 0 and not offset_index[m].size else
             {"scale_feature": int(scale_index[m]), "scale_floor": float(scale_floor[m]),
              "offset_features": [int(k) for k in offset_index[m]],
              "offset_coefficients": [float(c) for c in offset_coef[m]],
              **({"outside_envelope": "offset"} if offset_outside[m] else {})}
             for m in range(scale_index.size)]
    return field if any(spec is not None for spec in field) else None


def training_envelope(estimator):
    """The ``training_envelope`` field of a coefficient file from a fitted estimator.

    Returns
    -------
    dict or None
        :meth:`surrogate3d.runtime.envelope.TrainingEnvelope.to_dict` of the estimator's
        ``envelope_``; None for an estimator fitted before envelopes existed.
    """
    envelope = getattr(estimator, "envelope_", None)
    return None if envelope is None else envelope.to_dict()


def flatten(estimator):
    """``(kind, arrays)`` of a fitted RidgeCorrection or BoostedCorrection."""
    if isinstance(estimator, RidgeCorrection):
        return "ridge", ridge_arrays(estimator)
    if isinstance(estimator, BoostedCorrection):
        return "boosted", tree_arrays(estimator)
    raise ValidationError(f"cannot export a {type(estimator).__name__}; expected RidgeCorrection or BoostedCorrection")
