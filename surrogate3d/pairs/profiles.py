"""Absorption profiles on host layers: the targets and host fields of the heating-rate correction.

A host layer is a height interval [m] of the host model's own vertical grid.  A benchmark
layer's absorption (fraction of the incident flux on the horizontal, per unit column
area) is shared among the host layers it overlaps in proportion to the overlap, as if it
were absorbed uniformly in height within the benchmark layer; optical depth likewise;
cloud fraction is averaged with the overlaps as weights.  Every benchmark layer lies
wholly inside the host grid, so the column integral of every profile is kept exactly.

Heating rates of host layers use the layer's pressure drop, from the scene's edge
pressures interpolated linearly in height for ``log p`` (exact hydrostatically in an
isothermal layer; the host grid's edges that coincide with benchmark edges get the
stored pressures exactly).
"""

import math

import numpy as np

from ..core.slant_path import path_weights, slant_sum
from ..core.validation import check_finite
from ..errors import ParameterError
from ..scenes.model import cloud_mask, layer_thickness, spacing
from ..solvers.heating import heating_rate
from .coarsen import block_mean

#: Per-layer variables of a pair table (``docs/pairs-format.md``): units and long names.
PROFILE_VARIABLES = {
    "host_layer_bottom": ("m", "height of the host layer's bottom edge"),
    "host_layer_top": ("m", "height of the host layer's top edge"),
    "host_layer_pressure_thickness": ("Pa", "pressure drop across the host layer (NaN without air pressure)"),
    "layer_optical_depth": ("1", "solar-weighted optical depth of the host layer, host-column mean"),
    "layer_cloud_fraction": ("1", "cloud fraction of the host layer"),
    "layer_slant_optical_depth_above": ("1", "optical depth along the path from the host layer's middle toward the "
                                             "sun, through the neighbouring host columns, to the domain top"),
    "independent_column_layer_absorption": ("1", "independent-column absorption of the host layer / incident flux"),
    "full_3d_layer_absorption": ("1", "3D absorption of the host layer / incident flux"),
    "layer_absorption_target": ("1", "3D minus independent-column absorption of the host layer / incident flux"),
    "layer_heating_rate_target": ("K day-1", "3D minus independent-column heating rate of the host layer "
                                             "(NaN without air pressure)"),
}


def check_host_layer_edges(host_layer_edges, z_edge, name="host_layer_edges"):
    """The host grid's layer edges [m] as floats, checked against a scene's edges.

    Parameters
    ----------
    host_layer_edges : array_like or None
        Increasing heights [m]; the first equal to the scene's lowest edge, the last at or
        above its highest (host layers above the scene absorb nothing).  None: the scene's
        own edges.
    z_edge : array_like
        The scene's layer edges [m].
    name : str
        Name in error messages.

    Returns
    -------
    ndarray

    Raises
    ------
    surrogate3d.errors.ParameterError
        Fewer than two edges, non-finite or not strictly increasing edges, or a grid that
        does not span the scene.
    """
    z_edge = np.asarray(z_edge, dtype=np.float64)
    if host_layer_edges is None:
        return z_edge.copy()
    try:
        edges = np.asarray(host_layer_edges, dtype=np.float64)
    except (TypeError, ValueError):
        raise ParameterError(f"{name} must be a list of heights in m; got {host_layer_edges!r}") from None
    if edges.ndim != 1 or edges.size < 2:
        raise ParameterError(f"{name} must list at least two heights in m (one layer); got {host_layer_edges!r}")
    check_finite(name, edges)
    steps = np.diff(edges)
    if np.any(steps <= 0.0):
        i = int(np.argmax(steps <= 0.0)) + 1
        raise ParameterError(f"{name} must increase strictly; at index {i} it is {float(edges[i])!r} after "
                             f"{float(edges[i - 1])!r}")
    tolerance = 1e-6 * max(1.0, float(z_edge[-1] - z_edge[0]))
    if abs(edges[0] - z_edge[0]) > tolerance:
        raise ParameterError(f"{name} must start at the scene's surface, {z_edge[0]:g} m; got {float(edges[0])!r}")
    if edges[-1] < z_edge[-1] - tolerance:
        raise ParameterError(f"{name} must reach the scene's top, {z_edge[-1]:g} m; its last edge is {float(edges[-1])!r}")
    return edges


