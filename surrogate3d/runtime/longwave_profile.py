"""Longwave heating-rate (profile) corrections on a host's own layers (numpy only).

The longwave twin of :mod:`surrogate3d.runtime.profile`.  A longwave profile model
predicts, for every (host column, host layer) row of the column's longwave features
followed by :data:`~surrogate3d.pairs.longwave_layer_features.LONGWAVE_LAYER_FEATURES`,
the 3D change of the layer's net absorption per km of thickness [W m-2 km-1].
:func:`longwave_layer_rows` builds the rows from the host's layer fields,
:func:`longwave_density_to_layers` turns densities into layer corrections [W m-2], and
:func:`match_longwave_column` makes them sum to the column's
``longwave_atmosphere_net_absorption`` correction, so energy is conserved.  The training
(:mod:`surrogate3d.learn.longwave_profile_model`) and the exported model
(:meth:`surrogate3d.runtime.CorrectionModel.predict_profile`) share these.
"""

import numpy as np

from ..errors import ParameterError
from ..pairs.longwave_layer_features import LONGWAVE_LAYER_INPUTS, longwave_layer_features
from .profile import check_layer_shapes, match_column_integral, stack_layer_rows

#: The layer fields a longwave profile model reads (arrays (n_column, n_layer)) and the
#: pair-table variables holding them; with them ``surface_temperature`` (n_column,) [K].
LONGWAVE_LAYER_FIELDS = dict(zip(LONGWAVE_LAYER_INPUTS, (
    "host_layer_bottom", "host_layer_top", "layer_cloud_fraction", "layer_liquid_water_path", "layer_air_temperature",
    "two_stream_layer_net_absorption")))


def check_longwave_layer_fields(fields, n_column=None):
    """The longwave layer fields as float arrays, checked: every key present, one shape, edges increasing.

    Parameters
    ----------
    fields : dict
        The keys of :data:`LONGWAVE_LAYER_FIELDS` (n_column, n_layer) and
        ``surface_temperature`` (n_column,) [K].
    n_column : int, optional
        The number of columns they must have.

    Returns
    -------
    dict of str -> ndarray

    Raises
    ------
    surrogate3d.errors.ParameterError
        Naming the missing field, the field of another shape, or the column and layer
        whose edges do not increase.
    """
    missing = [key for key in list(LONGWAVE_LAYER_FIELDS) + ["surface_temperature"] if key not in fields]
    if missing:
        raise ParameterError(f"longwave layer fields lack {missing}; a longwave profile needs "
                             f"{list(LONGWAVE_LAYER_FIELDS)} and surface_temperature")
    out = {key: np.asarray(fields[key], dtype=np.float64) for key in LONGWAVE_LAYER_FIELDS}
    out["surface_temperature"] = np.asarray(fields["surface_temperature"], dtype=np.float64).reshape(-1)
    check_layer_shapes(out, LONGWAVE_LAYER_FIELDS, n_column)
    n = out["bottom"].shape[0]
    if out["surface_temperature"].shape != (n,):
        raise ParameterError(f"surface_temperature must have one value per column ({n}); got "
                             f"{out['surface_temperature'].shape}")
    return out


def longwave_layer_rows(X, fields):
    """One row per (column, layer): the column's features ``X`` (n_column, n_feature), then the layer's.

    Parameters
    ----------
    X : array_like (n_column, n_feature)
        The columns' longwave features.
    fields : dict
        As for :func:`check_longwave_layer_fields`.

    Returns
    -------
    rows : ndarray (n_column * n_layer, n_feature + len(LONGWAVE_LAYER_FEATURES))
    valid : ndarray of bool (n_column * n_layer,)
        Rows of layers the column has (not NaN padding).
    """
    X = np.asarray(X, dtype=np.float64)
    fields = check_longwave_layer_fields(fields, X.shape[0])
    local = longwave_layer_features(*(fields[key] for key in LONGWAVE_LAYER_FIELDS), fields["surface_temperature"])
    return stack_layer_rows(X, local)


def longwave_density_to_layers(density, fields):
    """Layer net-absorption corrections [W m-2] from predicted densities [W m-2 km-1] (n_column, n_layer).

    Every layer holds air that absorbs and emits, so every layer may change (unlike the
    shortwave, where a layer without absorber gets none); padding layers stay NaN.
    """
    thickness = np.asarray(fields["top"], dtype=np.float64) - np.asarray(fields["bottom"], dtype=np.float64)
    return np.asarray(density, dtype=np.float64).reshape(thickness.shape) * thickness / 1000.0


def match_longwave_column(profile, column_correction):
    """Make every column's longwave profile sum to its column net-absorption correction.

    The residual ``column_correction - sum(profile)`` is shared among the layers in
    proportion to the size of their own predicted change (the model's shape of the 3D
    effect is kept: the residual goes where the model puts the change), or equally among
    the column's layers where the profile is zero throughout
    (:func:`surrogate3d.runtime.profile.match_column_integral` with ``|profile|`` as weights).

    Parameters
    ----------
    profile : array_like (n_column, n_layer)
        Net-absorption correction of each layer [W m-2]; NaN for padding layers.
    column_correction : array_like (n_column,)
        The column's ``longwave_atmosphere_net_absorption`` correction [W m-2].

    Returns
    -------
    ndarray (n_column, n_layer)

    Examples
    --------
    >>> match_longwave_column([[1.0, -3.0]], [-4.0]).tolist()
    [[0.5, -4.5]]
    """
    profile = np.asarray(profile, dtype=np.float64)
    return match_column_integral(profile, column_correction, np.abs(profile))
