"""Estimators of the 3D correction: standardized ridge regression and gradient-boosted trees.

Both are scikit-learn estimators (``fit``/``predict``, ``get_params``/``set_params``,
``clone``) for several targets at once: ``Y`` has shape ``(n_sample, n_target)``, one
column per correction target (3D minus independent-column flux, as a fraction of the
incident flux).  Fitted from a training-pair table with :meth:`fit_pairs`, they remember
the feature and target names and predict straight from another table with
:meth:`predict_pairs`, like the baselines.

Both take an optional clear-sky gate (``clear_sky_features``): samples whose listed
features are all zero, clear columns far from cloud, get exactly zero correction and
are left out of the fit.  Both keep the training envelope of the samples they were
fitted on (:mod:`surrogate3d.runtime.envelope`), which flags samples a prediction
would extrapolate to.

The fitted attributes are the contract with the coefficient exporter; they are
documented in each class and in ``docs/methods/models-and-metrics.md``.
"""

import numbers

import numpy as np
from sklearn.base import BaseEstimator, RegressorMixin
from sklearn.ensemble import HistGradientBoostingRegressor
from sklearn.utils import check_array
from sklearn.utils.validation import check_is_fitted

from ..core.config import CLEAR_SKY_TOLERANCE, SINGULAR_CUTOFF
from ..core.validation import check_bool, check_integer, check_number, check_option, fail, first_nonfinite
from ..errors import ParameterError, ValidationError
from ..runtime.envelope import EnvelopeCheck, TrainingEnvelope
from ..runtime.ridge import near_constant
from ..core.data_model import TARGETS
from .pairs_table import feature_matrix, feature_names, target_matrix
from .transforms import apply_transforms, check_scales, check_transforms, offsets_and_scales, resolve_transforms


def _as_matrix(name, values, min_samples=1, ensure_2d=True):
    """A float64 array checked by scikit-learn's rules (dense, real, 2-D, enough samples).

    Non-finite values are located first, so the message names the sample and column.
    """
    raw = np.asarray(values)  # sparse matrices become 0-d object arrays, left to check_array
    if raw.dtype.kind in "fiu" and raw.ndim in (1, 2):
        found = first_nonfinite(raw)
        if found is not None:
            (i, *j), count = found
            where = f"sample {i}" + (f", column {j[0]}" if j else "")
            fail(name, "free of NaN and inf", raw[(i, *j)], where, count, ValidationError)
    try:
        return check_array(values, dtype=np.float64, ensure_2d=ensure_2d, ensure_min_samples=min_samples,
                           input_name=name)
    except ValueError as exc:  # wrong types (sparse, objects) keep scikit-learn's TypeError
        raise ValidationError(str(exc)) from None


def _check_feature_names(names, n_feature):
    """The feature names passed to ``fit`` as a list; ValidationError unless one distinct string per column."""
    if isinstance(names, str) or not all(isinstance(n, str) for n in names):
        raise ValidationError(f"feature_names must be a list of strings, one per column of X; got {names!r}")
    names = list(names)
    if len(names) != n_feature or len(set(names)) != len(names):
        raise ValidationError(f"feature_names must name each of the {n_feature} columns of X once; got {names!r}")
    return names


def _check_feature_list(name, chosen, min_count):
    """ParameterError unless ``chosen`` is None or a list of distinct feature names or of distinct indices >= 0."""
    if chosen is None:
        return
    entries = list(chosen) if isinstance(chosen, (list, tuple)) else None
    ok = entries is not None and len(entries) >= min_count and (
        all(isinstance(e, str) and e for e in entries)
        or all(isinstance(e, numbers.Integral) and not isinstance(e, bool) and e >= 0 for e in entries))
    if not ok or len(set(entries)) != len(entries):
        count = "at least two distinct" if min_count == 2 else "distinct"
        raise ParameterError(f"{name} must be a list of {count} feature names (or of distinct column indices "
                             f">= 0); got {chosen!r}")


def _feature_indices(name, entries, feature_names, n_feature):
    """Column indices, in the given order, of a checked list of feature names or indices."""
    entries = list(entries)
    if entries and isinstance(entries[0], str):
        if feature_names is None:
            raise ValidationError(f"{name} names features {entries}, but fit got no feature_names; pass "
                                  "feature_names or give column indices")
        missing = [e for e in entries if e not in feature_names]
        if missing:
            raise ValidationError(f"{name} names {missing}, which are not among the features {feature_names}")
        return [feature_names.index(e) for e in entries]
    if entries and max(entries) >= n_feature:
        raise ValidationError(f"{name} holds column index {max(entries)}; X has {n_feature} columns")
    return [int(e) for e in entries]


