"""Coarse-graining of benchmark scenes and results to host-model columns.

A host column is a block of ``fy x fx`` benchmark cells; its size, the *host
resolution*, must be a whole multiple of the benchmark cell and divide the periodic
domain evenly.  Host fields follow the keys of :mod:`surrogate3d.pairs.features`.
Every quantity here is an area mean over the block, so domain means are conserved.
"""

import math

import numpy as np

from ..core.data_model import COLUMN_FLUXES
from ..core.run_result import stderr_name
from ..errors import ParameterError
from ..scenes.model import cloud_mask, layer_thickness, spacing

#: Relative tolerance on "host_resolution / cell size is an integer".
_RATIO_TOLERANCE = 1e-6

#: Column fluxes of a coarse-grained result: the stored ones plus their direct + diffuse sum.
HOST_FLUXES = ("surface_downward_flux",) + tuple(COLUMN_FLUXES)


def _whole_ratio(length, cell):
    ratio = length / cell
    k = round(ratio)
    return k if k >= 1 and abs(ratio - k) <= _RATIO_TOLERANCE * max(1.0, ratio) else None


def allowed_host_resolutions(nx, ny, dx, dy):
    """Host column sizes [m] that are whole multiples of both ``dx`` and ``dy`` and divide the domain.

    Parameters
    ----------
    nx, ny : int
        Benchmark grid size.
    dx, dy : float
        Benchmark cell size [m].

    Returns
    -------
    list of float
        Increasing.
    """
    out = []
    for kx in range(1, nx + 1):
        if nx % kx:
            continue
        ky = _whole_ratio(kx * dx, dy)
        if ky is not None and ny % ky == 0:
            out.append(kx * dx)
    return out


def host_factors(scene, host_resolution):
    """Benchmark cells per host column along y and x.

    Parameters
    ----------
    scene : xarray.Dataset
        A scene.
    host_resolution : float
        Host column size (dx = dy) [m].

    Returns
    -------
    tuple of int
        ``(fy, fx)``.

    Raises
    ------
    surrogate3d.errors.ParameterError
        ``host_resolution`` is not a whole multiple of the cell size dividing the domain;
        the message lists the allowed values.
    """
    dx, dy = spacing(scene)
    nx, ny = scene.sizes["x"], scene.sizes["y"]
    try:
        value = float(host_resolution)
    except (TypeError, ValueError):
        value = math.nan
    fx = _whole_ratio(value, dx) if math.isfinite(value) and value > 0 else None
    fy = _whole_ratio(value, dy) if fx is not None else None
    if fx is None or fy is None or nx % fx or ny % fy:
        allowed = ", ".join(f"{a:g}" for a in allowed_host_resolutions(nx, ny, dx, dy))
        raise ParameterError(
            f"host_resolution must be a whole multiple of the benchmark cell ({dx:g} m x {dy:g} m) that divides "
            f"the {nx * dx:g} m x {ny * dy:g} m domain evenly; got {host_resolution!r}; allowed values [m]: {allowed}")
    return fy, fx