def overlap_matrix(z_edge, host_layer_edges):
    """Share of every benchmark layer lying inside every host layer.

    Parameters
    ----------
    z_edge : array_like (nz + 1,)
        Benchmark layer edges [m].
    host_layer_edges : array_like (nh + 1,)
        Host layer edges [m], spanning the benchmark layers (:func:`check_host_layer_edges`).

    Returns
    -------
    ndarray (nh, nz)
        Element (i, j): the fraction of benchmark layer ``j``'s thickness inside host
        layer ``i``; every column sums to 1.

    Examples
    --------
    >>> overlap_matrix([0.0, 100.0, 200.0], [0.0, 50.0, 200.0])
    array([[0.5, 0. ],
           [0.5, 1. ]])
    """
    z = np.asarray(z_edge, dtype=np.float64)
    h = np.asarray(host_layer_edges, dtype=np.float64)
    low = np.maximum(h[:-1, None], z[None, :-1])
    high = np.minimum(h[1:, None], z[None, 1:])
    share = np.clip(high - low, 0.0, None) / np.diff(z)[None, :]
    # Round-off must not leak energy out of the column: renormalize each benchmark layer.
    return share / share.sum(axis=0, keepdims=True)


def host_edge_pressure(z_edge, air_pressure, host_layer_edges):
    """Air pressure [Pa] at host layer edges: ``log p`` linear in height between benchmark edges.

    Above the scene's top the pressure keeps the scale height of its highest layer.

    Raises
    ------
    surrogate3d.errors.ParameterError
        ``air_pressure`` not finite, not positive or not decreasing with height (the edge named).
    """
    z = np.asarray(z_edge, dtype=np.float64)
    pressure = np.asarray(air_pressure, dtype=np.float64)
    check_finite("air_pressure", pressure)
    falls = np.diff(pressure) < 0.0
    if np.any(pressure <= 0.0) or not falls.all():
        i = int(np.argmax(pressure <= 0.0)) if np.any(pressure <= 0.0) else int(np.argmax(~falls)) + 1
        raise ParameterError(f"air_pressure must be positive and decrease with height along the layer edges; at "
                             f"edge {i} ({z[i]:g} m) it is {float(pressure[i])!r}"
                             + (f" after {float(pressure[i - 1])!r}" if i else ""))
    log_p = np.log(pressure)
    h = np.asarray(host_layer_edges, dtype=np.float64)
    inside = np.interp(h, z, log_p)
    slope = (log_p[-1] - log_p[-2]) / (z[-1] - z[-2])
    return np.exp(np.where(h > z[-1], log_p[-1] + slope * (h - z[-1]), inside))


def slant_optical_depth_above(layer_optical_depth, host_layer_edges, dx, dy, solar_zenith_angle, solar_beam_azimuth,
                              reach=None):
    """Optical depth [1] along the straight path from every host layer's middle toward the sun.

    The path rises from the middle of the layer through the upper half of the layer and
    every layer above, crossing neighbouring host columns (periodic), each uniform
    (:func:`surrogate3d.core.slant_path.path_weights`); Beer-Lambert along the path,
    ``sum w tau / cos(theta0)``.

    Parameters
    ----------
    layer_optical_depth : ndarray (nh, Ny, Nx)
        Vertical optical depth of every host layer and column [1].
    host_layer_edges : array_like (nh + 1,)
        [m].
    dx, dy : float
        Host column size [m].
    solar_zenith_angle, solar_beam_azimuth : float
        [degree].
    reach : float, optional
        Cap of the path's horizontal travel [m] (:func:`surrogate3d.core.slant_path.path_weights`).

    Returns
    -------
    ndarray (nh, Ny, Nx)
    """
    tau = np.asarray(layer_optical_depth, dtype=np.float64)
    edges = np.asarray(host_layer_edges, dtype=np.float64)
    mu0 = math.cos(math.radians(solar_zenith_angle))
    out = np.empty_like(tau)
    for k in range(tau.shape[0]):
        middle = 0.5 * (edges[k] + edges[k + 1])
        path_edges = np.concatenate([[0.0], edges[k + 1:] - middle])
        values = np.concatenate([0.5 * tau[k:k + 1], tau[k + 1:]])
        weights = path_weights(path_edges, dx, dy, solar_zenith_angle, solar_beam_azimuth, reach=reach)
        out[k] = slant_sum(values, weights) / mu0
    return out