def _check_fit_input(estimator, X, Y):
    if Y is None:
        raise ValidationError(f"{type(estimator).__name__} requires y to be passed, but the target y is None")
    X = _as_matrix("X", X, min_samples=2)
    Y = _as_matrix("Y", Y, ensure_2d=False)
    if Y.ndim not in (1, 2) or Y.shape[0] != X.shape[0]:
        raise ValidationError(f"Y has shape {Y.shape}; expected ({X.shape[0]},) or ({X.shape[0]}, n_target) "
                              "to match X")
    one_column = Y.ndim == 1
    return X, (Y[:, None] if one_column else Y), one_column


class _PairsTableMixin:
    """Fit from and predict on training-pair tables, remembering feature and target names; the
    checks, clear-sky gate, training envelope and target transforms both estimators share.

    An estimator provides ``_check_parameters`` and ``_learned(X)``, its prediction before the
    target transforms and the gate.
    """

    def fit_pairs(self, pairs, features=None, targets=None):
        """Fit on a training-pair table.

        Parameters
        ----------
        pairs : xarray.Dataset
            A training-pair table (``docs/pairs-format.md``).
        features : sequence of str, optional
            Feature names to use, in this order; default all features of the table.
        targets : sequence of str, optional
            Targets to learn, in this order; default all five in the documented order.

        Returns
        -------
        self
        """
        features = list(feature_names(pairs) if features is None else features)
        targets = list(TARGETS if targets is None else targets)
        self.fit(feature_matrix(pairs, features, needed_by="the training recipe"), target_matrix(pairs, targets),
                 feature_names=features)
        self.target_names_ = targets
        return self

    def predict_pairs(self, pairs):
        """Predicted corrections (n_sample, n_target) for every sample of a pairs table.

        Raises
        ------
        surrogate3d.errors.ValidationError
            The table lacks features the model needs (they are named), or the model was
            fitted from plain arrays.
        """
        check_is_fitted(self)
        if getattr(self, "feature_names_", None) is None:
            raise ValidationError(f"the {model_kind(self)} model was fitted from arrays without feature names; "
                                  "fit it with fit_pairs to predict from a pairs table")
        X = feature_matrix(pairs, self.feature_names_, needed_by=f"the {model_kind(self)} model")
        Y = self.predict(X)
        return Y[:, None] if Y.ndim == 1 else Y

    def clear_sky_mask(self, X):
        """Which samples the clear-sky gate selects: every gate feature within the tolerance of 0.

        Parameters
        ----------
        X : array_like (n_sample, n_feature)

        Returns
        -------
        ndarray of bool (n_sample,)
            True where the model predicts exactly zero correction (all False without a gate).
        """
        return self._gated(self._check_predict_input(X))

    def envelope_check(self, X):
        """Which samples lie outside the training envelope (ranges or distance; never gated ones).

        Parameters
        ----------
        X : array_like (n_sample, n_feature)

        Returns
        -------
        surrogate3d.runtime.envelope.EnvelopeCheck
            Not ``available`` for an estimator fitted before the envelope existed.
        """
        X = self._check_predict_input(X)
        envelope = getattr(self, "envelope_", None)   # none on estimators pickled before the envelope
        if envelope is None:
            return EnvelopeCheck.unavailable(X.shape[0], f"this {type(self).__name__} was fitted before training "
                                                         "envelopes existed: no column is checked")
        return envelope.check(X, self._gated(X))

    def _gated(self, X):
        # Estimators pickled before the gate existed have no gate attributes: no gate.
        indices = getattr(self, "clear_sky_indices_", [])
        gated = np.full(X.shape[0], bool(indices))
        for k in indices:
            gated &= np.abs(X[:, k]) <= self.clear_sky_tolerance_
        return gated

    def predict(self, X):
        """Predicted corrections, 0 where the clear-sky gate holds.

        Parameters
        ----------
        X : array_like (n_sample, n_feature)

        Returns
        -------
        ndarray (n_sample, n_target), or (n_sample,) when fitted on a 1-D ``Y``
        """
        X = self._check_predict_input(X)
        return self._transformed(X, self._learned(X))

    def _start_fit(self, X, Y, feature_names):
        """Check the parameters and the data and remember the feature names: ``(X, Y, one_column)``."""
        self._check_parameters()
        X, Y, one_column = _check_fit_input(self, X, Y)
        self._set_names(feature_names, X.shape[1])
        return X, Y, one_column

    def _fit_gate_and_envelope(self, X, Y):
        """Resolve the gate features, keep the training envelope of the samples the gate leaves
        (at least two) and return those samples."""
        self.clear_sky_indices_ = _feature_indices("clear_sky_features", self.clear_sky_features or [],
                                                   self.feature_names_, X.shape[1])
        self.clear_sky_tolerance_ = CLEAR_SKY_TOLERANCE
        keep = ~self._gated(X)
        if np.count_nonzero(keep) < 2:
            raise ValidationError(f"clear_sky_features {list(self.clear_sky_features)} gate "
                                  f"{X.shape[0] - np.count_nonzero(keep)} of the {X.shape[0]} samples; at least 2 "
                                  "ungated samples are needed to fit")
        X, Y = X[keep], Y[keep]
        self.envelope_ = TrainingEnvelope.fit(X)
        return X, Y

    def _fit_transforms(self, X, Y):
        """Resolve ``target_transforms`` and return ``(residual targets, sample weights)``.

        The weights (``scale**2`` per target) make the fit of a scaled residual minimise
        the squared error of the correction itself (:mod:`surrogate3d.learn.transforms`).
        """
        self.target_transform_ = resolve_transforms(self.target_transforms, Y.shape[1], self.feature_names_)
        check_scales(self.target_transform_, X)
        offset, scale = offsets_and_scales(self.target_transform_, X)
        weights = scale * scale
        weights[:, self.target_transform_[4]] = 1.0
        return (Y - offset) / scale, weights

    def _transformed(self, X, F):
        """Corrections from learned residuals ``F``: ``offset + scale * F`` (the offset alone outside the
        training envelope for targets that say so), 0 where the gate holds."""
        resolved = getattr(self, "target_transform_", None)  # none on estimators pickled before transforms
        if resolved is not None:
            outside = None
            if len(resolved) > 5 and resolved[5].any() and getattr(self, "envelope_", None) is not None:
                outside = self.envelope_.check(X, self._gated(X)).outside
            apply_transforms(resolved, X, F, outside)
        F[self._gated(X)] = 0.0
        return F[:, 0] if self._one_column else F

    def _set_names(self, feature_names, n_feature):
        """Remember the feature names given to ``fit`` (checked), forget the target names."""
        if feature_names is not None:
            feature_names = _check_feature_names(feature_names, n_feature)
        self.feature_names_ = feature_names
        self.target_names_ = None

    def _check_predict_input(self, X):
        check_is_fitted(self)
        X = _as_matrix("X", X)
        if X.shape[1] != self.n_features_in_:
            raise ValidationError(f"X has {X.shape[1]} features, but {type(self).__name__} is expecting "
                                  f"{self.n_features_in_} features as input")
        return X

    def __sklearn_tags__(self):
        tags = super().__sklearn_tags__()
        tags.target_tags.multi_output = True
        return tags


