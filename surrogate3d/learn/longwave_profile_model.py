"""The longwave heating-rate correction: the 3D change of the net absorption of every host layer.

The longwave twin of :mod:`surrogate3d.learn.profile_model`.  :class:`LongwaveProfileCorrection`
learns the 3D-minus-independent-column net absorption *per km* of a layer
[W m-2 km-1] from the column's longwave features and the layer's own
(:mod:`surrogate3d.pairs.longwave_layer_features`), both independent of how many layers
the host has.  The target is already in W m-2 and every layer holds air that emits, so
there is no scale transform and no layer is forced to zero;
:func:`~surrogate3d.runtime.longwave_profile.match_longwave_column` then makes the
profile sum to the column's ``longwave_atmosphere_net_absorption`` correction.
"""

import numpy as np

from ..core.coefficient_format import LONGWAVE_PROFILE_TARGET
from ..errors import ValidationError
from ..pairs.longwave_layer_features import LONGWAVE_LAYER_FEATURES
from ..runtime.longwave_profile import LONGWAVE_LAYER_FIELDS, longwave_density_to_layers, longwave_layer_rows
from .profile_model import LayerDensityModel

#: The pair-table variable a longwave profile model learns [W m-2].
LONGWAVE_LAYER_TARGET = "layer_net_absorption_target"


def longwave_layer_fields(pairs):
    """The layer fields of :data:`LONGWAVE_LAYER_FIELDS` from a longwave pair table, plus ``surface_temperature``.

    Parameters
    ----------
    pairs : xarray.Dataset
        A longwave pair table with per-layer variables.

    Returns
    -------
    dict of str -> ndarray

    Raises
    ------
    surrogate3d.errors.ValidationError
        The table has no longwave per-layer variables (``docs/pairs-format.md``).
    """
    missing = [var for var in list(LONGWAVE_LAYER_FIELDS.values()) + [LONGWAVE_LAYER_TARGET] if var not in pairs]
    if missing:
        raise ValidationError(f"the longwave pairs table has no per-layer variables ({', '.join(missing)}); build "
                              "it again with this version (docs/pairs-format.md, longwave per-layer variables)")
    fields = {key: np.asarray(pairs[var].values, dtype=np.float64) for key, var in LONGWAVE_LAYER_FIELDS.items()}
    fields["surface_temperature"] = np.asarray(pairs["surface_temperature"].values, dtype=np.float64)
    return fields


class LongwaveProfileCorrection(LayerDensityModel):
    """Gradient-boosted 3D correction of the longwave net absorption of every host layer.

    Rows are (host column, host layer) pairs with the column's longwave features followed
    by :data:`~surrogate3d.pairs.longwave_layer_features.LONGWAVE_LAYER_FEATURES`; the
    target is the 3D-minus-independent-column net absorption per km of the layer
    [W m-2 km-1] (:class:`~surrogate3d.learn.models.BoostedCorrection`, squared error).

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
    random_state : int, default 0

    Attributes
    ----------
    boosted_ : BoostedCorrection
        The fitted ensemble on layer rows.
    feature_names_ : list of str
        Column features, in the order :meth:`predict` expects them.
    target_names_ : list of str
        ``["longwave_layer_net_absorption_density"]``.

    Examples
    --------
    >>> rng = np.random.default_rng(0)
    >>> n, L = 60, 3
    >>> fields = {"bottom": np.tile([0.0, 500.0, 1000.0], (n, 1)), "top": np.tile([500.0, 1000.0, 1500.0], (n, 1)),
    ...           "cloud_fraction": rng.uniform(0, 1, (n, L)), "liquid_water_path": rng.uniform(0, 50, (n, L)),
    ...           "air_temperature": rng.uniform(270, 290, (n, L)),
    ...           "two_stream_net_absorption": rng.uniform(-20, 5, (n, L)),
    ...           "surface_temperature": rng.uniform(285, 295, n)}
    >>> X = rng.uniform(size=(n, 2))
    >>> model = LongwaveProfileCorrection(max_iter=20, min_samples_leaf=5)
    >>> model = model.fit(X, ["a", "b"], fields, X[:, :1] * [[1.0, 2.0, 3.0]])
    >>> model.predict(X, fields).shape
    (60, 3)
    """

    _layer_features = LONGWAVE_LAYER_FEATURES
    _layer_rows = staticmethod(longwave_layer_rows)
    _density_to_layers = staticmethod(longwave_density_to_layers)
    _pair_layer_fields = staticmethod(longwave_layer_fields)
    _pair_target = LONGWAVE_LAYER_TARGET
    _target_name = LONGWAVE_PROFILE_TARGET
    _label = "longwave profile model"
