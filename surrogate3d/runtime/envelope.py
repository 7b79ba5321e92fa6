"""The training envelope: where a model's training columns lie in feature space (numpy only).

A learned correction is only known to hold near the data it was fitted on.  The envelope
stored with every model (coefficient format 1.2) flags the columns a prediction would
extrapolate to, by two cheap tests:

* **ranges**: a feature outside ``[feature_min, feature_max]`` of the training columns;
* **distance**: the Mahalanobis distance of the column from the training columns,
  beyond the ``quantile`` (0.99) of the training columns' own distances.

The distance is taken in the standardized feature space ``z = (x - center) / scale``
(training mean and standard deviation; scale 1 for a feature constant up to round-off)
under the probabilistic principal-component covariance of the training columns (Tipping
and Bishop 1999): the ``r`` leading eigenvectors ``v_j`` of their correlation matrix keep
their variances ``lambda_j``, every other direction gets the mean ``sigma^2`` of the
remaining eigenvalues, so::

    d^2 = sum_j (v_j . z)^2 / lambda_j + |z - sum_j (v_j . z) v_j|^2 / sigma^2

This is the exact Mahalanobis distance under that covariance, whose inverse needs only
the ``r`` components: the file stores ``r x n_feature`` numbers instead of a full
``n_feature x n_feature`` matrix, and a column costs two small matrix-vector products.
Directions the training columns never varied in (exact identities between features)
weigh most.

The envelope's arrays are rounded to single precision (ranges outward, so every training
column stays inside) before the threshold is measured with them: seven digits are more
than a flag needs, and the rounded doubles compress to half the size in the JSON twin.  A
column whose clear-sky gate holds is never flagged: its zero correction is a physical rule,
not an extrapolation.  A missing (NaN) feature is outside.

``docs/export-format.md`` stores the fields; ``docs/methods/models-and-metrics.md``
gives the formula and how often held-out and left-out columns are flagged.
"""

import math
from dataclasses import dataclass

import numpy as np

from ..core.coefficient_format import ENVELOPE_ARRAYS as ARRAYS
from ..core.coefficient_format import ENVELOPE_FIELD
from ..core.coefficient_format import ENVELOPE_SCALARS as SCALARS
from ..core.config import ENVELOPE_COMPONENTS, ENVELOPE_QUANTILE, ENVELOPE_VARIANCE_FLOOR, ROW_BLOCK
from ..core.validation import check_integer, check_number
from ..errors import ValidationError
from .ridge import near_constant


class EnvelopeWarning(UserWarning):
    """Columns of a prediction lie outside the training envelope of the model."""


@dataclass
class EnvelopeCheck:
    """Which columns lie outside a model's training envelope.

    Attributes
    ----------
    outside : ndarray of bool (n_column,)
        The flag: outside the ranges or beyond the distance threshold, and not gated.
    outside_range : ndarray of bool (n_column,)
        Some feature outside its training range (gated columns included).
    beyond_distance : ndarray of bool (n_column,)
        Distance above the threshold (gated columns included).
    distance : ndarray (n_column,)
        Mahalanobis distance from the training columns [1].
    first_feature_outside : ndarray of int (n_column,)
        Index of the first feature outside its range, -1 where none is.
    available : bool
        False for a model without an envelope (files before format 1.2): nothing is
        flagged, distances are NaN.
    note : str
        Why nothing could be checked, or "".
    """

    outside: np.ndarray
    outside_range: np.ndarray
    beyond_distance: np.ndarray
    distance: np.ndarray
    first_feature_outside: np.ndarray
    available: bool = True
    note: str = ""

    @property
    def n_outside(self):
        """Number of flagged columns."""
        return int(np.count_nonzero(self.outside))

    @property
    def share_outside(self):
        """Share of flagged columns (NaN for no columns)."""
        return self.n_outside / self.outside.size if self.outside.size else float("nan")

    @classmethod
    def unavailable(cls, n_column, note):
        """The check of a model without an envelope: no column flagged."""
        none = np.zeros(n_column, dtype=bool)
        return cls(none, none.copy(), none.copy(), np.full(n_column, np.nan), np.full(n_column, -1), False, note)


