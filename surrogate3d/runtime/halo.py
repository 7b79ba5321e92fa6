"""Features of a host sub-domain with a halo: how wide the halo must be, and the features inside it.

A host model decomposed over processes holds, on each, a sub-domain of columns and a
halo of neighbours' columns around it.  A feature of a column reads the columns within
its *reach*: neighbour windows their radius, edge distances their cap, gradients one
column, the slant path toward the sun as far as the sun's rays travel across the grid's
layers (``z tan(theta0)`` at the height of the top edge, so the reach grows without bound
as the sun sinks), the direct-beam prior the area those paths sweep, the tilted
interception that area twice (out and back).  With a halo at least that wide, the
features of the sub-domain's own columns equal those of the whole periodic domain:
:func:`subdomain_features` computes them on the sub-domain with its halo, as if it were
periodic, and keeps its own columns, whose windows never reach the wrapped edge.
"""

import math

import numpy as np

from ..core.slant_path import area_path_weights, path_weights
from ..errors import ParameterError, ValidationError
from ..pairs.features import FEATURES, column_name, compute_features


def _cells(distance, size):
    return int(math.ceil(distance / size - 1e-9)) if distance > 0.0 else 0


def _window(geometry, parameters, radius):
    return _cells(radius, geometry["dx"]), _cells(radius, geometry["dy"])


def _edge(geometry, parameters, radius):
    cap = parameters["edge_distance_cap"]
    return _cells(cap, geometry["dx"]), _cells(cap, geometry["dy"])


def _gradient(geometry, parameters, radius):
    return 1, 1


def _sides(geometry, parameters, radius):
    # Bilinear samples at +-d along the beam: cells floor(s) and floor(s) + 1.
    phi = math.radians(geometry["solar_beam_azimuth"])
    d = parameters["cloud_side_distance"]
    sx, sy = abs(d * math.cos(phi)) / geometry["dx"], abs(d * math.sin(phi)) / geometry["dy"]
    return int(math.floor(sx)) + 1, int(math.floor(sy)) + 1


def _largest_offsets(weights):
    reach_x = max((int(np.abs(ox).max()) for _, ox, _ in weights if ox.size), default=0)
    reach_y = max((int(np.abs(oy).max()) for oy, _, _ in weights if oy.size), default=0)
    return reach_x, reach_y


def _path(geometry, parameters, radius):
    return _largest_offsets(path_weights(geometry["z_edge"], geometry["dx"], geometry["dy"],
                                         geometry["solar_zenith_angle"], geometry["solar_beam_azimuth"],
                                         reach=geometry.get("slant_path_reach")))


def path_reach(z_edge, dx, dy, solar_zenith_angle, solar_beam_azimuth, slant_path_reach=None):
    """Columns ``(along x, along y)`` the straight path toward the sun crosses from the surface to the top edge
    (what every slant-path quantity of the layers reads; ``z_edge`` [m], ``dx``, ``dy`` [m], angles [degree],
    ``slant_path_reach`` [m] the host's cap of the path's horizontal travel, default none)."""
    return _path(_geometry(z_edge, dx, dy, solar_zenith_angle, solar_beam_azimuth, slant_path_reach), None, None)


def _geometry(z_edge, dx, dy, solar_zenith_angle, solar_beam_azimuth, slant_path_reach):
    return {"z_edge": np.asarray(z_edge, dtype=np.float64), "dx": float(dx), "dy": float(dy),
            "solar_zenith_angle": float(solar_zenith_angle), "solar_beam_azimuth": float(solar_beam_azimuth),
            "slant_path_reach": None if slant_path_reach is None else float(slant_path_reach)}


def _area(geometry, parameters, radius):
    return _largest_offsets(area_path_weights(geometry["z_edge"], geometry["dx"], geometry["dy"],
                                              geometry["solar_zenith_angle"], geometry["solar_beam_azimuth"],
                                              reach=geometry.get("slant_path_reach")))


def _area_twice(geometry, parameters, radius):
    x, y = _area(geometry, parameters, radius)
    return 2 * x, 2 * y


def _own(geometry, parameters, radius):
    return 0, 0


#: How far each registered feature reads: a function of the geometry (``z_edge`` [m],
#: ``dx``, ``dy`` [m], sun angles [degree]), the recipe parameters and the radius [m]
#: giving ``(columns along x, columns along y)``.
REACH = {
    "neighbour_mean_cloud_fraction": _window, "neighbour_contrast_cloud_fraction": _window,
    "neighbour_mean_log_optical_depth": _window, "neighbour_contrast_log_optical_depth": _window,
    "cloud_edge_distance": _edge,
    "log_optical_depth_gradient_along_beam": _gradient, "log_optical_depth_gradient_across_beam": _gradient,
    "slant_optical_depth": _path, "slant_minus_vertical_optical_depth": _path,
    "cloud_top_height_upsun_minus_downsun": _sides,
    "direct_beam_prior": _area, "direct_beam_prior_minus_independent_column": _area,
    "direct_beam_prior_slant_minus_vertical": _area,
    "direct_beam_interception_tilted": _area_twice, "direct_beam_interception_tilted_minus_vertical": _area_twice,
    "direct_beam_interception_relative_change": _area_twice,
    **{name: _window for name in FEATURES if name.startswith("neighbour_excess_")},
}


