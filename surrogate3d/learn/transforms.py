"""Target transforms: what a model learns once physics has said what it can.

A learner predicts a correction ``y`` directly.  A transform lets it learn a residual
``f`` instead, with

    y = offset(x) + scale(x) * f(x),
    offset(x) = sum_k c_k x[k]          (a physical prior of the correction, from features),
    scale(x)  = max(x[s], floor)        (a feature the correction is proportional to).

Two uses motivate it.  The 3D change of the absorption is a change of the path that light
travels through absorbers, so it is proportional to the absorption there is: scaled by
the independent-column absorption, a learned correction vanishes in an atmosphere that
does not absorb, whatever the clouds.  And where a feature already carries a physical
estimate of the correction (the slant-path direct-beam prior), the learner only has to
say what that estimate misses.

By default the fit minimises the squared error of ``y``, not of ``f``: samples enter with
weight ``scale(x)**2``, so a residual of a column that barely absorbs counts as little as
the error it makes in watts.  With ``fit_errors = "relative"`` every sample counts the
same in relative terms (weight 1), so that a few columns of large corrections do not
decide the fit for all the others.

With ``outside_envelope = "offset"`` a column outside the training envelope
(:mod:`surrogate3d.runtime.envelope`) gets the offset alone: where the learned residual
would extrapolate, the correction falls back to the physical prior.
"""

import math
import numbers

import numpy as np

from ..core.validation import check_number, check_option
from ..errors import ParameterError, ValidationError

_KEYS = {"scale_feature", "scale_floor", "offset_features", "fit_errors", "outside_envelope"}
#: What the fit of a scaled target minimises: the errors of the correction (weights
#: ``scale**2``) or of the residual, relative errors of the correction (weights 1).
FIT_ERRORS = ("absolute", "relative")
#: The correction of a column outside the training envelope: the learned one, or the
#: offset (the physical prior) alone, the learned residual left out where it would
#: extrapolate.
OUTSIDE_ENVELOPE = ("learned", "offset")


def check_transforms(value, name="target_transforms"):
    """Check a list of transforms (one per target, ``None`` for none); ParameterError naming the entry.

    Each transform is a dict with any of ``scale_feature`` (a feature name),
    ``scale_floor`` (a number >= 0, default 0; must be > 0 with a scale feature that
    can be 0) and ``offset_features`` (a dict of feature name -> finite coefficient).
    """
    if value is None:
        return
    if not isinstance(value, (list, tuple)):
        raise ParameterError(f"{name} must be a list with one entry (a dict or None) per target; got {value!r}")
    for m, spec in enumerate(value):
        if spec is not None:
            check_transform(spec, f"{name}[{m}]")


def transform_features(spec):
    """The feature names a transform reads."""
    return ([spec["scale_feature"]] if spec.get("scale_feature") is not None else []) + list(
        spec.get("offset_features", {}))


def check_transform(spec, where):
    """ParameterError unless ``spec`` is a transform dict (see :func:`check_transforms`); ``where`` names it."""
    if not isinstance(spec, dict) or not spec or set(spec) - _KEYS:
        raise ParameterError(f"{where} must be None or a dict of {sorted(_KEYS)}; got {spec!r}")
    scale = spec.get("scale_feature")
    if scale is not None and not (isinstance(scale, str) and scale):
        raise ParameterError(f"{where}['scale_feature'] must be a feature name; got {scale!r}")
    floor = spec.get("scale_floor", 0.0)
    check_number(f"{where}['scale_floor']", floor, 0.0, None)
    offsets = spec.get("offset_features", {})
    if not isinstance(offsets, dict) or not all(isinstance(k, str) and k for k in offsets) or not all(
            isinstance(c, numbers.Real) and not isinstance(c, bool) and math.isfinite(c) for c in offsets.values()):
        raise ParameterError(f"{where}['offset_features'] must be a dict of feature name -> finite number; "
                             f"got {offsets!r}")
    check_option(f"{where}['fit_errors']", spec.get("fit_errors", "absolute"), FIT_ERRORS)
    check_option(f"{where}['outside_envelope']", spec.get("outside_envelope", "learned"), OUTSIDE_ENVELOPE)