class RidgeCorrection(_PairsTableMixin, RegressorMixin, BaseEstimator):
    """Ridge regression on standardized features, optionally with pairwise products.

    The prediction is simple enough to be reproduced in any language::

        c[k]   = min(max(x[k], envelope_.feature_min[k]), envelope_.feature_max[k])
        z[k]   = (c[k] - feature_mean_[k]) / feature_scale_[k]          k = 0 .. n_feature-1
        t      = [z[0], ..., z[n_feature-1]] + [z[i] * z[j] for (i, j) in interaction_pairs_]
        y[m]   = intercept_[m] + sum_l coef_[m, l] * t[l]               m = 0 .. n_target-1

    Each feature is held within the range the training samples spanned (the training
    envelope's, :class:`~surrogate3d.runtime.envelope.TrainingEnvelope`): a fitted
    quadratic runs away beyond its data, while the envelope check still flags the column.

    ``feature_scale_`` is the population standard deviation (ddof = 0) of the training
    features, replaced by 1 for a feature constant up to round-off (a standard deviation
    at most :data:`~surrogate3d.runtime.ridge.NEAR_CONSTANT` times the magnitude of its
    mean), whose standardized value is then 0 up to round-off in training and its
    departure from the training mean elsewhere.
    The product terms are products of standardized features, not standardized again.
    The coefficients minimise ``||Y - intercept - T coef^T||^2 + alpha ||coef||^2``, with an
    unpenalised intercept, solved in closed form through the singular value decomposition
    of the centred term matrix (Hoerl and Kennard 1970; Hastie et al. 2009, eq. 3.44-3.47).

    Parameters
    ----------
    alpha : float, default 1.0
        Ridge penalty, >= 0, in units of the (standardized) terms; 0 gives least squares
        (minimum-norm solution when terms are collinear).
    interactions : bool, default False
        Add the products ``z[i] * z[j]`` (i < j) of pairs of standardized features: of
        all pairs, or of the pairs among ``interaction_features``.
    interaction_features : list of str or int, optional
        With ``interactions``, form products only among these features (at least two,
        distinct): names of the features passed to :meth:`fit` as ``feature_names`` (or
        to :meth:`fit_pairs`), or column indices of ``X``.  ``k`` features give
        ``k (k - 1) / 2`` product terms instead of ``n (n - 1) / 2``, which keeps the
        coefficient file small.  Ignored without ``interactions``.
    clear_sky_features : list of str or int, optional
        The clear-sky gate: names (as for ``interaction_features``) or column indices
        of features that are all zero only for a clear column far from cloud.  Where
        every one of them is within :data:`CLEAR_SKY_TOLERANCE` of zero, :meth:`predict`
        returns exactly 0 for every target, and :meth:`fit` leaves such samples out
        (their true correction is 0 up to benchmark noise, so they would only bend the
        fit).  None or empty: no gate.
    target_transforms : list of dict or None, optional
        One entry per target (None: none): learn a residual ``f`` with correction
        ``offset + scale * f`` (:mod:`surrogate3d.learn.transforms`), from the keys
        ``scale_feature``, ``scale_floor`` and ``offset_features`` (feature names as for
        ``interaction_features``).  A scaled target is fitted with sample weights
        ``scale**2``.

    Attributes
    ----------
    feature_mean_, feature_scale_ : ndarray (n_feature,)
        Standardization of the features (units of each feature).
    interaction_pairs_ : list of (int, int)
        Feature index pairs (i < j) of the product terms, in term order (lexicographic);
        empty without interactions.
    coef_ : ndarray (n_target, n_term)
        Coefficients of the terms ``t``; ``n_term = n_feature + len(interaction_pairs_)``.
    intercept_ : ndarray (n_target,)
    term_names_ : list of str
        ``name`` for linear terms and ``name_i*name_j`` for products (``x0``, ``x1`` ... when
        fitted from arrays).
    clear_sky_indices_ : list of int
        Column indices of the gate features (empty without a gate).
    clear_sky_tolerance_ : float
        Largest ``|x|`` of a gate feature counted as zero (:data:`CLEAR_SKY_TOLERANCE`).
    envelope_ : surrogate3d.runtime.envelope.TrainingEnvelope
        Ranges and distance threshold of the (ungated) training samples;
        :meth:`envelope_check` flags samples outside it.
    n_features_in_ : int
    feature_names_ : list of str or None
        The ``feature_names`` given to :meth:`fit` (set by :meth:`fit_pairs`).
    target_names_ : list of str or None
        Set by :meth:`fit_pairs`; None after a plain :meth:`fit`.

    References
    ----------
    Hoerl, A. E. and R. W. Kennard, 1970: Ridge regression: biased estimation for
    nonorthogonal problems. Technometrics, 12, 55-67.

    Hastie, T., R. Tibshirani and J. Friedman, 2009: The Elements of Statistical Learning,
    2nd ed., Springer, section 3.4.1.

    Examples
    --------
    >>> import numpy as np
    >>> X = np.random.default_rng(0).normal(size=(50, 2))
    >>> Y = np.column_stack([1 + 2 * X[:, 0], X[:, 0] * X[:, 1]])
    >>> model = RidgeCorrection(alpha=1e-9, interactions=True).fit(X, Y)
    >>> model.predict(X).shape
    (50, 2)
    """

    def __init__(self, alpha=1.0, interactions=False, interaction_features=None, clear_sky_features=None,
                 target_transforms=None):
        self.alpha = alpha
        self.interactions = interactions
        self.interaction_features = interaction_features
        self.clear_sky_features = clear_sky_features
        self.target_transforms = target_transforms

    def _check_parameters(self):
        check_number("alpha", self.alpha, 0.0)
        check_bool("interactions", self.interactions)
        _check_feature_list("interaction_features", self.interaction_features, 2)
        _check_feature_list("clear_sky_features", self.clear_sky_features, 0)
        check_transforms(self.target_transforms)

    def _pairs(self, n_feature, feature_names):
        """Index pairs (i < j) of the product terms, from ``interactions`` and ``interaction_features``."""
        if not self.interactions:
            return []
        chosen = range(n_feature)
        if self.interaction_features is not None:
            chosen = sorted(_feature_indices("interaction_features", self.interaction_features, feature_names,
                                             n_feature))
        return [(i, j) for a, i in enumerate(chosen) for j in chosen[a + 1:]]

    def fit(self, X, Y, feature_names=None):
        """Fit the coefficients in closed form.

        Parameters
        ----------
        X : array_like (n_sample, n_feature)
            Features, in their own units.
        Y : array_like (n_sample, n_target) or (n_sample,)
            Corrections [1].
        feature_names : list of str, optional
            Name of each column of ``X``; needed when ``interaction_features`` or
            ``clear_sky_features`` list names.  Kept as ``feature_names_``.

        Returns
        -------
        self
        """
        X, Y, one_column = self._start_fit(X, Y, feature_names)
        n_feature = X.shape[1]
        pairs = self._pairs(n_feature, self.feature_names_)
        X, Y = self._fit_gate_and_envelope(X, Y)
        mean = X.mean(axis=0)
        scale = X.std(axis=0)
        # Standardizing the round-off spread of a constant feature would turn any other
        # value of it into a term of order 1e13.
        scale[near_constant(mean, scale)] = 1.0
        self.feature_mean_, self.feature_scale_, self.interaction_pairs_ = mean, scale, pairs
        T = self._terms(X)
        Y, weights = self._fit_transforms(X, Y)
        coef, intercept = np.empty((Y.shape[1], T.shape[1])), np.empty(Y.shape[1])
        plain = self.target_transform_[0] < 0
        if plain.any():
            coef[plain], intercept[plain] = _ridge_solve(T, Y[:, plain], self.alpha)
        for m in np.flatnonzero(~plain):
            c, b = _ridge_solve(T, Y[:, m:m + 1], self.alpha, weights[:, m])
            coef[m], intercept[m] = c[0], b[0]
        self.coef_ = np.ascontiguousarray(coef)
        self.intercept_ = intercept
        self.n_features_in_ = n_feature
        self._one_column = one_column
        names = self.feature_names_ or [f"x{k}" for k in range(n_feature)]
        self.term_names_ = list(names) + [f"{names[i]}*{names[j]}" for i, j in pairs]
        return self

    def _terms(self, X):
        Z = (X - self.feature_mean_) / self.feature_scale_
        if not self.interaction_pairs_:
            return Z
        products = [Z[:, i] * Z[:, j] for i, j in self.interaction_pairs_]
        return np.column_stack([Z] + products)

    def _learned(self, X):
        return self.intercept_ + self._terms(self._within_training_range(X)) @ self.coef_.T

    def _within_training_range(self, X):
        # A quadratic in the features runs away outside the data it was fitted on (on longwave
        # families left out of training: 4 times worse than no correction); held at the edge of
        # the training envelope, a feature keeps the value whose effect the fit has seen.
        envelope = getattr(self, "envelope_", None)   # none on estimators pickled before the envelope
        if envelope is None:
            return X
        return np.clip(X, envelope.feature_min, envelope.feature_max)


