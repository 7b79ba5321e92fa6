"""Straight paths toward the sun through a periodic grid of uniform columns (numpy only).

A path starts at the surface in the centre of a column and rises toward the sun.  In
the layer between heights ``z_edge[k]`` and ``z_edge[k + 1]`` it moves horizontally by
``(z_edge[k + 1] - z_edge[k]) tan(theta0)`` against the direction the beam travels, and
crosses a few neighbouring columns.  Because every column is horizontally uniform, the
fraction of the layer's path spent in each neighbour depends only on the geometry, not
on the column: the same list of ``(row offset, column offset, weight)`` serves every
column, and a slant-path integral over the grid becomes a short sum of whole-array
shifts.  This module is imported by the numpy-only runtime; it uses only numpy.
"""

import math

import numpy as np

from ..errors import ParameterError
from .config import CELL_BLOCK
from .validation import check_number

#: Below this magnitude a direction component is taken as exactly zero (avoids
#: spurious crossings from cos(90 deg) = 6e-17).
_DIRECTION_EPS = 1e-12


def check_solar_zenith_angle(value, name="solar_zenith_angle", error=ParameterError):
    """The solar zenith angle [degree] as a float, in [0, 90): the sun above the horizon.

    Examples
    --------
    >>> check_solar_zenith_angle(90.0)
    Traceback (most recent call last):
    ...
    surrogate3d.errors.ParameterError: solar_zenith_angle must be in [0, 90); got 90.0
    """
    return check_number(name, value, 0.0, 90.0, high_open=True, error=error)


def _checked_reach(reach):
    """A slant-path reach cap [m], checked: finite and >= 0."""
    value = float(reach)
    if not math.isfinite(value) or value < 0.0:
        raise ParameterError(f"slant_path_reach must be a finite distance >= 0 in m; got {reach!r}")
    return value


def _reached(s, dx, dy, solar_beam_azimuth, area):
    """Weights of the point a path reaches after travelling ``s`` [m] toward the sun: the column whose
    centre is nearest (one path), or the bilinear shares of the displaced column (the paths from a
    column's whole surface), in (oy, ox) order, without zero weights."""
    phi = math.radians(float(solar_beam_azimuth))
    ux, uy = -math.cos(phi), -math.sin(phi)
    ux = ux if abs(ux) >= _DIRECTION_EPS else 0.0
    uy = uy if abs(uy) >= _DIRECTION_EPS else 0.0
    sx, sy = s * ux / dx, s * uy / dy
    if not area:
        return (np.array([math.floor(sy + 0.5)], dtype=np.int64), np.array([math.floor(sx + 0.5)], dtype=np.int64),
                np.ones(1))
    ix, iy = math.floor(sx), math.floor(sy)
    fx, fy = sx - ix, sy - iy
    oy = np.array([iy, iy, iy + 1, iy + 1], dtype=np.int64)
    ox = np.array([ix, ix + 1, ix, ix + 1], dtype=np.int64)
    w = np.array([(1 - fx) * (1 - fy), fx * (1 - fy), (1 - fx) * fy, fx * fy])
    keep = w > 0.0
    return oy[keep], ox[keep], w[keep]


