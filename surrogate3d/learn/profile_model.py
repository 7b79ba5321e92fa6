"""The heating-rate correction: the 3D change of the absorption of every host layer.

A host model heats each of its layers, so a column-integrated absorption correction is
not enough.  :class:`ProfileCorrection` learns the 3D-minus-independent-column absorption
*per unit thickness* of a layer (km-1, fraction of the incident flux) from the column's
features and the layer's own (:mod:`surrogate3d.pairs.layer_features`): both are
independent of how many layers the host has, so a model trained on one vertical grid
predicts on another.  The learned density is scaled by the independent-column absorption
of the column, so an atmosphere that does not absorb gets no correction (as for the
column absorption target, :mod:`surrogate3d.learn.transforms`), and a layer whose
independent-column absorption is zero (no absorber) gets none.
:func:`~surrogate3d.runtime.profile.match_column_integral` then makes the profile sum to
the column's absorption correction, so energy is conserved.
"""

import numpy as np
from sklearn.base import BaseEstimator

from ..core.coefficient_format import PROFILE_TARGET
from ..core.validation import check_number
from ..errors import ParameterError, ValidationError
from ..pairs.layer_features import LAYER_FEATURES
from ..runtime.profile import LAYER_FIELDS, density_to_layers, layer_rows
from .models import BoostedCorrection, BoostingParameters
from .pairs_table import feature_matrix

#: The scale of the learned density: the column's independent-column absorption.
SCALE_FEATURE = "independent_column_column_absorption"


def layer_fields(pairs):
    """The layer fields of :data:`LAYER_FIELDS` from a pair table, plus ``cos_solar_zenith``.

    Raises
    ------
    surrogate3d.errors.ValidationError
        The table has no per-layer variables (``docs/pairs-format.md``).
    """
    missing = [var for var in list(LAYER_FIELDS.values()) + ["layer_absorption_target"] if var not in pairs]
    if missing:
        raise ValidationError(f"the pairs table has no per-layer variables ({', '.join(missing)}); build it from "
                              "results with per-cell absorption (docs/pairs-format.md, per-layer variables)")
    fields = {key: np.asarray(pairs[var].values, dtype=np.float64) for key, var in LAYER_FIELDS.items()}
    fields["cos_solar_zenith"] = np.cos(np.radians(np.asarray(pairs["solar_zenith_angle"].values, dtype=np.float64)))
    return fields


class LayerDensityModel(BoostingParameters, BaseEstimator):
    """What the shortwave and longwave heating-rate models share: a boosted ensemble on
    (column, layer) rows learning the per-km density of a layer target, its parameters
    (:class:`~surrogate3d.learn.models.BoostedCorrection`'s, with the defaults of both
    heating-rate models) and its fit and prediction.

    A subclass names its layer features, layer rows, density-to-layer conversion, layer
    fields of a pair table, target variable and target name as class attributes, and may
    give its ensemble target transforms in ``_target_transforms``.
    """

    _layer_features = None
    _layer_rows = None
    _density_to_layers = None
    _pair_layer_fields = None
    _pair_target = None
    _target_name = None
    _label = None

    def __init__(self, max_iter=200, learning_rate=0.1, max_leaf_nodes=31, min_samples_leaf=50,
                 l2_regularization=0.0, random_state=0):
        self._keep_boosting_parameters(max_iter, learning_rate, max_leaf_nodes, min_samples_leaf, l2_regularization,
                                       random_state)

    def _target_transforms(self):
        return None

    def _boosted(self):
        boosted = BoostedCorrection(max_iter=self.max_iter, learning_rate=self.learning_rate,
                                    max_leaf_nodes=self.max_leaf_nodes, min_samples_leaf=self.min_samples_leaf,
                                    l2_regularization=self.l2_regularization, random_state=self.random_state,
                                    target_transforms=self._target_transforms())
        boosted._check_parameters()
        return boosted

    def fit(self, X, feature_names, fields, target):
        """Fit on column features ``X`` (n_column, n_feature), their names, the layer fields
        and the correction of every layer ``target`` (n_column, n_layer) (see the subclass)."""
        boosted = self._boosted()
        names = list(feature_names)
        rows, valid = self._layer_rows(X, fields)
        if len(names) + len(self._layer_features) != rows.shape[1]:
            raise ParameterError(f"feature_names has {len(names)} names for "
                                 f"{rows.shape[1] - len(self._layer_features)} feature columns")
        thickness = np.asarray(fields["top"], dtype=np.float64) - np.asarray(fields["bottom"], dtype=np.float64)
        density = (1000.0 * np.asarray(target, dtype=np.float64) / thickness).reshape(-1)
        keep = valid & np.isfinite(density)
        if not keep.any():
            raise ValidationError(f"no layer with a finite target to fit the {self._label} on")
        self.boosted_ = boosted.fit(rows[keep], density[keep], feature_names=names + list(self._layer_features))
        self.feature_names_ = names
        self.target_names_ = [self._target_name]
        self.n_features_in_ = len(names)
        return self

    def predict(self, X, fields):
        """Correction of every layer, (n_column, n_layer); NaN for padding layers (units: see the subclass)."""
        if not hasattr(self, "boosted_"):
            raise ValidationError(f"this {type(self).__name__} is not fitted yet; call fit first")
        X = np.asarray(X, dtype=np.float64)
        if X.ndim != 2 or X.shape[1] != self.n_features_in_:
            raise ParameterError(f"X must have shape (n_column, {self.n_features_in_}); got {X.shape}")
        rows, valid = self._layer_rows(X, fields)
        density = np.full(rows.shape[0], np.nan)
        density[valid] = self.boosted_.predict(rows[valid])
        return self._density_to_layers(density, fields)

    def fit_pairs(self, pairs, features):
        """Fit on a pair table's columns (features ``features``) and per-layer variables."""
        return self.fit(feature_matrix(pairs, features, f"the {self._label}"), features,
                        self._pair_layer_fields(pairs), pairs[self._pair_target].values)

    def predict_pairs(self, pairs):
        """:meth:`predict` on a pair table."""
        return self.predict(feature_matrix(pairs, self.feature_names_, f"the {self._label}"),
                            self._pair_layer_fields(pairs))