def _ridge_solve(T, Y, alpha, weights=None):
    """Ridge coefficients (n_target, n_term) and intercepts of ``Y`` on the terms ``T``, with an
    unpenalised intercept, through the SVD of the (weighted) centred terms."""
    if weights is None:
        term_mean, target_mean, root = T.mean(axis=0), Y.mean(axis=0), 1.0
    else:
        term_mean, target_mean = weights @ T / weights.sum(), weights @ Y / weights.sum()
        root = np.sqrt(weights)[:, None]
    U, s, Vt = np.linalg.svd(root * (T - term_mean), full_matrices=False)
    if alpha > 0:
        shrink = s / (s * s + alpha)
    else:
        kept = s > SINGULAR_CUTOFF * (s[0] if s.size else 0.0)
        shrink = np.where(kept, 1.0 / np.where(kept, s, 1.0), 0.0)
    coef = (Vt.T @ (shrink[:, None] * (U.T @ (root * (Y - target_mean))))).T
    return coef, target_mean - coef @ term_mean


class BoostingParameters:
    """The parameters of the boosted ensembles: those of :class:`BoostedCorrection`, which the
    heating-rate models (:mod:`surrogate3d.learn.profile_model`) take too, with their own
    defaults, and pass on to the ensemble they build."""

    def _keep_boosting_parameters(self, max_iter, learning_rate, max_leaf_nodes, min_samples_leaf, l2_regularization,
                                  random_state):
        # Kept as given, unchecked: scikit-learn's get_params and clone read them back by name.
        self.max_iter = max_iter
        self.learning_rate = learning_rate
        self.max_leaf_nodes = max_leaf_nodes
        self.min_samples_leaf = min_samples_leaf
        self.l2_regularization = l2_regularization
        self.random_state = random_state