def _capped(weights_of, area, z_edge, tan0, reach, dx, dy, solar_zenith_angle, solar_beam_azimuth, *args):
    """Path weights with the horizontal travel capped at ``reach`` [m].

    Up to the height ``z_cap = reach / tan(theta0)`` the path is the uncapped one; above
    it the path rises vertically through the column it has reached after travelling
    ``reach`` (:func:`_reached`); a layer cut by ``z_cap`` gets both parts, weighted by
    their share of its height.
    """
    cap = _checked_reach(reach)
    z_cap = cap / tan0 if tan0 > 0.0 else math.inf
    if z_cap >= z_edge[-1]:
        return weights_of(z_edge, dx, dy, solar_zenith_angle, solar_beam_azimuth, *args)
    below = z_edge[z_edge < z_cap]
    edges = np.append(below, z_cap)
    low = weights_of(edges, dx, dy, solar_zenith_angle, solar_beam_azimuth, *args) if edges.size > 1 else []
    top = _reached(cap, dx, dy, solar_beam_azimuth, area)
    out = list(low[:-1]) if below.size else []
    for k in range(below.size - 1 if below.size else 0, z_edge.size - 1):
        z0, z1 = z_edge[k], z_edge[k + 1]
        if z0 >= z_cap:
            out.append(top)
            continue
        share = (z_cap - z0) / (z1 - z0)
        oy = np.concatenate([low[-1][0], top[0]])
        ox = np.concatenate([low[-1][1], top[1]])
        w = np.concatenate([low[-1][2] * share, top[2] * (1.0 - share)])
        keys, inverse = np.unique(np.stack([oy, ox], axis=1), axis=0, return_inverse=True)
        total = np.bincount(inverse.reshape(-1), weights=w, minlength=len(keys))
        keep = total > 0.0
        out.append((keys[keep, 0].astype(np.int64), keys[keep, 1].astype(np.int64), total[keep]))
    return out


def _crossings(s0, s1, u, spacing):
    """Path lengths where the coordinate ``s * u / spacing`` is a half-integer, layer by layer.

    Parameters
    ----------
    s0, s1 : ndarray (n_layer,)
        Path lengths [m] where each layer's part of the path starts and ends.
    u : float
        Direction cosine along the axis.
    spacing : float
        Column size along the axis [m].

    Returns
    -------
    (ndarray, ndarray)
        Layer index and path length [m] of every crossing with ``s0 <= s <= s1``.
    """
    if abs(u) < _DIRECTION_EPS:
        return np.empty(0, dtype=np.int64), np.empty(0)
    a, b = s0 * u / spacing, s1 * u / spacing
    first = np.ceil(np.minimum(a, b) - 0.5).astype(np.int64)
    count = np.maximum(np.floor(np.maximum(a, b) - 0.5).astype(np.int64) - first + 1, 0)
    layer = np.repeat(np.arange(s0.size), count)
    faces = np.repeat(first, count) + (np.arange(count.sum()) - np.repeat(np.cumsum(count) - count, count)) + 0.5
    return layer, faces * spacing / u


