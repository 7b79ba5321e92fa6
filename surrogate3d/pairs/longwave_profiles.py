"""Longwave net-absorption profiles on host layers: targets and host fields of the longwave heating-rate correction.

The longwave twin of :mod:`surrogate3d.pairs.profiles`.  Every longwave result stores the
net absorption (absorbed minus emitted) of every cell per unit column area [W m-2]; a
benchmark layer's is shared among the host layers it overlaps in proportion to the
overlap (:func:`~surrogate3d.pairs.profiles.overlap_matrix`), so the layers of every host
column sum to its ``longwave_atmosphere_net_absorption`` (the column field is the sum of
the cells', to round-off).  Air temperature is averaged over the host layer with the
overlapping thicknesses as weights, liquid water is summed (a path), cloud fraction is
averaged like the shortwave one.  Heating rates use the pressure drop across the host
layer (:func:`~surrogate3d.pairs.profiles.host_edge_pressure`).
"""

import numpy as np

from ..core.longwave_result import longwave_stderr_name
from ..errors import ParameterError
from ..scenes.model import cloud_mask, layer_thickness
from ..solvers.heating import heating_rate
from .coarsen import block_mean, block_standard_error
from .profiles import check_host_layer_edges, host_edge_pressure, overlap_matrix

#: The per-cell field of a longwave result the profiles are made of.
NET_ABSORPTION = "longwave_net_absorption"

#: Per-layer variables of a longwave pair table (``docs/pairs-format.md``): units and long names.
LONGWAVE_PROFILE_VARIABLES = {
    "host_layer_bottom": ("m", "height of the host layer's bottom edge"),
    "host_layer_top": ("m", "height of the host layer's top edge"),
    "host_layer_pressure_thickness": ("Pa", "pressure drop across the host layer (NaN without air pressure)"),
    "layer_cloud_fraction": ("1", "cloud fraction of the host layer"),
    "layer_air_temperature": ("K", "air temperature of the host layer, thickness-weighted host-column mean"),
    "layer_liquid_water_path": ("g m-2", "liquid water path of the host layer, host-column mean"),
    "two_stream_layer_net_absorption": ("W m-2", "the host's independent-column (longwave_two_stream) net "
                                                 "absorption of the host layer"),
    "independent_column_layer_net_absorption": ("W m-2", "independent-column net absorption of the host layer"),
    "full_3d_layer_net_absorption": ("W m-2", "3D net absorption of the host layer"),
    "layer_net_absorption_target": ("W m-2", "3D minus independent-column net absorption of the host layer"),
    "layer_net_absorption_target_standard_error": ("W m-2", "Monte Carlo standard error of "
                                                            "layer_net_absorption_target"),
    "layer_heating_rate_target": ("K day-1", "3D minus independent-column longwave heating rate of the host "
                                             "layer (NaN without air pressure)"),
}


def _net_absorption(result, label, fy, fx):
    if NET_ABSORPTION not in result or not np.all(np.isfinite(result[NET_ABSORPTION].values)):
        raise ParameterError(f"the {label} longwave result has no finite per-cell {NET_ABSORPTION}; longwave "
                             "profile targets need it")
    values = block_mean(result[NET_ABSORPTION].values, fy, fx)
    name = longwave_stderr_name(NET_ABSORPTION)
    error = block_standard_error(result[name].values, fy, fx) if name in result else np.zeros_like(values)
    return values, error


def longwave_host_profiles(scene, full, ica, two_stream, fy, fx, host_layer_edges=None):
    """The per-layer variables of a longwave pair table for one scene and host resolution.

    Parameters
    ----------
    scene : xarray.Dataset
        The scene (``air_temperature``, ``liquid_water_content``; ``air_pressure`` for
        heating rates).
    full, ica, two_stream : xarray.Dataset
        Its ``longwave_full_3d``, ``longwave_independent_column`` and
        ``longwave_two_stream`` results, with per-cell ``longwave_net_absorption`` [W m-2].
    fy, fx : int
        Benchmark cells per host column.
    host_layer_edges : array_like, optional
        The host grid's layer edges [m]
        (:func:`surrogate3d.pairs.profiles.check_host_layer_edges`); default the scene's own.

    Returns
    -------
    dict of str -> ndarray (Ny * Nx, nh)
        Every name of :data:`LONGWAVE_PROFILE_VARIABLES`, host columns in row-major order.

    Raises
    ------
    surrogate3d.errors.ParameterError
        A result lacks per-cell net absorption, or bad host layer edges.
    """
    z_edge = scene["z_edge"].values.astype(np.float64)
    edges = check_host_layer_edges(host_layer_edges, z_edge)
    share = overlap_matrix(z_edge, edges)
    nh = edges.size - 1
    net, error = {}, {}
    for label, result in (("3D", full), ("independent-column", ica), ("two-stream", two_stream)):
        cells, cell_error = _net_absorption(result, label, fy, fx)
        net[label] = np.einsum("hz,zyx->hyx", share, cells)
        # Overlap shares of one benchmark layer are fully correlated; different layers' errors are not.
        error[label] = np.sqrt(np.einsum("hz,zyx->hyx", share, cell_error ** 2))
    dz = layer_thickness(scene)
    thickness = share * dz[None, :]
    host_dz = np.diff(edges)[:, None, None]
    cloud = np.einsum("hz,zyx->hyx", thickness, block_mean(cloud_mask(scene), fy, fx)) / host_dz
    temperature = np.einsum("hz,zyx->hyx", thickness, block_mean(scene["air_temperature"].values, fy, fx))
    covered = thickness.sum(axis=1)[:, None, None]
    # A host layer above the scene has no air of its own: it takes the top layer's temperature.
    temperature = np.where(covered > 0.0, temperature / np.where(covered > 0.0, covered, 1.0),
                           block_mean(scene["air_temperature"].values[-1:], fy, fx))
    water = np.einsum("hz,zyx->hyx", share,
                      block_mean(scene["liquid_water_content"].values * dz[:, None, None] * 1000.0, fy, fx))
    ny, nx = net["3D"].shape[1:]
    n = ny * nx

    def rows(values):
        return np.ascontiguousarray(np.asarray(values).reshape(nh, n).T)

    target = net["3D"] - net["independent-column"]
    out = {
        "host_layer_bottom": np.broadcast_to(edges[:-1], (n, nh)).copy(),
        "host_layer_top": np.broadcast_to(edges[1:], (n, nh)).copy(),
        "layer_cloud_fraction": rows(np.clip(cloud, 0.0, 1.0)),
        "layer_air_temperature": rows(temperature),
        "layer_liquid_water_path": rows(water),
        "two_stream_layer_net_absorption": rows(net["two-stream"]),
        "independent_column_layer_net_absorption": rows(net["independent-column"]),
        "full_3d_layer_net_absorption": rows(net["3D"]),
        "layer_net_absorption_target": rows(target),
        "layer_net_absorption_target_standard_error": rows(np.hypot(error["3D"], error["independent-column"])),
    }
    if "air_pressure" in scene:
        pressure = host_edge_pressure(z_edge, scene["air_pressure"].values, edges)
        out["host_layer_pressure_thickness"] = np.broadcast_to(pressure[:-1] - pressure[1:], (n, nh)).copy()
        # The flux absorbed in W m-2 is the "absorbed fraction" of a unit incident flux.
        out["layer_heating_rate_target"] = rows(heating_rate(target, 1.0, pressure))
    else:
        out["host_layer_pressure_thickness"] = np.full((n, nh), np.nan)
        out["layer_heating_rate_target"] = np.full((n, nh), np.nan)
    return out