class ProfileCorrection(LayerDensityModel):
    """Gradient-boosted 3D correction of the absorption of every host layer.

    Rows are (host column, host layer) pairs with the column's features followed by
    :data:`~surrogate3d.pairs.layer_features.LAYER_FEATURES`; the target is the
    3D-minus-independent-column absorption per km of the layer, learned relative to the
    column's independent-column absorption (:class:`~surrogate3d.learn.models.BoostedCorrection`
    with a scaled target, weights ``scale**2``: the squared error of the correction).

    Parameters
    ----------
    max_iter : int, default 200
        Boosting iterations, >= 1.
    learning_rate : float, default 0.1
        In (0, 1].
    max_leaf_nodes : int, default 31
        >= 2.
    min_samples_leaf : int, default 50
        >= 1.
    l2_regularization : float, default 0.0
        >= 0.
    scale_floor : float, default 1e-4
        Smallest column absorption [1] the learned density is scaled by, > 0.
    random_state : int, default 0

    Attributes
    ----------
    boosted_ : BoostedCorrection
        The fitted ensemble on layer rows.
    feature_names_ : list of str
        Column features, in the order :meth:`predict` expects them.
    target_names_ : list of str
        ``["layer_absorption_density"]``: the absorption change per km of a layer.

    Examples
    --------
    >>> rng = np.random.default_rng(0)
    >>> n, L = 50, 3
    >>> fields = {"bottom": np.tile([0.0, 500.0, 1000.0], (n, 1)), "top": np.tile([500.0, 1000.0, 1500.0], (n, 1)),
    ...           "optical_depth": rng.uniform(0, 5, (n, L)), "cloud_fraction": rng.uniform(0, 1, (n, L)),
    ...           "independent_column_absorption": rng.uniform(0, 0.01, (n, L)),
    ...           "cos_solar_zenith": rng.uniform(0.2, 1, n), "slant_optical_depth_above": rng.uniform(0, 9, (n, L))}
    >>> X = rng.uniform(size=(n, 2))
    >>> target = 0.1 * fields["independent_column_absorption"] * X[:, :1]
    >>> model = ProfileCorrection(max_iter=20, min_samples_leaf=5).fit(X, ["a", "b"], fields, target)
    >>> model.predict(X, fields).shape
    (50, 3)
    """

    _layer_features = LAYER_FEATURES
    _layer_rows = staticmethod(layer_rows)
    _density_to_layers = staticmethod(density_to_layers)
    _pair_layer_fields = staticmethod(layer_fields)
    _pair_target = "layer_absorption_target"
    _target_name = PROFILE_TARGET
    _label = "profile model"

    def __init__(self, max_iter=200, learning_rate=0.1, max_leaf_nodes=31, min_samples_leaf=50,
                 l2_regularization=0.0, scale_floor=1e-4, random_state=0):
        super().__init__(max_iter, learning_rate, max_leaf_nodes, min_samples_leaf, l2_regularization, random_state)
        self.scale_floor = scale_floor

    def _target_transforms(self):
        check_number("scale_floor", self.scale_floor, 0.0, None, low_open=True)
        return [{"scale_feature": SCALE_FEATURE, "scale_floor": float(self.scale_floor)}]