def path_weights(z_edge, dx, dy, solar_zenith_angle, solar_beam_azimuth, reach=None):
    """Columns crossed in each layer by the path from a column's surface centre toward the sun.

    Parameters
    ----------
    z_edge : array_like, shape (nz + 1,)
        Layer edge heights above the surface [m], increasing.
    dx, dy : float
        Column size along x and y [m].
    solar_zenith_angle : float
        [degree], in [0, 90).
    solar_beam_azimuth : float
        Direction of travel of the direct beam [degree], counterclockwise from +x; the
        path goes the opposite way, toward the sun.
    reach : float, optional
        Cap of the path's horizontal travel [m]: above the height where ``z tan(theta0)``
        reaches it, the path rises vertically through the column it has reached (exact
        where the atmosphere beyond is horizontally uniform, as clear air above the
        clouds nearly is).  Default: no cap.

    Returns
    -------
    list of (ndarray, ndarray, ndarray)
        For each layer (bottom first): row offsets ``oy``, column offsets ``ox`` (int) and
        weights (fraction of the layer's path length inside that column, summing to 1).
        The column at ``(iy + oy, ix + ox)`` (periodic) is crossed by the path of column
        ``(iy, ix)``.

    Notes
    -----
    Exact for horizontally uniform columns: the path is split at every column face it
    crosses (Beer-Lambert along straight lines, so the slant optical depth of a layer
    is the weighted sum of the vertical layer optical depths divided by ``cos(theta0)``).

    Examples
    --------
    >>> oy, ox, w = path_weights([0.0, 1000.0], 1000.0, 1000.0, 45.0, 0.0)[0]
    >>> ox.tolist(), w.round(12).tolist()
    ([-1, 0], [0.5, 0.5])
    """
    z_edge = np.asarray(z_edge, dtype=np.float64)
    tan0 = math.tan(math.radians(float(solar_zenith_angle)))
    phi = math.radians(float(solar_beam_azimuth))
    # Toward the sun: opposite to the direction in which the beam travels.
    ux, uy = -math.cos(phi), -math.sin(phi)
    if reach is not None:
        return _capped(path_weights, False, z_edge, tan0, reach, dx, dy, solar_zenith_angle, solar_beam_azimuth)
    s = z_edge * tan0
    s0, s1 = s[:-1], s[1:]
    n_layer = s0.size
    slanted = s1 - s0 > 0.0
    # Every layer is cut where the path enters and leaves it and where it crosses a face;
    # all layers are handled at once, each cut tagged with its layer.
    inside = np.flatnonzero(slanted)
    layer_x, cut_x = _crossings(s0[inside], s1[inside], ux, dx)
    layer_y, cut_y = _crossings(s0[inside], s1[inside], uy, dy)
    layer = np.concatenate([inside, inside, inside[layer_x], inside[layer_y]])
    cuts = np.concatenate([s0[inside], s1[inside], cut_x, cut_y])
    cuts = np.minimum(np.maximum(cuts, s0[layer]), s1[layer])
    order = np.lexsort((cuts, layer))
    layer, cuts = layer[order], cuts[order]
    distinct = np.ones(layer.size, dtype=bool)
    distinct[1:] = (layer[1:] != layer[:-1]) | (cuts[1:] != cuts[:-1])
    layer, cuts = layer[distinct], cuts[distinct]
    # Segments between consecutive cuts of the same layer, and the column each lies in.
    same = layer[1:] == layer[:-1]
    layer, start, end = layer[1:][same], cuts[:-1][same], cuts[1:][same]
    mids, lengths = 0.5 * (end + start), end - start
    keep = lengths > 0.0
    layer, mids, lengths = layer[keep], mids[keep], lengths[keep]
    ox = np.floor(mids * (ux if abs(ux) >= _DIRECTION_EPS else 0.0) / dx + 0.5).astype(np.int64)
    oy = np.floor(mids * (uy if abs(uy) >= _DIRECTION_EPS else 0.0) / dy + 0.5).astype(np.int64)
    # Path length per (layer, column), columns in (oy, ox) order, summed in path order.
    order = np.lexsort((ox, oy, layer))
    new = np.ones(order.size, dtype=bool)
    new[1:] = (np.diff(layer[order]) != 0) | (np.diff(oy[order]) != 0) | (np.diff(ox[order]) != 0)
    group = np.empty(order.size, dtype=np.int64)
    group[order] = np.cumsum(new) - 1
    heads = order[new]
    weights = np.bincount(group, weights=lengths) / (s1 - s0)[layer[heads]]
    bounds = np.searchsorted(layer[heads], np.arange(n_layer + 1))
    out = []
    for k in range(n_layer):
        if not slanted[k]:
            out.append((np.zeros(1, dtype=np.int64), np.zeros(1, dtype=np.int64), np.ones(1)))
            continue
        rows = slice(bounds[k], bounds[k + 1])
        out.append((oy[heads[rows]], ox[heads[rows]], weights[rows]))
    return out