def feature_reach(recipe, z_edge, dx, dy, solar_zenith_angle, solar_beam_azimuth, slant_path_reach=None):
    """How many neighbouring columns each feature column of a recipe reads, along x and y.

    Parameters
    ----------
    recipe : surrogate3d.pairs.recipe.FeatureRecipe
    z_edge : array_like (nz + 1,)
        The host's layer edges [m]: the slant paths cross every layer up to the last edge.
    dx, dy : float
        Host column size [m].
    solar_zenith_angle, solar_beam_azimuth : float
        [degree].
    slant_path_reach : float, optional
        The host's cap of the slant paths' horizontal travel [m] (host field
        ``slant_path_reach``); default none.

    Returns
    -------
    dict of str -> (int, int)
        Feature column name (``recipe.column_names()``) -> ``(reach_x, reach_y)`` in columns.

    Examples
    --------
    >>> from surrogate3d.pairs.recipe import FeatureRecipe
    >>> recipe = FeatureRecipe(["cloud_fraction", "neighbour_mean_cloud_fraction", "slant_optical_depth"],
    ...                        {"neighbour_radii": [2500.0]})
    >>> feature_reach(recipe, [0.0, 2000.0, 4000.0], 1000.0, 1000.0, 45.0, 0.0)
    {'cloud_fraction': (0, 0), 'neighbour_mean_cloud_fraction_2500m': (3, 3), 'slant_optical_depth': (4, 0)}
    """
    geometry = _geometry(z_edge, dx, dy, solar_zenith_angle, solar_beam_azimuth, slant_path_reach)
    out = {}
    for name in recipe.features:
        reach = REACH.get(name, _own)
        radii = recipe.parameters["neighbour_radii"] if FEATURES[name].per_radius else [None]
        for radius in radii:
            out[column_name(name, radius)] = reach(geometry, recipe.parameters, None if radius is None else float(radius))
    return out


def halo_width(recipe, z_edge, dx, dy, solar_zenith_angle, solar_beam_azimuth, slant_path_reach=None):
    """The halo ``(columns along x, columns along y)`` a sub-domain needs for every feature of a recipe
    (:func:`feature_reach`, largest over the features)."""
    reach = feature_reach(recipe, z_edge, dx, dy, solar_zenith_angle, solar_beam_azimuth, slant_path_reach).values()
    return max((x for x, _ in reach), default=0), max((y for _, y in reach), default=0)


def _interior(value, hy, hx):
    return value[..., hy:value.shape[-2] - hy, hx:value.shape[-1] - hx]


def subdomain_features(host_fields, recipe, halo):
    """Features of the own columns of a sub-domain whose fields include a halo.

    Parameters
    ----------
    host_fields : dict of ndarray
        Host fields (:mod:`surrogate3d.pairs.features`) on the sub-domain *with* its halo:
        planes (ny + 2 hy, nx + 2 hx), layer fields (nz, ny + 2 hy, nx + 2 hx).
    recipe : surrogate3d.pairs.recipe.FeatureRecipe
    halo : int or (int, int)
        Halo width in columns, the same on both axes or ``(hx, hy)``.

    Returns
    -------
    ndarray (ny * nx, n_columns)
        The features of the own columns, row-major ``(iy, ix)``.

    Raises
    ------
    surrogate3d.errors.ParameterError
        A negative halo, or one that leaves no own column.
    surrogate3d.errors.ValidationError
        The halo is narrower than a feature reads (the feature, its reach and the halo
        named), or malformed host fields.
    """
    hx, hy = (halo, halo) if np.isscalar(halo) else tuple(halo)
    if not all(isinstance(h, (int, np.integer)) and not isinstance(h, bool) and h >= 0 for h in (hx, hy)):
        raise ParameterError(f"halo must be an integer >= 0 or a pair (hx, hy) of them; got {halo!r}")
    missing = [k for k in ("z_edge", "dx", "dy", "solar_zenith_angle", "solar_beam_azimuth") if k not in host_fields]
    if missing:
        raise ValidationError(f"host fields lack {missing}, which the halo a feature reads depends on")
    plane = next((np.shape(v) for v in host_fields.values() if np.ndim(v) == 2),
                 next((np.shape(v)[1:] for v in host_fields.values() if np.ndim(v) == 3), None))
    if plane is None:
        raise ValidationError("host fields hold no plane (ny, nx) nor layer field (nz, ny, nx)")
    if plane[0] <= 2 * hy or plane[1] <= 2 * hx:
        raise ParameterError(f"a halo of ({hx}, {hy}) columns leaves no own column in host fields of {plane[1]} x "
                             f"{plane[0]} columns (x, y)")
    reach = feature_reach(recipe, host_fields["z_edge"], host_fields["dx"], host_fields["dy"],
                          host_fields["solar_zenith_angle"], host_fields["solar_beam_azimuth"],
                          host_fields.get("slant_path_reach"))
    short = [(name, r) for name, r in reach.items() if r[0] > hx or r[1] > hy]
    if short:
        name, (rx, ry) = max(short, key=lambda item: max(item[1]))
        raise ValidationError(f"feature {name} reads {rx} columns along x and {ry} along y; the halo has {hx} and {hy} "
                              f"({len(short)} feature(s) need more; halo_width gives what the recipe needs)")
    ny, nx = plane[0] - 2 * hy, plane[1] - 2 * hx
    features = compute_features(host_fields, recipe)
    rows = (np.arange(hy, hy + ny)[:, None] * plane[1] + np.arange(hx, hx + nx)[None, :]).reshape(-1)
    return features[rows]