def block_mean(values, fy, fx):
    """Mean over blocks of ``fy x fx`` cells of the last two axes ``(..., ny, nx)``."""
    values = np.asarray(values, dtype=np.float64)
    *lead, ny, nx = values.shape
    return values.reshape(*lead, ny // fy, fy, nx // fx, fx).mean(axis=(-3, -1))


def block_standard_error(standard_errors, fy, fx):
    """Standard error of block means of independent cell values: ``sqrt(sum se^2) / n``."""
    se = np.asarray(standard_errors, dtype=np.float64)
    return np.sqrt(block_mean(se ** 2, fy, fx) / (fy * fx))


def edge_length_density(mask, dx, dy):
    """Cloud-edge length per unit area [m-1] of each cell of a periodic 2D cloud mask.

    Each face between a cloudy and a clear cell (periodic) counts half to each of the
    two cells it separates, so block means give the edge length inside a block per unit
    block area and the domain total is conserved.

    Parameters
    ----------
    mask : ndarray of bool (ny, nx)
        Vertically projected cloud mask.
    dx, dy : float
        Cell size [m]; a face normal to x has length ``dy``.

    Returns
    -------
    ndarray (ny, nx)
    """
    mask = np.asarray(mask, dtype=bool)
    across_x = (mask != np.roll(mask, -1, axis=1)).astype(np.float64)
    across_y = (mask != np.roll(mask, -1, axis=0)).astype(np.float64)
    faces_x = across_x + np.roll(across_x, 1, axis=1)
    faces_y = across_y + np.roll(across_y, 1, axis=0)
    return 0.5 * (faces_x * dy + faces_y * dx) / (dx * dy)


def clear_sky_layer_optical_depth(tau, cloudy, z_edge):
    """Optical depth each cell would have without its cloud [1], from the clear cells of its layer.

    Clear cells keep their own optical depth.  A cloudy cell gets the mean optical depth
    of the clear cells of its layer (the clear air of the synthetic scenes is
    horizontally uniform: Rayleigh scattering and gas absorption depend on height
    only); in a layer without clear cells, the mean clear extinction [m-1] of the other
    layers is interpolated linearly in height (constant beyond the first and last), or
    taken as 0 if no layer has a clear cell.

    Parameters
    ----------
    tau : ndarray (nz, ny, nx)
        Layer optical depth of each cell [1].
    cloudy : ndarray of bool (nz, ny, nx)
        Cloud mask.
    z_edge : ndarray (nz + 1,)
        Layer edge heights [m].

    Returns
    -------
    ndarray (nz, ny, nx)
    """
    clear = ~np.asarray(cloudy, dtype=bool)
    count = clear.sum(axis=(1, 2))
    dz = np.diff(z_edge)
    total = np.where(clear, tau, 0.0).sum(axis=(1, 2))
    have = count > 0
    if not have.any():
        layer = np.zeros(dz.size)
    else:
        extinction = total[have] / count[have] / dz[have]
        centre = 0.5 * (z_edge[1:] + z_edge[:-1])
        layer = np.interp(centre, centre[have], extinction) * dz
        layer[have] = total[have] / count[have]
    return np.where(clear, tau, layer[:, None, None])


def scene_host_fields(scene, host_resolution):
    """Host fields of a scene (the keys of :mod:`surrogate3d.pairs.features`, without fluxes or sun).

    Layer optical depth is the solar-weighted mean over bands of ``extinction * dz``
    (broadband, as an accurate host scheme would weight its bands), averaged over the
    block; surface albedo is solar-weighted likewise.  Cloudy cells follow
    :func:`surrogate3d.scenes.cloud_mask`.

    Parameters
    ----------
    scene : xarray.Dataset
    host_resolution : float
        Host column size [m].

    Returns
    -------
    dict
        ``layer_cloud_fraction``, ``layer_optical_depth``, ``layer_clear_sky_optical_depth``
        (nz, Ny, Nx, the last from :func:`clear_sky_layer_optical_depth`); ``z_edge``;
        ``dx``, ``dy`` (= host_resolution); ``surface_albedo``, ``total_cloud_fraction``,
        ``column_optical_depth_mean``, ``column_optical_depth_std``, ``cloud_edge_length``
        (Ny, Nx).
    """
    fy, fx = host_factors(scene, host_resolution)
    dx, dy = spacing(scene)
    weight = scene["solar_weight"].values
    dz = layer_thickness(scene)
    tau = np.einsum("b,bzyx->zyx", weight, scene["extinction"].values) * dz[:, None, None]
    mask = cloud_mask(scene)
    projected = mask.any(axis=0)
    column_tau = tau.sum(axis=0)
    z_edge = scene["z_edge"].values.astype(np.float64)
    mean_tau = block_mean(column_tau, fy, fx)
    var_tau = np.maximum(block_mean(column_tau ** 2, fy, fx) - mean_tau ** 2, 0.0)
    return {
        "layer_cloud_fraction": block_mean(mask, fy, fx),
        "layer_optical_depth": block_mean(tau, fy, fx),
        "layer_clear_sky_optical_depth": block_mean(clear_sky_layer_optical_depth(tau, mask, z_edge), fy, fx),
        "z_edge": z_edge,
        "dx": float(fx * dx),
        "dy": float(fy * dy),
        "surface_albedo": block_mean(np.einsum("b,byx->yx", weight, scene["surface_albedo"].values), fy, fx),
        "total_cloud_fraction": block_mean(projected, fy, fx),
        "column_optical_depth_mean": mean_tau,
        "column_optical_depth_std": np.sqrt(var_tau),
        "cloud_edge_length": block_mean(edge_length_density(projected, dx, dy), fy, fx),
    }


def coarsen_result(result, fy, fx):
    """Host-column means of a run result's column fluxes, with standard errors of the means.

    Parameters
    ----------
    result : xarray.Dataset
        One run result (:func:`surrogate3d.archive.select_result`).
    fy, fx : int
        Benchmark cells per host column.

    Returns
    -------
    dict of str -> ndarray (Ny, Nx)
        Each name of :data:`HOST_FLUXES` and ``<name>_standard_error``.  The total
        surface downward flux is direct + diffuse; its error combines the two in
        quadrature (treated as independent).
    """
    out = {}
    for flux in COLUMN_FLUXES:
        out[flux] = block_mean(result[flux].values, fy, fx)
        out[stderr_name(flux)] = block_standard_error(result[stderr_name(flux)].values, fy, fx)
    out["surface_downward_flux"] = out["surface_downward_direct_flux"] + out["surface_downward_diffuse_flux"]
    out[stderr_name("surface_downward_flux")] = np.hypot(out[stderr_name("surface_downward_direct_flux")],
                                                         out[stderr_name("surface_downward_diffuse_flux")])
    return out
