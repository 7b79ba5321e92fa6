"""Heating-rate (profile) corrections on a host's own layers (numpy only).

A profile model predicts, for every (host column, host layer) row of the column's
features followed by :data:`~surrogate3d.pairs.layer_features.LAYER_FEATURES`, the 3D
change of the layer's absorption per km of thickness (fraction of the incident flux).
:func:`layer_rows` builds the rows from the host's layer fields, :func:`density_to_layers`
turns the predicted densities into layer corrections (none in a layer without absorber),
and :func:`match_column_integral` makes them sum to the column's absorption correction,
so energy is conserved.  The training (:mod:`surrogate3d.learn.profile_model`) and the
exported model (:meth:`surrogate3d.runtime.CorrectionModel.predict_profile`) share these.
"""

import numpy as np

from ..errors import ParameterError
from ..pairs.layer_features import layer_features, layer_sum

#: The layer fields a profile model reads (arrays (n_column, n_layer)) and the pair-table
#: variables holding them; with them ``cos_solar_zenith`` (n_column,).
LAYER_FIELDS = {
    "bottom": "host_layer_bottom",
    "top": "host_layer_top",
    "optical_depth": "layer_optical_depth",
    "cloud_fraction": "layer_cloud_fraction",
    "independent_column_absorption": "independent_column_layer_absorption",
    "slant_optical_depth_above": "layer_slant_optical_depth_above",
}


def check_layer_fields(fields, n_column=None):
    """The layer fields as float arrays, checked: every key present, one shape, edges increasing.

    Raises
    ------
    surrogate3d.errors.ParameterError
        Naming the missing field, the field of another shape, or the column and layer
        whose edges do not increase.
    """
    missing = [key for key in list(LAYER_FIELDS) + ["cos_solar_zenith"] if key not in fields]
    if missing:
        raise ParameterError(f"layer fields lack {missing}; a profile needs {list(LAYER_FIELDS)} and "
                             "cos_solar_zenith")
    out = {key: np.asarray(fields[key], dtype=np.float64) for key in LAYER_FIELDS}
    out["cos_solar_zenith"] = np.asarray(fields["cos_solar_zenith"], dtype=np.float64).reshape(-1)
    check_layer_shapes(out, LAYER_FIELDS, n_column)
    return out


def check_layer_shapes(fields, keys, n_column=None):
    """ParameterError unless the layer fields ``keys`` all have bottom's shape (n_column, n_layer) and
    ``top > bottom`` in every layer a column has (not NaN padding); shared by the shortwave and
    longwave heating-rate models."""
    shape = fields["bottom"].shape
    if len(shape) != 2 or (n_column is not None and shape[0] != n_column):
        raise ParameterError(f"layer field bottom must have shape (n_column, n_layer) with n_column = {n_column}; "
                             f"got {shape}")
    for key in keys:
        if fields[key].shape != shape:
            raise ParameterError(f"layer field {key} has shape {fields[key].shape}; bottom has {shape}")
    thickness = fields["top"] - fields["bottom"]
    bad = ~(thickness > 0.0) & np.isfinite(fields["bottom"])
    if bad.any():
        i, k = np.argwhere(bad)[0]
        raise ParameterError(f"layer field top must exceed bottom in every layer; column {i}, layer {k}: bottom "
                             f"{fields['bottom'][i, k]!r}, top {fields['top'][i, k]!r}")


def layer_rows(X, fields):
    """One row per (column, layer): the column's features ``X`` (n_column, n_feature), then the layer's.

    Returns
    -------
    rows : ndarray (n_column * n_layer, n_feature + len(LAYER_FEATURES))
    valid : ndarray of bool (n_column * n_layer,)
        Rows of layers the column has (not NaN padding).
    """
    X = np.asarray(X, dtype=np.float64)
    fields = check_layer_fields(fields, X.shape[0])
    local = layer_features(fields["bottom"], fields["top"], fields["optical_depth"], fields["cloud_fraction"],
                           fields["independent_column_absorption"], fields["cos_solar_zenith"],
                           fields["slant_optical_depth_above"])
    return stack_layer_rows(X, local)


def stack_layer_rows(X, local):
    """Rows (n_column * n_layer, n_feature + n_local) of the column features ``X`` (n_column, n_feature)
    beside the layer features ``local`` (n_column, n_layer, n_local), and which rows are layers a
    column has (finite layer features)."""
    n, n_layer = local.shape[:2]
    rows = np.concatenate([np.broadcast_to(X[:, None, :], (n, n_layer, X.shape[1])), local], axis=2)
    return rows.reshape(n * n_layer, -1), np.isfinite(local[..., 0]).reshape(-1)


def density_to_layers(density, fields):
    """Layer corrections [1] from predicted densities [km-1] (n_column, n_layer): times the layer
    thickness, and zero in a layer whose independent-column absorption is zero (no absorber
    there absorbs in 3D either)."""
    thickness = np.asarray(fields["top"], dtype=np.float64) - np.asarray(fields["bottom"], dtype=np.float64)
    absorbs = np.asarray(fields["independent_column_absorption"], dtype=np.float64) > 0.0
    density = np.asarray(density, dtype=np.float64).reshape(thickness.shape)
    return np.where(absorbs | np.isnan(thickness), density, 0.0) * thickness / 1000.0


def match_column_integral(profile, column_correction, independent_column_absorption):
    """Make every column's profile sum to its column absorption correction.

    The residual ``column_correction - sum(profile)`` is shared among the layers in
    proportion to their independent-column absorption (where light is absorbed, a
    change of the light's path changes the absorption), or equally among the column's
    layers where it absorbs nothing.

    Parameters
    ----------
    profile : array_like (n_column, n_layer)
        Absorption correction of each layer [1]; NaN for padding layers.
    column_correction : array_like (n_column,)
        Absorption correction of each column [1].
    independent_column_absorption : array_like (n_column, n_layer)
        Independent-column absorption of each layer [1].

    Returns
    -------
    ndarray (n_column, n_layer)

    Examples
    --------
    >>> match_column_integral([[0.01, 0.0]], [0.03], [[1.0, 3.0]]).round(15).tolist()
    [[0.015, 0.015]]
    """
    profile = np.asarray(profile, dtype=np.float64)
    present = np.isfinite(profile)
    weight = np.where(present, np.clip(np.nan_to_num(np.asarray(independent_column_absorption, dtype=np.float64)),
                                       0.0, None), 0.0)
    total = layer_sum(weight)[:, None]
    equal = present / np.maximum(present.sum(axis=1, keepdims=True), 1)
    share = np.where(total > 0.0, weight / np.where(total > 0.0, total, 1.0), equal)
    residual = np.asarray(column_correction, dtype=np.float64) - layer_sum(profile)
    return profile + residual[:, None] * share