class BoostedCorrection(_PairsTableMixin, BoostingParameters, RegressorMixin, BaseEstimator):
    """Gradient-boosted regression trees, one histogram-based ensemble per target.

    Each target gets its own :class:`sklearn.ensemble.HistGradientBoostingRegressor`
    (squared error, no early stopping, fixed ``random_state``), fitted on the raw
    (unstandardized) features, so that the same data and parameters give the same trees.

    Parameters
    ----------
    max_iter : int, default 300
        Boosting iterations (trees per target), >= 1.
    learning_rate : float, default 0.1
        Shrinkage of each tree, in (0, 1].
    max_leaf_nodes : int, default 31
        Leaves per tree, >= 2.
    min_samples_leaf : int, default 20
        Minimum training samples per leaf, >= 1.
    l2_regularization : float, default 0.0
        L2 penalty on leaf values, >= 0.
    random_state : int, default 0
        Seed, >= 0 (only matters if the ensemble subsamples for binning, above 200 000
        samples).
    clear_sky_features : list of str or int, optional
        The clear-sky gate, as for :class:`RidgeCorrection`: where every listed feature
        is within :data:`CLEAR_SKY_TOLERANCE` of zero, :meth:`predict` returns exactly 0
        and :meth:`fit` leaves the sample out.  None or empty: no gate.
    target_transforms : list of dict or None, optional
        As for :class:`RidgeCorrection`: the ensembles learn residuals, a scaled target
        with sample weights ``scale**2``.

    Attributes
    ----------
    estimators_ : list of HistGradientBoostingRegressor
        One per target, in target order.  The prediction of target ``m`` for a feature
        vector ``x`` is ``estimators_[m]._baseline_prediction[0, 0]`` plus, for every tree
        ``estimators_[m]._predictors[k][0]``, the ``value`` of the leaf reached from node 0
        by going to ``left`` when ``x[feature_idx] <= num_threshold`` (or, for NaN,
        when ``missing_go_to_left``) and to ``right`` otherwise, until ``is_leaf``; the
        learning rate is already folded into the leaf values.
    n_iter_ : list of int
        Boosting iterations of each target's ensemble (``max_iter``: no early stopping).
    clear_sky_indices_ : list of int
        Column indices of the gate features (empty without a gate).
    clear_sky_tolerance_ : float
        Largest ``|x|`` of a gate feature counted as zero (:data:`CLEAR_SKY_TOLERANCE`).
    envelope_ : surrogate3d.runtime.envelope.TrainingEnvelope
        Ranges and distance threshold of the (ungated) training samples;
        :meth:`envelope_check` flags samples outside it.
    n_features_in_ : int
    feature_names_ : list of str or None
        The ``feature_names`` given to :meth:`fit` (set by :meth:`fit_pairs`).
    target_names_ : list of str or None
        Set by :meth:`fit_pairs`; None after a plain :meth:`fit`.

    References
    ----------
    Friedman, J. H., 2001: Greedy function approximation: a gradient boosting machine.
    Annals of Statistics, 29, 1189-1232.

    Ke, G. et al., 2017: LightGBM: a highly efficient gradient boosting decision tree.
    Advances in Neural Information Processing Systems 30 (histogram-based splits).

    Examples
    --------
    >>> import numpy as np
    >>> X = np.random.default_rng(0).uniform(size=(200, 1))
    >>> model = BoostedCorrection(max_iter=20).fit(X, (X[:, 0] > 0.5).astype(float))
    >>> float(model.predict([[0.9]])[0]) > 0.5
    True
    """

    def __init__(self, max_iter=300, learning_rate=0.1, max_leaf_nodes=31, min_samples_leaf=20,
                 l2_regularization=0.0, random_state=0, clear_sky_features=None, target_transforms=None):
        self._keep_boosting_parameters(max_iter, learning_rate, max_leaf_nodes, min_samples_leaf, l2_regularization,
                                       random_state)
        self.clear_sky_features = clear_sky_features
        self.target_transforms = target_transforms

    def _check_parameters(self):
        check_integer("max_iter", self.max_iter, 1)
        check_number("learning_rate", self.learning_rate, 0.0, 1.0, low_open=True)
        check_integer("max_leaf_nodes", self.max_leaf_nodes, 2)
        check_integer("min_samples_leaf", self.min_samples_leaf, 1)
        check_number("l2_regularization", self.l2_regularization, 0.0)
        check_integer("random_state", self.random_state, 0, 2**32 - 1)
        _check_feature_list("clear_sky_features", self.clear_sky_features, 0)
        check_transforms(self.target_transforms)

    def fit(self, X, Y, feature_names=None):
        """Fit one ensemble per target column.

        Parameters
        ----------
        X : array_like (n_sample, n_feature)
        Y : array_like (n_sample, n_target) or (n_sample,)
            Corrections [1].
        feature_names : list of str, optional
            Name of each column of ``X``, kept as ``feature_names_``; needed when
            ``clear_sky_features`` lists names.

        Returns
        -------
        self
        """
        X, Y, one_column = self._start_fit(X, Y, feature_names)
        X, Y = self._fit_gate_and_envelope(X, Y)
        Y, weights = self._fit_transforms(X, Y)
        scaled = self.target_transform_[0] >= 0
        self.estimators_ = [
            HistGradientBoostingRegressor(
                loss="squared_error", max_iter=int(self.max_iter), learning_rate=float(self.learning_rate),
                max_leaf_nodes=int(self.max_leaf_nodes), min_samples_leaf=int(self.min_samples_leaf),
                l2_regularization=float(self.l2_regularization), early_stopping=False,
                random_state=int(self.random_state)).fit(X, Y[:, m], sample_weight=weights[:, m] if scaled[m] else None)
            for m in range(Y.shape[1])]
        self.n_iter_ = [int(estimator.n_iter_) for estimator in self.estimators_]
        self.n_features_in_ = X.shape[1]
        self._one_column = one_column
        return self

    def _learned(self, X):
        return np.column_stack([estimator.predict(X) for estimator in self.estimators_])


#: Model kinds a training recipe may name -> estimator class.
MODEL_KINDS = {"ridge": RidgeCorrection, "boosted": BoostedCorrection}


def make_estimator(kind, params=None):
    """A new, unfitted estimator of a model kind with parameters checked.

    Parameters
    ----------
    kind : str
        A key of :data:`MODEL_KINDS`.
    params : dict, optional
        Constructor parameters.

    Raises
    ------
    surrogate3d.errors.ParameterError
        Unknown kind or parameter, or a value out of range (named in the message).
    """
    cls = MODEL_KINDS[check_option("model kind", kind, sorted(MODEL_KINDS))]
    allowed = sorted(cls().get_params())
    unknown = sorted(set(params or {}) - set(allowed))
    if unknown:
        raise ParameterError(f"{kind} model has no parameters {unknown}; allowed: {allowed}")
    estimator = cls(**(params or {}))
    estimator._check_parameters()
    return estimator


def model_kind(estimator):
    """The recipe name (key of :data:`MODEL_KINDS`) of an estimator's class."""
    for kind, cls in MODEL_KINDS.items():
        if type(estimator) is cls:
            return kind
    raise ValidationError(f"{type(estimator).__name__} is not a surrogate3d correction model")
