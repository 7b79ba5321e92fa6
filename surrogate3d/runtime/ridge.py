"""Evaluation of the standardized ridge regression with pairwise products (numpy only).

With ``z = (x - feature_mean) / feature_scale``, ``x`` held within the training range where
the file gives one (format 1.5 on: the training envelope's ``feature_min`` and
``feature_max``), the prediction of target ``m`` is::

    y[m] = intercept[m] + sum_k coef[m, k] z[k] + sum_p coef[m, n_feature + p] z[i_p] z[j_p]

over the interaction pairs ``(i_p, j_p)``.  The product terms are evaluated as a
quadratic form over the features that appear in a pair, ``s``:
``y[m] = intercept[m] + z . c[m] + z_s . (Q[m] z_s)`` with ``c[m]`` the linear
coefficients and ``Q[m]`` the strictly upper-triangular matrix of the pair
coefficients, so one matrix product serves all targets and no product column is ever
formed; only the order of the additions differs from the term-by-term sum.

A feature constant up to round-off in training (:func:`near_constant`) is stored with
scale 1 since format 1.2.  Files written earlier may hold the round-off spread itself as
its scale (the ridge shipped with surrogate3d 0.1.0: ``surface_albedo``, 1.4e-14), which
would turn any other value of the feature into a standardized value of order 1e13; for
such a feature the standardized value is clipped to [-1, 1], the only values its
training samples had, so its terms stay what they were in training.
"""

import numpy as np

from ..core.config import NEAR_CONSTANT, ROW_BLOCK


def near_constant(mean, scale):
    """Which features are constant up to round-off: ``scale <= NEAR_CONSTANT * |mean|``.

    Parameters
    ----------
    mean, scale : array_like (n_feature,)
        Mean and standard deviation of each feature over the training samples, in its units.

    Returns
    -------
    ndarray of bool (n_feature,)
        True for a feature without variation beyond round-off (an exactly constant
        feature, scale 0, included).

    Examples
    --------
    >>> near_constant([0.06, 0.0, 5.0], [1.4e-14, 0.0, 0.1]).tolist()
    [True, True, False]
    """
    return np.asarray(scale, dtype=np.float64) <= NEAR_CONSTANT * np.abs(np.asarray(mean, dtype=np.float64))


class RidgeModel:
    """A ridge correction prepared for evaluation.

    Parameters
    ----------
    feature_mean, feature_scale : ndarray (n_feature,)
        Standardization, in the units of each feature.
    interaction_pairs : ndarray (n_pair, 2) of int
    coef : ndarray (n_target, n_feature + n_pair)
    intercept : ndarray (n_target,)
    clip_min, clip_max : ndarray (n_feature,), optional
        The range every feature is held within before it is standardized (the training
        envelope's, in the feature's units); None: no clipping.

    Examples
    --------
    >>> import numpy as np
    >>> model = RidgeModel(np.zeros(2), np.ones(2), np.array([[0, 1]]), np.array([[1.0, 0.0, 2.0]]), np.zeros(1))
    >>> model.predict(np.array([[3.0, 4.0]])).tolist()          # 3 + 2 * 3 * 4
    [[27.0]]
    """

    def __init__(self, feature_mean, feature_scale, interaction_pairs, coef, intercept, clip_min=None, clip_max=None):
        self.feature_mean = np.asarray(feature_mean, dtype=np.float64)
        self.clip = None if clip_min is None else (np.asarray(clip_min, dtype=np.float64),
                                                    np.asarray(clip_max, dtype=np.float64))
        self.feature_scale = np.asarray(feature_scale, dtype=np.float64)
        self.intercept = np.asarray(intercept, dtype=np.float64)
        self.near_constant = np.flatnonzero(near_constant(self.feature_mean, self.feature_scale))
        coef = np.asarray(coef, dtype=np.float64)
        pairs = np.asarray(interaction_pairs, dtype=np.int64).reshape(-1, 2)
        n_feature, n_target = self.feature_mean.size, self.intercept.size
        self.linear = np.ascontiguousarray(coef[:, :n_feature].T)           # (n_feature, n_target)
        self.has_pairs = pairs.shape[0] > 0
        if self.has_pairs:
            self.paired = np.unique(pairs)                                   # the features s
            k = np.searchsorted(self.paired, pairs)
            # quadratic[b, m * n_paired + a] = coefficient of z_s[a] z_s[b] for target m
            quadratic = np.zeros((self.paired.size, n_target, self.paired.size))
            quadratic[k[:, 1], :, k[:, 0]] = coef[:, n_feature:].T
            self.quadratic = quadratic.reshape(self.paired.size, n_target * self.paired.size)

    def predict(self, X):
        """Predictions (n, n_target) for finite features X (n, n_feature)."""
        X = np.asarray(X, dtype=np.float64)
        out = np.empty((X.shape[0], self.intercept.size))
        for start in range(0, X.shape[0], ROW_BLOCK):
            out[start:start + ROW_BLOCK] = self._predict_block(X[start:start + ROW_BLOCK])
        return out

    def _predict_block(self, X):
        if self.clip is not None:
            X = np.clip(X, *self.clip)
        Z = (X - self.feature_mean) / self.feature_scale
        if self.near_constant.size:
            Z[:, self.near_constant] = np.clip(Z[:, self.near_constant], -1.0, 1.0)
        linear = Z @ self.linear
        if not self.has_pairs:
            return self.intercept + linear
        paired = Z if self.paired.size == Z.shape[1] else Z[:, self.paired]
        inner = (paired @ self.quadratic).reshape(Z.shape[0], -1, self.paired.size)
        return self.intercept + linear + np.einsum("nk,nmk->nm", paired, inner)
