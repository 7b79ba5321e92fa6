"""Layer-local features of the longwave heating-rate (profile) correction, on any vertical grid.

The longwave twin of :mod:`surrogate3d.pairs.layer_features`.  Every feature is a
property of one host layer that does not depend on how many layers the host has: heights
relative to the host column's cloud, the layer's cloud fraction and liquid water content
(its path per unit thickness), its air temperature relative to the surface and to the
cloud base (what a cloud side exchanges with the air and the ground beside it), and the
host's own independent-column net absorption per unit thickness.  A longwave profile
model predicts the 3D change of the net absorption per km from them and the column's
own features (``docs/features.md``, "Longwave layer features").
"""

import numpy as np

from ..errors import ParameterError
from .layer_features import layer_sum

#: Longwave layer features, in order: units and meaning.
LONGWAVE_LAYER_FEATURES = {
    "layer_height_above_cloud_top": ("m", "layer middle minus the host column's cloud-top height (0 if clear)"),
    "layer_height_above_cloud_base": ("m", "layer middle minus the host column's cloud-base height (0 if clear)"),
    "layer_cloud_fraction": ("1", "cloud fraction of the layer"),
    "layer_liquid_water_content": ("g m-3", "liquid water path of the layer per unit thickness"),
    "layer_air_temperature_minus_surface": ("K", "layer air temperature minus the column's surface temperature"),
    "layer_air_temperature_minus_cloud_base": ("K", "layer air temperature minus that of the column's lowest "
                                                    "cloudy layer (0 if clear)"),
    "two_stream_layer_net_absorption_density": ("W m-2 km-1", "the host's independent-column net absorption of the "
                                                              "layer per km of its thickness"),
    "two_stream_column_net_absorption": ("W m-2", "the host's independent-column net absorption of the whole "
                                                  "column (sum over its layers)"),
}

#: The per-layer fields :func:`longwave_layer_features` reads (arrays (n_column, n_layer)).
LONGWAVE_LAYER_INPUTS = ("bottom", "top", "cloud_fraction", "liquid_water_path", "air_temperature",
                         "two_stream_net_absorption")


def longwave_layer_features(bottom, top, cloud_fraction, liquid_water_path, air_temperature,
                            two_stream_net_absorption, surface_temperature):
    """The features of :data:`LONGWAVE_LAYER_FEATURES` of every host layer of every host column.

    Parameters
    ----------
    bottom, top : array_like (n_column, n_layer)
        Layer edges [m], layers bottom up; NaN for layers a column does not have
        (padding), which give NaN features.
    cloud_fraction : array_like (n_column, n_layer)
        Layer cloud fraction [1]; a layer is cloudy when it is above 0.
    liquid_water_path : array_like (n_column, n_layer)
        Liquid water path of each layer [g m-2].
    air_temperature : array_like (n_column, n_layer)
        Air temperature of each layer [K].
    two_stream_net_absorption : array_like (n_column, n_layer)
        The host's independent-column longwave net absorption of each layer [W m-2]
        (absorbed minus emitted, per unit column area).
    surface_temperature : array_like (n_column,)
        Surface (skin) temperature [K].

    Returns
    -------
    ndarray (n_column, n_layer, len(LONGWAVE_LAYER_FEATURES))

    Raises
    ------
    surrogate3d.errors.ParameterError
        Arrays of different shapes (the array named).

    Examples
    --------
    >>> f = longwave_layer_features([[0.0, 500.0]], [[500.0, 1000.0]], [[0.0, 1.0]], [[0.0, 50.0]],
    ...                             [[285.0, 281.0]], [[-10.0, -30.0]], [288.0])
    >>> f[0, :, 0].tolist()  # heights above the cloud top (1000 m)
    [-750.0, -250.0]
    >>> f[0, :, 3].tolist(), f[0, :, 5].tolist()  # water content [g m-3], T minus cloud-base T [K]
    ([0.0, 0.1], [4.0, 0.0])
    """
    arrays = {name: np.asarray(value, dtype=np.float64) for name, value in zip(
        LONGWAVE_LAYER_INPUTS, (bottom, top, cloud_fraction, liquid_water_path, air_temperature,
                                two_stream_net_absorption))}
    surface = np.asarray(surface_temperature, dtype=np.float64).reshape(-1)
    for name, value in arrays.items():
        if value.ndim != 2 or value.shape[0] != surface.size or value.shape != arrays["bottom"].shape:
            raise ParameterError(f"{name} must have shape (n_column, n_layer) like bottom, n_column = "
                                 f"{surface.size} (surface_temperature); got {value.shape}")
    bottom, top = arrays["bottom"], arrays["top"]
    thickness = top - bottom
    middle = 0.5 * (bottom + top)
    temperature = arrays["air_temperature"]
    cloudy = np.nan_to_num(arrays["cloud_fraction"]) > 0.0
    any_cloud = cloudy.any(axis=1)
    cloud_top = np.where(any_cloud, np.max(np.where(cloudy, top, -np.inf), axis=1), 0.0)
    cloud_base = np.where(any_cloud, np.min(np.where(cloudy, bottom, np.inf), axis=1), 0.0)
    lowest = np.argmax(cloudy, axis=1)
    base_temperature = np.take_along_axis(temperature, lowest[:, None], axis=1)
    net = arrays["two_stream_net_absorption"]
    out = np.stack([
        middle - cloud_top[:, None],
        middle - cloud_base[:, None],
        arrays["cloud_fraction"],
        arrays["liquid_water_path"] / thickness,
        temperature - surface[:, None],
        np.where(any_cloud[:, None], temperature - base_temperature, 0.0),
        1000.0 * net / thickness,
        np.broadcast_to(layer_sum(net)[:, None], net.shape),
    ], axis=-1)
    out[~np.isfinite(thickness)] = np.nan
    return out
