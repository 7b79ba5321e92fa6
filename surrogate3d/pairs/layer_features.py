"""Layer-local features of the heating-rate (profile) correction, on any vertical grid.

Every feature is a property of one host layer that does not depend on how many layers
the host has: heights relative to the host column's cloud, the layer's extinction (its
optical depth per unit thickness), its cloud fraction, the optical depth above its middle
and the direct beam reaching it there (Beer-Lambert law along the host column, the path a
plane-parallel scheme uses, and along the slant path through the neighbouring columns,
the path the sunlight takes), and the independent-column absorption per unit thickness.
A profile model predicts the 3D correction per unit thickness from them and the column's
own features, so the same model serves a host grid of 30 layers or of 60 (``docs/features.md``,
"Layer features").
"""

import numpy as np

from ..errors import ParameterError

#: Layer features, in order: units and meaning.
LAYER_FEATURES = {
    "layer_height_above_cloud_top": ("m", "layer middle minus the host column's cloud-top height (0 if clear)"),
    "layer_height_above_cloud_base": ("m", "layer middle minus the host column's cloud-base height (0 if clear)"),
    "layer_cloud_fraction": ("1", "cloud fraction of the layer"),
    "layer_log_extinction": ("1", "natural log of the layer's optical depth per km, at least 1e-4 km-1"),
    "layer_log_optical_depth_above": ("1", "log(1 + optical depth from the domain top to the layer middle)"),
    "layer_direct_beam_transmittance": ("1", "exp(-optical depth above the layer middle / cos(theta0))"),
    "layer_slant_direct_beam_transmittance": ("1", "exp(-optical depth along the path from the layer middle toward "
                                                   "the sun through the neighbouring columns)"),
    "layer_slant_minus_vertical_transmittance": ("1", "layer_slant_direct_beam_transmittance minus "
                                                      "layer_direct_beam_transmittance, 0 where they agree to "
                                                      "1e-12 relative"),
    "independent_column_layer_absorption_density": ("km-1", "independent-column absorption of the layer per km "
                                                            "of its thickness (fraction of the incident flux)"),
    "independent_column_column_absorption": ("1", "independent-column absorption of the whole host column"),
}

#: Smallest layer extinction [km-1] the log feature resolves (clear air is above it).
EXTINCTION_FLOOR = 1e-4

#: Slant and vertical transmittances that agree to this relative tolerance are the same path
#: (clear layers above the cloud): their difference is set to 0, not left to the round-off of
#: one exponential implementation or another, on which a tree split near 0 would turn.
SAME_PATH_TOLERANCE = 1e-12


def layer_sum(values):
    """Sum over the layer axis (last) of (n_column, n_layer) values, NaN as 0, layer by layer
    from the bottom: the order the generated Fortran adds them in, so both agree to round-off."""
    values = np.nan_to_num(np.asarray(values, dtype=np.float64))
    total = np.zeros(values.shape[0])
    for k in range(values.shape[1]):
        total += values[:, k]
    return total


def _check_shapes(arrays, n_column):
    shape = None
    for name, value in arrays.items():
        if value.ndim != 2 or value.shape[0] != n_column or (shape is not None and value.shape != shape):
            raise ParameterError(f"{name} must have shape (n_column, n_layer) like the other layer fields, "
                                 f"n_column = {n_column}; got {value.shape}")
        shape = value.shape


def layer_features(bottom, top, optical_depth, cloud_fraction, independent_column_absorption, cos_solar_zenith,
                   slant_optical_depth_above):
    """The features of :data:`LAYER_FEATURES` of every host layer of every host column.

    Parameters
    ----------
    bottom, top : array_like (n_column, n_layer)
        Layer edges [m], layers bottom up; NaN for layers a column does not have
        (padding), which give NaN features.
    optical_depth : array_like (n_column, n_layer)
        Layer optical depth [1] (solar-weighted, host-column mean).
    cloud_fraction : array_like (n_column, n_layer)
        Layer cloud fraction [1]; a layer is cloudy when it is above 0.
    independent_column_absorption : array_like (n_column, n_layer)
        The host's independent-column absorption of each layer [1] (fraction of the
        incident flux on the horizontal).
    cos_solar_zenith : array_like (n_column,)
        Cosine of the solar zenith angle, in (0, 1].
    slant_optical_depth_above : array_like (n_column, n_layer)
        Optical depth along the path from the layer's middle toward the sun through the
        neighbouring columns [1] (:func:`surrogate3d.pairs.profiles.slant_optical_depth_above`).

    Returns
    -------
    ndarray (n_column, n_layer, len(LAYER_FEATURES))

    Examples
    --------
    >>> f = layer_features([[0.0, 500.0]], [[500.0, 1000.0]], [[0.0, 5.0]], [[0.0, 1.0]], [[0.0, 0.01]], [0.5],
    ...                    [[3.0, 1.0]])
    >>> f[0, :, 0].tolist()  # heights above the cloud top (1000 m)
    [-750.0, -250.0]
    >>> round(float(f[0, 0, 5]), 6) == round(float(np.exp(-5.0 / 0.5)), 6)
    True
    """
    arrays = {name: np.asarray(value, dtype=np.float64) for name, value in (
        ("bottom", bottom), ("top", top), ("optical_depth", optical_depth), ("cloud_fraction", cloud_fraction),
        ("independent_column_absorption", independent_column_absorption),
        ("slant_optical_depth_above", slant_optical_depth_above))}
    mu0 = np.asarray(cos_solar_zenith, dtype=np.float64).reshape(-1)
    _check_shapes(arrays, mu0.size)
    if np.any(~(mu0 > 0.0) | (mu0 > 1.0)):
        raise ParameterError("cos_solar_zenith must lie in (0, 1]")
    bottom, top = arrays["bottom"], arrays["top"]
    tau = np.nan_to_num(arrays["optical_depth"])
    thickness = top - bottom
    middle = 0.5 * (bottom + top)
    cloudy = np.nan_to_num(arrays["cloud_fraction"]) > 0.0
    any_cloud = cloudy.any(axis=1)
    cloud_top = np.where(any_cloud, np.max(np.where(cloudy, top, -np.inf), axis=1), 0.0)
    cloud_base = np.where(any_cloud, np.min(np.where(cloudy, bottom, np.inf), axis=1), 0.0)
    # Optical depth from the domain top down to each layer's middle.
    above = np.cumsum(tau[:, ::-1], axis=1)[:, ::-1] - 0.5 * tau
    absorbed = arrays["independent_column_absorption"]
    vertical = np.exp(-above / mu0[:, None])
    slanted = np.exp(-np.nan_to_num(arrays["slant_optical_depth_above"]))
    difference = slanted - vertical
    difference[np.abs(difference) <= SAME_PATH_TOLERANCE * np.maximum(slanted, vertical)] = 0.0
    out = np.stack([
        middle - cloud_top[:, None],
        middle - cloud_base[:, None],
        arrays["cloud_fraction"],
        np.log(np.maximum(1000.0 * arrays["optical_depth"] / thickness, EXTINCTION_FLOOR)),
        np.log(1.0 + above),
        vertical,
        slanted,
        difference,
        1000.0 * absorbed / thickness,
        np.broadcast_to(layer_sum(absorbed)[:, None], absorbed.shape),
    ], axis=-1)
    out[~np.isfinite(thickness)] = np.nan
    return out