def resolve_transforms(transforms, n_target, feature_names):
    """Feature indices of checked transforms: ``(scale_index, scale_floor, offset_index, offset_coef)``.

    Parameters
    ----------
    transforms : list of dict or None, or None
    n_target : int
    feature_names : list of str or None

    Returns
    -------
    scale_index : ndarray of int (n_target,)
        Feature whose value scales the learned residual; -1 for none (scale 1).
    relative : ndarray of bool (n_target,)
        Whether a scaled target is fitted in relative errors (weights 1).
    scale_floor : ndarray (n_target,)
        Smallest scale used [units of that feature].
    offset_index, offset_coef : list (n_target) of ndarray
        Features and coefficients of each target's offset (empty for none).
    offset_outside : ndarray of bool (n_target,)
        Whether a column outside the training envelope gets the offset alone.
    """
    scale_index = np.full(n_target, -1, dtype=np.int64)
    scale_floor = np.zeros(n_target)
    relative = np.zeros(n_target, dtype=bool)
    offset_index = [np.zeros(0, dtype=np.int64) for _ in range(n_target)]
    offset_coef = [np.zeros(0) for _ in range(n_target)]
    offset_outside = np.zeros(n_target, dtype=bool)
    if not transforms:
        return scale_index, scale_floor, offset_index, offset_coef, relative, offset_outside
    if len(transforms) != n_target:
        raise ValidationError(f"target_transforms has {len(transforms)} entries; Y has {n_target} targets")

    def index(feature, where):
        if feature_names is None:
            raise ValidationError(f"{where} names feature {feature!r}, but fit got no feature_names")
        if feature not in feature_names:
            raise ValidationError(f"{where} names feature {feature!r}, which is not among the model's features")
        return feature_names.index(feature)

    for m, spec in enumerate(transforms):
        if spec is None:
            continue
        where = f"target_transforms[{m}]"
        if spec.get("scale_feature") is not None:
            scale_index[m] = index(spec["scale_feature"], where)
            scale_floor[m] = float(spec.get("scale_floor", 0.0))
            relative[m] = spec.get("fit_errors", "absolute") == "relative"
        offsets = spec.get("offset_features", {})
        offset_index[m] = np.array([index(f, where) for f in offsets], dtype=np.int64)
        offset_coef[m] = np.array([float(c) for c in offsets.values()])
        offset_outside[m] = spec.get("outside_envelope", "learned") == "offset"
    return scale_index, scale_floor, offset_index, offset_coef, relative, offset_outside


def offsets_and_scales(resolved, X):
    """``(offset, scale)``, each (n_sample, n_target), of resolved transforms at features ``X``."""
    scale_index, scale_floor, offset_index, offset_coef = resolved[:4]
    n, n_target = X.shape[0], scale_index.size
    offset, scale = np.zeros((n, n_target)), np.ones((n, n_target))
    for m in range(n_target):
        if offset_index[m].size:
            offset[:, m] = X[:, offset_index[m]] @ offset_coef[m]
        if scale_index[m] >= 0:
            scale[:, m] = np.maximum(X[:, scale_index[m]], scale_floor[m])
    return offset, scale


def apply_transforms(resolved, X, F, outside=None):
    """Corrections from learned residuals ``F`` (n_sample, n_target), in place: ``F * scale``,
    then each offset term added in turn (the order the runtime and Fortran module use, so
    that all three agree to the last bit).  ``outside`` (bool, n_sample) marks the samples
    outside the training envelope: targets whose transform says ``outside_envelope =
    "offset"`` get the offset alone there."""
    scale_index, scale_floor, offset_index, offset_coef = resolved[:4]
    offset_outside = resolved[5] if len(resolved) > 5 else np.zeros(scale_index.size, dtype=bool)
    if outside is not None and offset_outside.any():
        F[np.ix_(np.asarray(outside, dtype=bool), offset_outside)] = 0.0
    for m in range(scale_index.size):
        if scale_index[m] >= 0:
            F[:, m] *= np.maximum(X[:, scale_index[m]], scale_floor[m])
        for k, c in zip(offset_index[m], offset_coef[m]):
            F[:, m] += c * X[:, k]
    return F


def check_scales(resolved, X):
    """ValidationError unless every scale of the training samples is positive (a residual
    of a zero scale could not be learned)."""
    scale_index, scale_floor = resolved[0], resolved[1]
    for m in np.flatnonzero(scale_index >= 0):
        values = np.maximum(X[:, scale_index[m]], scale_floor[m])
        if not np.all(values > 0):
            i = int(np.argmax(~(values > 0)))
            raise ValidationError(f"target_transforms[{m}]: the scale feature is {float(X[i, scale_index[m]])!r} "
                                  f"at sample {i}; give a scale_floor > 0")