def host_profiles(scene, full, ica, fy, fx, host_layer_edges=None):
    """The per-layer variables of a pair table for one scene, sun geometry and host resolution.

    Parameters
    ----------
    scene : xarray.Dataset
        The scene (with ``air_pressure`` for heating rates).
    full, ica : xarray.Dataset
        Its 3D and independent-column results at one sun geometry, with per-cell
        ``absorption`` (:func:`surrogate3d.archive.select_result`).
    fy, fx : int
        Benchmark cells per host column.
    host_layer_edges : array_like, optional
        The host grid's layer edges [m] (:func:`check_host_layer_edges`); default the
        scene's own.

    Returns
    -------
    dict of str -> ndarray (Ny * Nx, nh)
        Every name of :data:`PROFILE_VARIABLES`, host columns in row-major order.

    Raises
    ------
    surrogate3d.errors.ParameterError
        A result lacks per-cell absorption, or bad host layer edges.
    """
    z_edge = scene["z_edge"].values.astype(np.float64)
    edges = check_host_layer_edges(host_layer_edges, z_edge)
    share = overlap_matrix(z_edge, edges)
    nh = edges.size - 1
    absorbed = {}
    for label, result in (("3D", full), ("independent-column", ica)):
        if "absorption" not in result or not np.all(np.isfinite(result["absorption"].values)):
            raise ParameterError(f"the {label} result at solar zenith {result.attrs.get('solar_zenith_angle')} deg "
                                 f"has no per-cell absorption; profile targets need it")
        absorbed[label] = np.einsum("hz,zyx->hyx", share, block_mean(result["absorption"].values, fy, fx))
    weight = scene["solar_weight"].values
    tau = np.einsum("b,bzyx->zyx", weight, scene["extinction"].values) * layer_thickness(scene)[:, None, None]
    thickness = share * layer_thickness(scene)[None, :]
    host_cloud = np.einsum("hz,zyx->hyx", thickness, block_mean(cloud_mask(scene), fy, fx))
    host_cloud /= np.diff(edges)[:, None, None]
    ny, nx = absorbed["3D"].shape[1:]
    n = ny * nx

    def rows(values):
        return np.ascontiguousarray(np.asarray(values).reshape(nh, n).T)

    host_tau = np.einsum("hz,zyx->hyx", share, block_mean(tau, fy, fx))
    dx, dy = spacing(scene)
    slant = slant_optical_depth_above(host_tau, edges, dx * fx, dy * fy, float(full.attrs["solar_zenith_angle"]),
                                      float(full.attrs["solar_beam_azimuth"]))
    out = {
        "host_layer_bottom": np.broadcast_to(edges[:-1], (n, nh)).copy(),
        "host_layer_top": np.broadcast_to(edges[1:], (n, nh)).copy(),
        "layer_optical_depth": rows(host_tau),
        "layer_cloud_fraction": rows(np.clip(host_cloud, 0.0, 1.0)),
        "layer_slant_optical_depth_above": rows(slant),
        "independent_column_layer_absorption": rows(absorbed["independent-column"]),
        "full_3d_layer_absorption": rows(absorbed["3D"]),
        "layer_absorption_target": rows(absorbed["3D"] - absorbed["independent-column"]),
    }
    if "air_pressure" in scene:
        pressure = host_edge_pressure(z_edge, scene["air_pressure"].values, edges)
        incident = float(full["run_solar_constant"]) * math.cos(math.radians(full.attrs["solar_zenith_angle"]))
        out["host_layer_pressure_thickness"] = np.broadcast_to(pressure[:-1] - pressure[1:], (n, nh)).copy()
        out["layer_heating_rate_target"] = rows(heating_rate(absorbed["3D"] - absorbed["independent-column"],
                                                             incident, pressure))
    else:
        out["host_layer_pressure_thickness"] = np.full((n, nh), np.nan)
        out["layer_heating_rate_target"] = np.full((n, nh), np.nan)
    return out