def area_path_weights(z_edge, dx, dy, solar_zenith_angle, solar_beam_azimuth, max_step=0.125, reach=None):
    """Columns met in each layer by the paths toward the sun from every point of a column's surface.

    The paths from all the points of a column's surface, shifted together, fill a copy
    of the column displaced by ``z tan(theta0)`` toward the sun at height ``z``; the
    share of that copy inside each neighbouring column is its overlap area (the
    bilinear weights of the displacement in cells).  Each layer's weights are the mean
    of these shares over its height, by the midpoint rule on sub-layers whose
    displacement is at most ``max_step`` columns.  :func:`path_weights` follows the
    single path from the column's centre instead; the two agree for a uniform grid and
    differ where a column's shadow falls partly on a neighbour.

    Parameters
    ----------
    z_edge : array_like, shape (nz + 1,)
        Layer edge heights above the surface [m], increasing.
    dx, dy : float
        Column size along x and y [m].
    solar_zenith_angle : float
        [degree], in [0, 90).
    solar_beam_azimuth : float
        Direction of travel of the direct beam [degree], counterclockwise from +x.
    max_step : float
        Largest displacement [columns] between the sub-layers of the midpoint rule.
    reach : float, optional
        Cap of the displacement [m], as in :func:`path_weights`; default none.

    Returns
    -------
    list of (ndarray, ndarray, ndarray)
        As :func:`path_weights`: for each layer, row offsets, column offsets and weights
        (summing to 1): the mean over the column's surface points of the fraction of
        the layer's path inside each column.

    Examples
    --------
    >>> oy, ox, w = area_path_weights([0.0, 500.0, 1000.0], 1000.0, 1000.0, 45.0, 0.0)[1]
    >>> ox.tolist(), w.round(12).tolist()      # the copy moves from 0.5 to 1 column toward the sun
    ([-1, 0], [0.75, 0.25])
    """
    z_edge = np.asarray(z_edge, dtype=np.float64)
    tan0 = math.tan(math.radians(float(solar_zenith_angle)))
    phi = math.radians(float(solar_beam_azimuth))
    ux, uy = -math.cos(phi), -math.sin(phi)
    ux = ux if abs(ux) >= _DIRECTION_EPS else 0.0
    uy = uy if abs(uy) >= _DIRECTION_EPS else 0.0
    step = max_step * min(dx, dy)
    out = []
    if reach is not None:
        return _capped(area_path_weights, True, z_edge, tan0, reach, dx, dy, solar_zenith_angle, solar_beam_azimuth,
                       max_step)
    for z0, z1 in zip(z_edge[:-1], z_edge[1:]):
        shift = (z1 - z0) * tan0
        n = max(1, int(math.ceil(shift / step)))
        s = z0 * tan0 + (np.arange(n) + 0.5) * (shift / n)
        sx, sy = s * ux / dx, s * uy / dy
        ix, iy = np.floor(sx).astype(np.int64), np.floor(sy).astype(np.int64)
        fx, fy = sx - ix, sy - iy
        oy = np.concatenate([iy, iy, iy + 1, iy + 1])
        ox = np.concatenate([ix, ix + 1, ix, ix + 1])
        w = np.concatenate([(1 - fx) * (1 - fy), fx * (1 - fy), (1 - fx) * fy, fx * fy]) / n
        keys, inverse = np.unique(np.stack([oy, ox], axis=1), axis=0, return_inverse=True)
        total = np.bincount(inverse.reshape(-1), weights=w, minlength=len(keys))
        keep = total > 0.0
        out.append((keys[keep, 0].astype(np.int64), keys[keep, 1].astype(np.int64), total[keep]))
    return out


def top_offset(z_top, dx, dy, solar_zenith_angle, solar_beam_azimuth):
    """Offset ``(oy, ox)`` of the column where the path toward the sun leaves the domain top.

    Parameters
    ----------
    z_top : float
        Height of the domain top [m].
    dx, dy : float
        Column size [m].
    solar_zenith_angle, solar_beam_azimuth : float
        [degree], as in :func:`path_weights`.

    Returns
    -------
    tuple of int
    """
    s = float(z_top) * math.tan(math.radians(float(solar_zenith_angle)))
    phi = math.radians(float(solar_beam_azimuth))
    ux, uy = -math.cos(phi), -math.sin(phi)
    ux = ux if abs(ux) >= _DIRECTION_EPS else 0.0
    uy = uy if abs(uy) >= _DIRECTION_EPS else 0.0
    return int(math.floor(s * uy / dy + 0.5)), int(math.floor(s * ux / dx + 0.5))