class TrainingEnvelope:
    """Per-feature ranges and the distance threshold of a model's training columns.

    Build it with :meth:`fit` (from the training feature matrix) or :meth:`from_dict`
    (from a coefficient file).

    Parameters
    ----------
    feature_min, feature_max, center, scale : ndarray (n_feature,)
        Training ranges, mean and standard deviation (1 for a feature constant up to
        round-off), in the units of each feature.
    components : ndarray (n_component, n_feature)
        Leading orthonormal eigenvectors of the correlation matrix of the standardized
        training features.
    component_variance : ndarray (n_component,)
        Their eigenvalues, at least :data:`~surrogate3d.core.config.ENVELOPE_VARIANCE_FLOOR`.
    residual_variance : float
        Mean of the other eigenvalues, at least :data:`~surrogate3d.core.config.ENVELOPE_VARIANCE_FLOOR`.
    distance_threshold : float
        The ``quantile`` of the training columns' distances.
    quantile : float
    n_samples : int
        Training columns the envelope was fitted on.

    References
    ----------
    Mahalanobis, P. C., 1936: On the generalised distance in statistics. Proceedings of
    the National Institute of Sciences of India, 2, 49-55.

    Tipping, M. E. and C. M. Bishop, 1999: Probabilistic principal component analysis.
    Journal of the Royal Statistical Society B, 61, 611-622.

    Examples
    --------
    >>> import numpy as np
    >>> X = np.random.default_rng(0).normal(size=(500, 3))
    >>> envelope = TrainingEnvelope.fit(X)
    >>> envelope.check(np.array([[0.0, 0.0, 0.0], [0.0, 9.0, 0.0]])).outside.tolist()
    [False, True]
    """

    def __init__(self, feature_min, feature_max, center, scale, components, component_variance, residual_variance,
                 distance_threshold, quantile, n_samples):
        self.feature_min = np.asarray(feature_min, dtype=np.float64)
        self.feature_max = np.asarray(feature_max, dtype=np.float64)
        self.center = np.asarray(center, dtype=np.float64)
        self.scale = np.asarray(scale, dtype=np.float64)
        self.components = np.asarray(components, dtype=np.float64).reshape(-1, self.center.size)
        self.component_variance = np.asarray(component_variance, dtype=np.float64)
        self.residual_variance = float(residual_variance)
        self.distance_threshold = float(distance_threshold)
        self.quantile = float(quantile)
        self.n_samples = int(n_samples)

    @classmethod
    def fit(cls, X, n_components=ENVELOPE_COMPONENTS, quantile=ENVELOPE_QUANTILE):
        """The envelope of training columns.

        Parameters
        ----------
        X : ndarray (n_sample, n_feature)
            Finite training features (the columns the model was fitted on), at least 2.
        n_components : int
            Components with their own variance (at most ``n_feature``).
        quantile : float
            In (0, 1]: share of the training columns within the threshold.

        Returns
        -------
        TrainingEnvelope
        """
        X = np.asarray(X, dtype=np.float64)
        if X.ndim != 2 or X.shape[0] < 2 or X.shape[1] < 1 or not np.all(np.isfinite(X)):
            raise ValidationError(f"the training envelope needs a finite (n_sample >= 2, n_feature >= 1) matrix; "
                                  f"got shape {X.shape}")
        check_integer("n_components", n_components, 1, error=ValidationError)
        check_number("quantile", quantile, 0.0, 1.0, low_open=True, error=ValidationError)
        center = X.mean(axis=0)
        scale = X.std(axis=0)
        scale[near_constant(center, scale)] = 1.0
        Z = (X - center) / scale
        eigenvalues, eigenvectors = np.linalg.eigh(Z.T @ Z / Z.shape[0])
        order = np.argsort(eigenvalues)[::-1]
        eigenvalues, eigenvectors = np.maximum(eigenvalues[order], 0.0), eigenvectors[:, order]
        r = min(n_components, X.shape[1])
        rest = eigenvalues[r:]
        envelope = cls(_single(X.min(axis=0), -np.inf), _single(X.max(axis=0), np.inf), _single(center),
                       _single(scale), _single(eigenvectors[:, :r].T),
                       _single(np.maximum(eigenvalues[:r], ENVELOPE_VARIANCE_FLOOR), np.inf),
                       max(float(rest.mean()) if rest.size else 0.0, ENVELOPE_VARIANCE_FLOOR), math.inf, quantile,
                       X.shape[0])
        envelope.distance_threshold = float(np.quantile(envelope.distance(X), quantile))
        return envelope

    @property
    def n_features(self):
        return self.center.size

    def distance(self, X):
        """Mahalanobis distance of each column from the training columns (module docstring) [1].

        Parameters
        ----------
        X : ndarray (n_column, n_feature)

        Returns
        -------
        ndarray (n_column,)
            NaN where a feature is NaN.
        """
        X = np.asarray(X, dtype=np.float64)
        out = np.empty(X.shape[0])
        for start in range(0, X.shape[0], ROW_BLOCK):
            out[start:start + ROW_BLOCK] = self._distance_block(X[start:start + ROW_BLOCK])
        return out

    def _distance_block(self, X):
        Z = (X - self.center) / self.scale
        projected = Z @ self.components.T
        # The residual itself, not |z|^2 minus the explained part: that difference of two
        # nearly equal sums loses digits, and the small residual variance magnifies them.
        residual = Z - projected @ self.components
        return np.sqrt(projected**2 @ (1.0 / self.component_variance)
                       + np.einsum("nk,nk->n", residual, residual) / self.residual_variance)

    def check(self, X, gated=None):
        """Flag the columns outside the envelope.

        Parameters
        ----------
        X : ndarray (n_column, n_feature)
            Features in the model's order and units; NaN counts as outside.
        gated : ndarray of bool (n_column,), optional
            Columns the clear-sky gate selects: never flagged.

        Returns
        -------
        EnvelopeCheck
        """
        X = np.asarray(X, dtype=np.float64)
        if X.ndim != 2 or X.shape[1] != self.n_features:
            raise ValidationError(f"features must have shape (n_column, {self.n_features}) for the training "
                                  f"envelope; got {X.shape}")
        outside_range = np.empty(X.shape[0], dtype=bool)
        for start in range(0, X.shape[0], ROW_BLOCK):
            block = X[start:start + ROW_BLOCK]
            # Written as "not inside" so that NaN, which compares false, is outside.
            outside_range[start:start + ROW_BLOCK] = ~((block >= self.feature_min)
                                                         & (block <= self.feature_max)).all(axis=1)
        first = np.full(X.shape[0], -1)
        rows = np.flatnonzero(outside_range)
        first[rows] = np.argmax(~((X[rows] >= self.feature_min) & (X[rows] <= self.feature_max)), axis=1)
        distance = self.distance(X)
        beyond = ~(distance <= self.distance_threshold)
        outside = outside_range | beyond
        if gated is not None:
            outside &= ~np.asarray(gated, dtype=bool)
        return EnvelopeCheck(outside, outside_range, beyond, distance, first)

    def to_dict(self):
        """The ``training_envelope`` field of a coefficient document (arrays as numpy arrays)."""
        out = {name: getattr(self, name).copy() for name in ARRAYS}
        out.update(residual_variance=self.residual_variance, distance_threshold=self.distance_threshold,
                   quantile=self.quantile, n_samples=self.n_samples)
        return out

    @classmethod
    def from_dict(cls, field):
        """Envelope from a checked ``training_envelope`` field
        (:func:`surrogate3d.core.coefficient_format.check_envelope_field`)."""
        return cls(**{name: field[name] for name in (*ARRAYS, *SCALARS)})


def _single(values, outward=None):
    """Values rounded to the nearest single-precision number (stored as float64).

    With ``outward`` (-inf or +inf) a value that rounded toward the other side moves one
    single-precision step toward ``outward``, so a range only widens.  Values beyond the
    single-precision range, or nonzero ones that would become 0, keep their double value.
    """
    values = np.asarray(values, dtype=np.float64)
    with np.errstate(over="ignore"):
        single = values.astype(np.float32)
    if outward is not None:
        moved = single.astype(np.float64) < values if outward > 0 else single.astype(np.float64) > values
        single = np.where(moved, np.nextafter(single, np.float32(outward)), single)
    rounded = single.astype(np.float64)
    keep = ~np.isfinite(rounded) | ((rounded == 0.0) & (values != 0.0))
    return np.where(keep, values, rounded)


def training_envelope(document):
    """The training envelope of a checked document, or None for a file without one (before format 1.2).

    Returns
    -------
    TrainingEnvelope or None
    """
    field = document.get(ENVELOPE_FIELD)
    return None if field is None else TrainingEnvelope.from_dict(field)