def gather_offsets(weights_per_layer):
    """Regroup per-layer path weights by column offset.

    Parameters
    ----------
    weights_per_layer : list
        Output of :func:`path_weights`.

    Returns
    -------
    dict of (int, int) -> list of (int, float)
        ``(oy, ox)`` -> ``[(layer, weight), ...]``: one array shift per distinct offset
        then serves all the layers that cross that column.
    """
    grouped = {}
    for k, (oy, ox, w) in enumerate(weights_per_layer):
        for a, b, c in zip(oy.tolist(), ox.tolist(), w.tolist()):
            grouped.setdefault((a, b), []).append((k, c))
    return grouped


def slant_sum(layer_values, weights_per_layer):
    """Weighted sum of layer values along each column's path toward the sun (periodic).

    Parameters
    ----------
    layer_values : ndarray, shape (nz, ny, nx)
        A layer quantity that adds along a path, e.g. vertical layer optical depth [1].
    weights_per_layer : list
        Output of :func:`path_weights` for the same ``nz`` layers.

    Returns
    -------
    ndarray, shape (ny, nx)
        ``sum_k sum_cells w * layer_values[k, iy + oy, ix + ox]``.
    """
    ny, nx = layer_values.shape[1:]
    total = np.zeros((ny, nx), dtype=np.float64)
    groups = list(gather_offsets(weights_per_layer).items())
    # total += np.roll(plane, (-oy, -ox), axis=(0, 1)) for each offset, done one block of
    # output rows at a time so that the planes stay in the cache; every cell still adds the
    # same terms in the same order.
    rows = max(1, CELL_BLOCK // nx)
    for start in range(0, ny, rows):
        out = total[start:start + rows]
        plane, term = np.empty_like(out), np.empty_like(out)
        for (oy, ox), terms in groups:
            first = (start + oy) % ny
            if first + out.shape[0] <= ny:
                source = slice(first, first + out.shape[0])
            else:
                source = (np.arange(out.shape[0]) + first) % ny
            plane[...] = 0.0
            for k, w in terms:
                np.multiply(layer_values[k][source], w, out=term)
                plane += term
            sx = -ox % nx
            out[:, sx:] += plane[:, :nx - sx]
            out[:, :sx] += plane[:, nx - sx:]
    return total


def gather_layers(layer_values, weights_per_layer):
    """Per-layer values along each column's path toward the sun (periodic).

    Parameters
    ----------
    layer_values : ndarray, shape (nz, ny, nx)
    weights_per_layer : list
        Output of :func:`path_weights`.

    Returns
    -------
    ndarray, shape (nz, ny, nx)
        ``out[k, iy, ix] = sum_cells w * layer_values[k, iy + oy, ix + ox]``: the layers
        of the tilted column that reaches the surface at ``(iy, ix)``.
    """
    out = np.zeros(layer_values.shape, dtype=np.float64)
    for k, (oy, ox, w) in enumerate(weights_per_layer):
        for a, b, c in zip(oy.tolist(), ox.tolist(), w.tolist()):
            out[k] += c * np.roll(layer_values[k], (-a, -b), axis=(0, 1))
    return out


def scatter_layers(layer_values, weights_per_layer):
    """Return per-layer values of tilted columns to the cells their paths cross (adjoint of :func:`gather_layers`).

    A value of the tilted column reaching the surface at ``(iy, ix)`` in layer ``k`` is
    shared among the cells ``(iy + oy, ix + ox)`` its path crosses in that layer, in
    proportion to the path length in each, so sums over the domain are kept.

    Parameters
    ----------
    layer_values : ndarray, shape (nz, ny, nx)
    weights_per_layer : list
        Output of :func:`path_weights`.

    Returns
    -------
    ndarray, shape (nz, ny, nx)
    """
    out = np.zeros(layer_values.shape, dtype=np.float64)
    for k, (oy, ox, w) in enumerate(weights_per_layer):
        for a, b, c in zip(oy.tolist(), ox.tolist(), w.tolist()):
            out[k] += c * np.roll(layer_values[k], (a, b), axis=(0, 1))
    return out
