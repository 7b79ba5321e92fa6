"""The feature library: what a host model can compute from its own columns and neighbours.

Every feature is a named function of *host-model fields* only, returning one value per
host column on ``(ny, nx)``.  The host grid is periodic in x and y.  This module imports
only numpy and the standard library, because the numpy-only runtime imports it to
compute features inside host models.  ``docs/features.md`` gives each formula, its unit
and its sources.

Host fields
-----------
A dict of numpy arrays on the host grid (x is the last axis, y the one before; layer 0
is the lowest):

================================================  ================  ======  =========================================
key                                               shape             units   meaning
================================================  ================  ======  =========================================
``layer_cloud_fraction``                          (nz, ny, nx)      1       cloud fraction of each layer
``layer_optical_depth``                           (nz, ny, nx)      1       broadband (solar-weighted) layer optical
                                                                            depth, mean over the host column
``layer_clear_sky_optical_depth``                 (nz, ny, nx)      1       the same without cloud (gases, Rayleigh,
                                                                            aerosol: what the layer would have if
                                                                            it were clear), mean over the column
``z_edge``                                        (nz + 1,)         m       layer edge heights, from 0 at the surface
``dx``, ``dy``                                    scalar            m       host column size
``solar_zenith_angle``                            scalar            degree  in [0, 90)
``solar_beam_azimuth``                            scalar            degree  direction the beam travels,
                                                                            counterclockwise from +x
``slant_path_reach`` (optional)                   scalar            m       cap of the slant paths' horizontal
                                                                            travel (beyond it they rise
                                                                            vertically): bounds the halo
                                                                            at low sun; default none
``surface_albedo``                                (ny, nx)          1       broadband surface albedo
``total_cloud_fraction``                          (ny, nx)          1       vertically projected cloud cover
``column_optical_depth_mean``                     (ny, nx)          1       mean sub-grid column optical depth
``column_optical_depth_std``                      (ny, nx)          1       its sub-grid standard deviation
``cloud_edge_length``                             (ny, nx)          m-1     cloud-edge length per unit area
``independent_column_<flux>``                     (ny, nx)          1       the host's own independent-column
                                                                            fluxes, fractions of the incident
                                                                            flux on the horizontal
================================================  ================  ======  =========================================

``<flux>`` is one of ``surface_downward_flux`` (direct + diffuse; computed from the two
parts when absent), ``surface_downward_direct_flux``, ``surface_downward_diffuse_flux``,
``toa_upward_flux``, ``atmosphere_absorption``.  Only the keys that the requested
features use need to be present (:data:`FEATURES` lists them per feature).
"""

import math

import numpy as np

from ..errors import ValidationError
from ..core.slant_path import (area_path_weights, check_solar_zenith_angle, gather_layers, path_weights,
                               scatter_layers, slant_sum)
from ..core.data_model import TARGETS
from ..core.config import CELL_BLOCK
from ..core.validation import check_array, check_number

#: Fluxes a host passes as ``independent_column_<flux>`` (the correction targets).
INDEPENDENT_COLUMN_FLUXES = TARGETS

_SCALARS = ("dx", "dy", "solar_zenith_angle", "solar_beam_azimuth")
_LAYER_KEYS = ("layer_cloud_fraction", "layer_optical_depth", "layer_clear_sky_optical_depth")
_PLANE_KEYS = ("surface_albedo", "total_cloud_fraction", "column_optical_depth_mean", "column_optical_depth_std",
               "cloud_edge_length")


#: Allowed range of the host fields that have one (others need only be finite).
_ALLOWED_RANGE = {**{key: (0.0, np.inf) for key in ("layer_optical_depth", "layer_clear_sky_optical_depth",
                                                    "column_optical_depth_mean",
                                                    "column_optical_depth_std", "cloud_edge_length")},
                  **{key: (0.0, 1.0) for key in ("layer_cloud_fraction", "total_cloud_fraction", "surface_albedo")}}



def _is_plane_key(key):
    return key in _PLANE_KEYS or key.startswith("independent_column_")


class _Fields(dict):
    """Host fields plus a cache of derived arrays shared by the features of one call."""

    def __init__(self, fields):
        super().__init__(fields)
        self.derived = {}


def _memo(fields, key, compute):
    cache = getattr(fields, "derived", None)
    if cache is None:
        return compute()
    if key not in cache:
        cache[key] = compute()
    return cache[key]


def _scalar(fields, key):
    return float(fields[key])


def _mu0(fields):
    return math.cos(math.radians(_scalar(fields, "solar_zenith_angle")))


# --- periodic stencils ------------------------------------------------------------------

def _box_sum(a, m, axis):
    """Periodic sum over the ``2 m + 1`` cells centred on each cell along ``axis``.

    The terms are added in order from the lowest offset, so that a cell's sum depends only
    on the values in its window, not on where the domain starts: a sub-domain with a halo
    gives the whole domain's sums bit for bit, and so does the generated Fortran (which adds
    the same terms in the same order).  A difference of cumulative sums would be cheaper but
    carries the rounding of everything before the window, and a window mean that falls on a
    tree threshold (cloud fractions come in steps) would then branch differently in another
    decomposition.  The cost grows with the window: ``2 m + 1`` passes over the array
    (measured: 6 ms for a 200 x 200 grid and m = 100, 0.2 s for 1000 x 1000 and m = 100).
    """
    a = np.asarray(a, dtype=np.float64)
    n = a.shape[axis]
    out = np.zeros_like(a)
    # One pass per offset: slices of the periodically extended array while the window fits
    # in the domain, an index list when it wraps more than once.
    ext = None
    if m <= n:
        ext = np.concatenate([_along(a, axis, slice(n - m, n)), a, _along(a, axis, slice(0, m))], axis=axis)
    for o in range(-m, m + 1):
        out += (_along(ext, axis, slice(m + o, m + o + n)) if ext is not None
                else np.take(a, (np.arange(n) + o) % n, axis=axis))
    return out


def _along(a, axis, index):
    """``a[..., index, ...]`` with ``index`` on ``axis``."""
    key = [slice(None)] * a.ndim
    key[axis] = index
    return a[tuple(key)]


def _periodic_shift(a, oy, ox, out=None, add=False):
    """``np.roll(a, (oy, ox), axis=(0, 1))`` of a 2-D array (written into, or added to, ``out``).

    Four block copies instead of roll's intermediate arrays; the values are the same.
    """
    ny, nx = a.shape
    oy, ox = oy % ny, ox % nx
    if out is None:
        out = np.empty_like(a)
    for (ty, sy) in ((slice(oy, ny), slice(0, ny - oy)), (slice(0, oy), slice(ny - oy, ny))):
        for (tx, sx) in ((slice(ox, nx), slice(0, nx - ox)), (slice(0, ox), slice(nx - ox, nx))):
            if add:
                out[ty, tx] += a[sy, sx]
            else:
                out[ty, tx] = a[sy, sx]
    return out


def _window_sum_1d(a, half_width, axis):
    """Periodic sum with weight 1 within ``half_width`` cells and a fractional weight beyond."""
    m = int(math.floor(half_width))
    frac = half_width - m
    out = _box_sum(a, m, axis)
    # A sliver of at most 1e-9 of a column is left out: the halo rule (ceil(r / dx - 1e-9),
    # surrogate3d.runtime.halo) does not count it, so reading it would wrap a sub-domain's block.
    if frac > 1e-9:
        out += frac * (np.roll(a, m + 1, axis=axis) + np.roll(a, -(m + 1), axis=axis))
    return out


def neighbourhood_mean(a, radius, dx, dy):
    """Periodic area mean of ``a`` over the square reaching ``radius`` beyond the column's sides.

    Parameters
    ----------
    a : ndarray (ny, nx)
        A host-column field.
    radius : float
        Distance the window reaches beyond each side of the column [m]; the window is
        ``(dx + 2 radius) x (dy + 2 radius)`` centred on the column, with partial
        columns weighted by the fraction inside it.
    dx, dy : float
        Host column size [m].

    Returns
    -------
    ndarray (ny, nx)
    """
    hx, hy = radius / dx, radius / dy
    total = _window_sum_1d(_window_sum_1d(a, hx, axis=1), hy, axis=0)
    return total / ((2.0 * hx + 1.0) * (2.0 * hy + 1.0))


def _shift_bilinear(a, sx, sy):
    """Periodic bilinear sample of ``a`` at ``(x + sx, y + sy)``; shifts in cells."""
    ix, iy = math.floor(sx), math.floor(sy)
    fx, fy = sx - ix, sy - iy
    out = np.zeros_like(a, dtype=np.float64)
    shifted = np.empty_like(out)
    for oy, wy in ((iy, 1.0 - fy), (iy + 1, fy)):
        for ox, wx in ((ix, 1.0 - fx), (ix + 1, fx)):
            if wx * wy > 0.0:
                _periodic_shift(a, -oy, -ox, out=shifted)
                shifted *= wx * wy
                out += shifted
    return out


def _distance_to(targets, dx, dy, reach):
    """Periodic Euclidean distance [m] from each cell centre to the nearest target centre.

    Exact two-pass (row, then column) distance transform limited to ``reach`` [m]:
    distances beyond it come back as infinity.
    """
    ny, nx = targets.shape
    kx = min(int(math.ceil(reach / dx)), nx // 2)
    ky = min(int(math.ceil(reach / dy)), ny // 2)
    # Shifts by up to kx (ky) cells are slices of the periodically padded array.
    padded = np.concatenate([targets[:, nx - kx:], targets, targets[:, :kx]], axis=1)
    row2 = np.full(targets.shape, np.inf)
    hit = np.empty(targets.shape, dtype=bool)
    for o in range(kx, -1, -1):
        np.logical_or(padded[:, kx - o:kx - o + nx], padded[:, kx + o:kx + o + nx], out=hit)
        np.copyto(row2, (o * dx) ** 2, where=hit)
    dist2 = row2.copy()
    padded = np.concatenate([row2[ny - ky:], row2, row2[:ky]], axis=0)
    # Column pass one block of rows at a time, so the rows it reads stay in the cache.
    rows = max(1, CELL_BLOCK // nx)
    for start in range(0, ny, rows):
        out = dist2[start:start + rows]
        shifted = np.empty_like(out)
        for o in range(1, ky + 1):
            step = (o * dy) ** 2
            for first in (start + ky - o, start + ky + o):
                np.add(padded[first:first + out.shape[0]], step, out=shifted)
                np.minimum(out, shifted, out=out)
    dist = np.sqrt(dist2)
    dist[dist > reach] = np.inf
    return dist


# --- shared column quantities -------------------------------------------------------------

def column_optical_depth(fields):
    """Vertical column optical depth [1]: the sum of ``layer_optical_depth`` over layers."""
    return _memo(fields, "tau", lambda: np.asarray(fields["layer_optical_depth"], dtype=np.float64).sum(axis=0))


def _log_tau(fields):
    return _memo(fields, "log_tau", lambda: np.log1p(column_optical_depth(fields)))


def _cloud_extent(fields, threshold):
    """Cloud-top and cloud-base height [m] of each column; 0 where no layer is cloudy."""
    def compute():
        cloudy = np.asarray(fields["layer_cloud_fraction"]) > threshold
        z_edge = np.asarray(fields["z_edge"], dtype=np.float64)
        nz = cloudy.shape[0]
        # Number the layers 1 .. nz upward (for the top) and downward (for the base) and
        # take the largest number among the cloudy layers; 0 means no cloudy layer.  Two
        # small-integer products and maxima over the layer axis (whole planes at a time).
        dtype = np.uint8 if nz < 255 else np.uint16
        upward = np.arange(1, nz + 1, dtype=dtype)[:, None, None]
        top = np.max(cloudy * upward, axis=0)
        below_base = np.max(cloudy * upward[::-1], axis=0)
        top_height = np.concatenate([[0.0], z_edge[1:]])             # by layer number from the bottom
        base_height = np.concatenate([[0.0], z_edge[:-1][::-1]])     # by layer number from the top
        return top_height[top], base_height[below_base]
    return _memo(fields, ("extent", threshold), compute)


def _independent_column(fields, flux):
    key = f"independent_column_{flux}"
    if key in fields:
        return np.asarray(fields[key], dtype=np.float64)
    if flux == "surface_downward_flux":
        return (np.asarray(fields["independent_column_surface_downward_direct_flux"], dtype=np.float64)
                + np.asarray(fields["independent_column_surface_downward_diffuse_flux"], dtype=np.float64))
    raise ValidationError(f"host_fields has no {key!r}")


# --- the direct-beam prior ----------------------------------------------------------------

def maximum_random_clear_fraction(layer_cloud_fraction):
    """Clear line-of-sight fraction through a stack of layers under maximum-random overlap [1].

    Cloud in adjacent cloudy layers overlaps as much as it can (maximum overlap); blocks
    of cloudy layers separated by a clear layer overlap at random (Geleyn and
    Hollingsworth 1979).  From the top layer ``N`` down,

        C = (1 - c_N) prod_{k < N} (1 - max(c_k, c_{k+1})) / (1 - c_{k+1}),

    a factor whose denominator is 0 (``c_{k+1} = 1``) taken as 0: the product is then 0
    already.

    Parameters
    ----------
    layer_cloud_fraction : array_like, shape (nz, ...)
        Cloud fraction of each layer [1], in [0, 1]; layer 0 is the lowest.

    Returns
    -------
    ndarray, shape (...)
        The fraction [1] of lines of sight that cross no cloud in any layer.

    References
    ----------
    Geleyn, J.-F. and A. Hollingsworth, 1979: An economical analytical method for the
    computation of the interaction between scattering and line absorption of radiation.
    Contrib. Atmos. Phys., 52, 1-16.

    Examples
    --------
    >>> float(maximum_random_clear_fraction([[0.5], [0.5]])[0])     # adjacent: maximum overlap
    0.5
    >>> float(maximum_random_clear_fraction([[0.5], [0.0], [0.5]])[0])   # separated: random
    0.25
    """
    c = np.clip(np.asarray(layer_cloud_fraction, dtype=np.float64), 0.0, 1.0)
    clear = 1.0 - c[-1]
    for k in range(c.shape[0] - 2, -1, -1):
        clear = clear * _overlap_ratio(c[k], c[k + 1])
    return clear


def _overlap_ratio(lower, upper):
    """``(1 - max(lower, upper)) / (1 - upper)``, 0 where ``upper`` is 1."""
    numerator = 1.0 - np.maximum(lower, upper)
    denominator = 1.0 - upper
    return np.divide(numerator, denominator, out=np.zeros_like(numerator), where=denominator > 0.0)


def _scan_blocks(layer_cloud_fraction, layer_cloud_optical_depth, layer_thickness=None):
    """Walk down the layers of every column and yield each block of adjacent cloudy layers as it ends.

    Yields ``(k, index, cover, depth, volume)``: the lowest layer ``k`` of the
    blocks, the flat column indices of the columns whose block ends there, and each
    block's cover, cloud optical depth and cloud volume per unit area
    ``sum_k c_k dz_k`` [m] (see :func:`cloud_blocks`).  The generator's return value is ``loose`` (flat), the cloud
    optical depth of layers with zero cloud fraction.  Work on whole planes is limited
    to a few comparisons per layer; the running sums touch only cloudy columns.
    """
    c = np.clip(np.asarray(layer_cloud_fraction, dtype=np.float64), 0.0, 1.0)
    nz = c.shape[0]
    c = c.reshape(nz, -1)
    x = np.asarray(layer_cloud_optical_depth, dtype=np.float64).reshape(nz, -1)
    dz = np.zeros(nz) if layer_thickness is None else np.asarray(layer_thickness, dtype=np.float64)
    n = c.shape[1]
    run_clear, run_depth, run_volume = np.ones(n), np.zeros(n), np.zeros(n)
    loose = np.zeros(n)
    cloudy_above = np.zeros(n, dtype=bool)
    for k in range(nz - 1, -1, -1):
        ck, xk = c[k], x[k]
        cloudy = ck > 0.0
        clear = ~cloudy
        loose[clear] += xk[clear]
        # A cloudy layer below a cloudy one continues its block; else it starts one.
        cont = np.flatnonzero(cloudy & cloudy_above)
        start = np.flatnonzero(cloudy & ~cloudy_above)
        run_clear[start] = 1.0 - ck[start]
        run_depth[start] = xk[start]
        run_volume[start] = ck[start] * dz[k]
        if cont.size:
            run_clear[cont] *= _overlap_ratio(ck[cont], c[k + 1][cont])
            run_depth[cont] += xk[cont]
            run_volume[cont] += ck[cont] * dz[k]
        ends = np.flatnonzero(cloudy & (c[k - 1] <= 0.0)) if k > 0 else np.flatnonzero(cloudy)
        if ends.size:
            yield k, ends, 1.0 - run_clear[ends], run_depth[ends].copy(), run_volume[ends].copy()
        cloudy_above = cloudy
    return loose


def _blocks_list(layer_cloud_fraction, layer_cloud_optical_depth, layer_thickness=None):
    """All blocks of :func:`_scan_blocks` as a list, and ``loose``."""
    scan = _scan_blocks(layer_cloud_fraction, layer_cloud_optical_depth, layer_thickness)
    blocks = []
    while True:
        try:
            blocks.append(next(scan))
        except StopIteration as stop:
            return blocks, stop.value


def cloud_blocks(layer_cloud_fraction, layer_cloud_optical_depth, layer_thickness=None):
    """Blocks of adjacent cloudy layers: the cover, cloud optical depth and thickness of each.

    A block is a run of adjacent layers with positive cloud fraction.  Its cover is one
    minus its clear line-of-sight fraction under maximum-random overlap
    (:func:`maximum_random_clear_fraction` of its layers; maximum overlap where the
    fractions grow toward the block's widest layer); its cloud optical depth is the sum
    over its layers and its mean cloud thickness ``sum_k c_k dz_k / cover`` (cloud volume
    over cover).  Blocks are separated by clear layers and overlap at random, so the
    clear fraction of the whole stack is the product of ``1 - cover`` over the blocks
    (Geleyn and Hollingsworth 1979).

    Parameters
    ----------
    layer_cloud_fraction : array_like, shape (nz, ...)
        Cloud fraction of each layer [1]; layer 0 is the lowest.
    layer_cloud_optical_depth : array_like, shape (nz, ...)
        Cloud optical depth of each layer, area mean [1] (total minus clear-sky).
    layer_thickness : array_like, shape (nz,), optional
        Layer thickness [m]; default 0 (block thickness 0).

    Returns
    -------
    cover : ndarray, shape (nz, ...)
        Each block's cover [1] at the index of its lowest layer, 0 elsewhere.
    depth : ndarray, shape (nz, ...)
        Each block's cloud optical depth [1] at the same index, 0 elsewhere.
    thickness : ndarray, shape (nz, ...)
        Each block's mean cloud thickness [m] at the same index, 0 elsewhere.
    loose : ndarray, shape (...)
        Cloud optical depth [1] of layers with zero cloud fraction (spread over every
        line of sight).

    References
    ----------
    Geleyn, J.-F. and A. Hollingsworth, 1979: An economical analytical method for the
    computation of the interaction between scattering and line absorption of radiation.
    Contrib. Atmos. Phys., 52, 1-16.
    """
    shape = np.shape(layer_cloud_fraction)
    blocks, loose = _blocks_list(layer_cloud_fraction, layer_cloud_optical_depth, layer_thickness)
    cover, depth, thickness = (np.zeros((shape[0], int(np.prod(shape[1:], dtype=np.int64)))) for _ in range(3))
    for k, index, c, x, volume in blocks:
        cover[k, index], depth[k, index] = c, x
        thickness[k, index] = np.divide(volume, c, out=np.zeros_like(c), where=c > 0.0)
    return cover.reshape(shape), depth.reshape(shape), thickness.reshape(shape), loose.reshape(shape[1:])


def cloud_width_per_area(total_cloud_fraction, cloud_edge_length):
    """Mean width over mean area of the clouds [m-1], from the cloud cover and the cloud-edge length.

    In a Boolean model (clouds as independent, uniformly placed convex shapes of
    intensity ``lambda``), the cover is ``c = 1 - exp(-lambda E[A])`` and the edge
    length per unit area of the union ``P = (1 - c) lambda E[perimeter]`` (Matheron
    1975; Serra 1982).  The mean width (caliper diameter) of a convex shape over all
    directions is its perimeter over ``pi`` (Cauchy's formula; Santalo 1976), hence

        rho = E[width] / E[A] = P / (pi (1 - c) (-ln(1 - c))),

    ``2 / (pi r)`` for discs of radius ``r``; 0 where ``c`` is 0 or 1.

    Parameters
    ----------
    total_cloud_fraction : array_like
        ``c`` [1], vertically projected cloud cover.
    cloud_edge_length : array_like
        ``P`` [m-1], cloud-edge length per unit area.

    Returns
    -------
    ndarray
        ``rho`` [m-1].

    References
    ----------
    Matheron, G., 1975: Random Sets and Integral Geometry. Wiley, New York.

    Santalo, L. A., 1976: Integral Geometry and Geometric Probability. Addison-Wesley.

    Serra, J., 1982: Image Analysis and Mathematical Morphology. Academic Press, London.
    """
    c = np.clip(np.asarray(total_cloud_fraction, dtype=np.float64), 0.0, 1.0)
    perimeter = np.asarray(cloud_edge_length, dtype=np.float64)
    clear = 1.0 - c
    denominator = np.pi * clear * -np.log(np.where(clear > 0.0, clear, 1.0))
    return np.divide(perimeter, denominator, out=np.zeros_like(denominator), where=denominator > 0.0)


def slanted_cover(cover, thickness, shift_per_height, width_per_area):
    """Cloud cover seen along a slanted direction [1]: ``1 - (1 - C)^(1 + rho H tan(theta0))``.

    A cloud of height ``H`` seen along a direction of zenith angle ``theta0`` hides the
    Minkowski sum of its base and a segment of length ``d = H tan(theta0)``: its area
    plus ``d`` times its width across the direction.  In the Boolean model of
    :func:`cloud_width_per_area` the clear fraction is then
    ``exp(-lambda (E[A] + d E[width])) = (1 - C) exp(-rho d (-ln(1 - C)))``, i.e.
    ``(1 - C)^(1 + rho d)`` (the widths averaged over directions: Matheron 1975; Serra
    1982; Santalo 1976).  Exact for that model with vertical-sided clouds filling the
    layers of the block.

    Parameters
    ----------
    cover : array_like
        ``C`` [1], cover seen from above.
    thickness : array_like
        ``H`` [m].
    shift_per_height : float
        ``tan(theta0)`` [1].
    width_per_area : array_like
        ``rho`` [m-1] (:func:`cloud_width_per_area`).

    Returns
    -------
    ndarray
        [1], >= ``C``.
    """
    clear = 1.0 - np.clip(np.asarray(cover, dtype=np.float64), 0.0, 1.0)
    exponent = 1.0 + np.asarray(width_per_area, dtype=np.float64) * np.asarray(thickness, dtype=np.float64) \
        * float(shift_per_height)
    return 1.0 - np.where(clear > 0.0, clear, 0.0) ** exponent


def gamma_mean_transmittance(mean_optical_depth, relative_variance, mu0):
    """Mean direct transmittance ``<exp(-tau / mu0)>`` over a gamma distribution of optical depth [1].

    With ``tau`` gamma-distributed of mean ``m`` and relative variance
    ``v = var(tau) / m^2`` (shape ``1 / v``, scale ``m v``), the mean is the Laplace
    transform of the gamma density at ``1 / mu0``,

        <exp(-tau / mu0)> = (1 + m v / mu0) ^ (-1 / v),

    and ``exp(-m / mu0)`` (Beer-Lambert) for ``v = 0``.  The gamma distribution
    describes the sub-grid optical depth of boundary-layer clouds (Barker 1996;
    Barker et al. 1996; Oreopoulos and Barker 1999).

    Parameters
    ----------
    mean_optical_depth : array_like
        Mean optical depth ``m`` [1], >= 0.
    relative_variance : array_like
        ``v`` [1], >= 0 (the square of the relative standard deviation).
    mu0 : float or array_like
        Cosine of the solar zenith angle [1], in (0, 1].

    Returns
    -------
    ndarray
        [1], in [exp(-m / mu0), 1]: variability only raises the mean transmittance.

    References
    ----------
    Barker, H. W., 1996: A parameterization for computing grid-averaged solar fluxes for
    inhomogeneous marine boundary layer clouds. Part I: Methodology and homogeneous
    biases. J. Atmos. Sci., 53, 2289-2303.

    Oreopoulos, L. and H. W. Barker, 1999: Accounting for subgrid-scale cloud
    variability in a multi-layer 1D solar radiative transfer algorithm. Quart. J. Roy.
    Meteor. Soc., 125, 301-330.

    Examples
    --------
    >>> round(float(gamma_mean_transmittance(2.0, 1.0, 1.0)), 12)  # exponential distribution: 1 / (1 + m)
    0.333333333333
    """
    m, v, mu0 = np.broadcast_arrays(*(np.asarray(a, dtype=np.float64) for a in (mean_optical_depth,
                                                                                   relative_variance, mu0)))
    # k ln(1 + theta / mu0) with k = 1 / v: log1p keeps it exact down to v -> 0, where it
    # tends to m / mu0.
    exponent = np.divide(np.log1p(m * v / mu0), v, out=np.array(m / mu0, dtype=np.float64), where=v > 0.0)
    return np.exp(-exponent)


def in_cloud_relative_variance(column_std, block_cover, block_depth):
    """Relative variance [1] of the cloud optical depth where there is cloud, from the host's sub-grid statistics.

    The host's sub-grid standard deviation of column optical depth, ``column_std``, is
    over all its columns, clear ones included.  Model the cloud optical depth of a
    column as the sum over the blocks of adjacent cloudy layers (:func:`cloud_blocks`,
    randomly overlapped, hence independent) of ``m_j + e_j`` on a share ``C_j`` of the
    columns and 0 elsewhere, with ``m_j = X_j / C_j`` and the in-cloud deviation ``e_j``
    of variance ``v m_j^2`` (one relative variance ``v`` for all blocks).  The law of
    total variance gives ``column_std^2 = sum_j [C_j v m_j^2 + C_j (1 - C_j) m_j^2]``, so

        v = (column_std^2 - sum_j X_j^2 (1 - C_j) / C_j) / sum_j X_j^2 / C_j,

    clipped at 0 (0 without cloud).  With one block of cover ``c`` this is
    ``column_std^2 / (c m^2) - (1 - c)``.

    Parameters
    ----------
    column_std : array_like, shape (...)
        Sub-grid standard deviation of column optical depth [1].
    block_cover, block_depth : array_like, shape (nz, ...)
        Cover ``C_j`` [1] and cloud optical depth ``X_j`` [1] of each block, 0 where
        there is none (:func:`cloud_blocks`).

    Returns
    -------
    ndarray, shape (...)
        ``v`` [1], >= 0.

    References
    ----------
    Law of total variance (common practice); ``v`` is the inverse of the gamma shape
    parameter ``nu`` of Barker et al. (1996) and Oreopoulos and Barker (1999).
    """
    cover = np.asarray(block_cover, dtype=np.float64)
    depth = np.asarray(block_depth, dtype=np.float64)
    squared = np.divide(depth * depth, cover, out=np.zeros_like(depth), where=cover > 0.0)
    between = (squared * (1.0 - cover)).sum(axis=0)
    within = squared.sum(axis=0)
    s2 = np.asarray(column_std, dtype=np.float64) ** 2
    v = np.divide(s2 - between, within, out=np.zeros_like(within), where=within > 0.0)
    return np.maximum(v, 0.0)


def _adjusted_cover(cover, index, overlap_exponent):
    """``1 - (1 - cover)^gamma`` of the blocks at flat ``index`` (:func:`overlap_exponent`)."""
    if overlap_exponent is None:
        return cover
    return 1.0 - (1.0 - cover) ** overlap_exponent[index]


def _relative_variance_of_blocks(column_std, blocks, n, overlap_exponent=None):
    """:func:`in_cloud_relative_variance` from a list of blocks of :func:`_scan_blocks` (flat, ``n`` columns)."""
    between, within = np.zeros(n), np.zeros(n)
    for _, index, cover, depth, _ in blocks:
        cover = _adjusted_cover(cover, index, overlap_exponent)
        squared = np.divide(depth * depth, cover, out=np.zeros_like(depth), where=cover > 0.0)
        np.add.at(within, index, squared)
        np.add.at(between, index, squared * (1.0 - cover))
    s2 = np.asarray(column_std, dtype=np.float64).reshape(-1) ** 2
    v = np.divide(s2 - between, within, out=np.zeros(n), where=within > 0.0)
    return np.maximum(v, 0.0)


def _transmittance_of_blocks(blocks, loose, clear_sky_optical_depth, relative_variance, mu0, width_per_area,
                             overlap_exponent=None):
    """The formula of :func:`direct_transmittance_prior` from blocks of :func:`_scan_blocks` (flat)."""
    mu0 = float(mu0)
    tan0 = math.sqrt(max(1.0 - mu0 * mu0, 0.0)) / mu0
    v = np.asarray(relative_variance, dtype=np.float64).reshape(-1)
    rho = np.broadcast_to(np.asarray(width_per_area, dtype=np.float64), np.shape(clear_sky_optical_depth)).reshape(-1)
    clear = np.asarray(clear_sky_optical_depth, dtype=np.float64).reshape(-1)
    product = np.exp(-(clear + loose) / mu0)
    for _, index, cover, depth, volume in blocks:
        cover = _adjusted_cover(cover, index, overlap_exponent)
        thickness = np.divide(volume, cover, out=np.zeros_like(cover), where=cover > 0.0)
        seen = slanted_cover(cover, thickness, tan0, rho[index])
        mean = np.divide(depth, seen, out=np.zeros_like(depth), where=seen > 0.0)
        product[index] *= 1.0 - seen + seen * gamma_mean_transmittance(mean, v[index], mu0)
    return product


def overlap_exponent(total_cloud_fraction, clear_fraction):
    """Exponent ``gamma`` that makes the blocks' clear fractions multiply to the host's known clear fraction [1].

    ``gamma = ln(1 - c) / ln(C)``, ``c`` the host column's total cloud cover and ``C``
    the clear fraction that maximum-random overlap of its layers gives; each block's
    clear fraction ``1 - C_j`` becomes ``(1 - C_j)^gamma``, so that their product is
    ``1 - c`` exactly.  1 where ``C`` is 0 or 1 (no cloud, or a layer overcast: then
    ``c = 1`` too); ``1 - c`` is taken as at least 1e-9.

    Parameters
    ----------
    total_cloud_fraction : array_like
        ``c`` [1].
    clear_fraction : array_like
        ``C`` [1], e.g. :func:`maximum_random_clear_fraction` of the column's layers.

    Returns
    -------
    ndarray
        ``gamma`` [1], > 0: above 1 where the layers overlap less than maximum-random
        overlap assumes (clouds tilted or offset between layers), below 1 where more.
    """
    c = np.clip(np.asarray(total_cloud_fraction, dtype=np.float64), 0.0, 1.0)
    clear = np.asarray(clear_fraction, dtype=np.float64)
    log_clear = np.log(np.where((clear > 0.0) & (clear < 1.0), clear, 0.5))
    gamma = np.log(np.maximum(1.0 - c, 1e-9)) / log_clear
    return np.where((clear > 0.0) & (clear < 1.0) & (c > 0.0), gamma, 1.0)


def direct_transmittance_prior(layer_cloud_fraction, layer_cloud_optical_depth, clear_sky_optical_depth,
                               cloud_relative_variance, mu0, layer_thickness=None, width_per_area=0.0,
                               overlap_exponent=None):
    """Mean direct transmittance of a path through partly cloudy layers [1] (the formula of the direct-beam prior).

    The path's layers form blocks of adjacent cloudy layers (:func:`cloud_blocks`),
    overlapped at random, each of cloud optical depth ``X_j`` and cover ``C_j``
    (maximum-random overlap within it), made consistent with a known total cover by the
    exponent ``gamma`` (:func:`overlap_exponent`): ``1 - C*_j = (1 - C_j)^gamma``, of mean
    cloud thickness ``H_j = sum_k c_k dz_k / C*_j``, and seen by the slanted beam as
    ``C'_j = 1 - (1 - C*_j)^(1 + rho H_j tan(theta0))`` (:func:`slanted_cover`).  A share
    ``1 - C'_j`` of the lines of sight misses the block, the others cross ``X_j / C'_j``
    on average (the mean slant optical depth is kept), gamma-distributed with relative
    variance ``v`` (:func:`gamma_mean_transmittance`).  Every line crosses the clear-sky
    optical depth and the cloud optical depth of layers without cloud fraction
    (``loose``)::

        T = exp(-(tau_clear + loose) / mu0) prod_j [1 - C'_j + C'_j (1 + X_j v / (C'_j mu0)) ^ (-1 / v)]

    One cloudy layer of fraction ``c`` and uniform in-cloud optical depth ``tau_c``
    under an overhead sun gives ``1 - c + c exp(-tau_c)``; an overcast homogeneous
    column Beer-Lambert, ``exp(-tau / mu0)``.

    Parameters
    ----------
    layer_cloud_fraction : array_like, shape (nz, ...)
        Cloud fraction of each layer along the path [1]; layer 0 is the lowest.
    layer_cloud_optical_depth : array_like, shape (nz, ...)
        Vertical cloud optical depth of each layer along the path, area mean [1].
    clear_sky_optical_depth : array_like, shape (...)
        ``tau_clear``: vertical optical depth of the path without cloud [1].
    cloud_relative_variance : array_like, shape (...)
        ``v`` [1] (:func:`in_cloud_relative_variance`).
    mu0 : float
        Cosine of the solar zenith angle [1], in (0, 1]; optical depths are divided by it.
    layer_thickness : array_like, shape (nz,), optional
        [m]; needed only with ``width_per_area``.
    width_per_area : array_like, shape (...)
        ``rho`` [m-1] (:func:`cloud_width_per_area`); 0 (the default) for the cover seen
        from above.
    overlap_exponent : array_like, shape (...), optional
        ``gamma`` [1]; default 1 (maximum-random overlap as it is).

    Returns
    -------
    ndarray, shape (...)
        Direct flux on the horizontal over the incident flux on the horizontal [1].

    References
    ----------
    Beer-Lambert law along the slant path; Geleyn and Hollingsworth (1979) for the
    overlap; Matheron (1975) and Serra (1982) for the Boolean model of the slanted
    cover; Barker (1996) and Oreopoulos and Barker (1999) for the gamma average.

    Examples
    --------
    >>> round(float(direct_transmittance_prior([[0.4]], [[0.4 * 2.0]], [0.0], [0.0], 1.0)[0]), 12)  # 0.6 + 0.4 e^-2
    0.654134113295
    """
    shape = np.shape(clear_sky_optical_depth)
    n = int(np.prod(shape, dtype=np.int64))
    blocks, loose = _blocks_list(layer_cloud_fraction, layer_cloud_optical_depth, layer_thickness)
    v = np.broadcast_to(np.asarray(cloud_relative_variance, dtype=np.float64), shape)
    gamma = None if overlap_exponent is None else np.broadcast_to(
        np.asarray(overlap_exponent, dtype=np.float64), shape).reshape(n)
    return _transmittance_of_blocks(blocks, loose.reshape(n), clear_sky_optical_depth, v, mu0,
                                    width_per_area, gamma).reshape(shape)


def _clear_sky_layers(fields):
    return np.asarray(fields["layer_clear_sky_optical_depth"], dtype=np.float64)


def _cloud_layers(fields):
    """Layer optical depth beyond the clear-sky one (the cloud's share), >= 0 [1]."""
    def compute():
        out = np.subtract(np.asarray(fields["layer_optical_depth"], dtype=np.float64), _clear_sky_layers(fields))
        return np.maximum(out, 0.0, out=out)
    return _memo(fields, "cloud_tau", compute)


#: Euclidean length of a boundary over its length counted along grid faces (a staircase):
#: a boundary element at angle ``a`` to the grid axes has a staircase ``|cos a| + |sin a|``
#: times longer, ``4 / pi`` on average over all angles (Cauchy-Crofton; the staircase
#: perimeter of a convex region is that of its bounding box: ``8 r`` for a disc of radius
#: ``r``).  The host field ``cloud_edge_length`` of the pair tables counts grid faces.
STAIRCASE_TO_EUCLIDEAN = math.pi / 4.0


def _vertical_blocks(fields):
    """Blocks of each host column's own layers (flat), ``loose``, the in-cloud relative variance and
    overlap exponent."""
    def compute():
        fraction = fields["layer_cloud_fraction"]
        blocks, loose = _blocks_list(fraction, _cloud_layers(fields))
        n = loose.size
        clear = np.ones(n)
        for _, index, cover, _, _ in blocks:
            clear[index] *= 1.0 - cover
        total = fields["total_cloud_fraction"]
        gamma = overlap_exponent(total, clear.reshape(np.shape(total)))
        gamma = gamma.reshape(n)
        v = _relative_variance_of_blocks(fields["column_optical_depth_std"], blocks, n, gamma)
        return blocks, loose, v, gamma
    return _memo(fields, "vertical_blocks", compute)


def _reach(fields):
    """The host's cap on the slant paths' horizontal travel [m] (``slant_path_reach``), or None."""
    return _scalar(fields, "slant_path_reach") if "slant_path_reach" in fields else None


def _area_weights(fields):
    return _memo(fields, "area_weights", lambda: area_path_weights(
        fields["z_edge"], _scalar(fields, "dx"), _scalar(fields, "dy"), _scalar(fields, "solar_zenith_angle"),
        _scalar(fields, "solar_beam_azimuth"), reach=_reach(fields)))


def _path_mean(values, layer_weights, weights, total):
    """Mean of a column value over the columns the paths cross, weighted by ``layer_weights`` (nz, ny, nx)."""
    return np.divide(slant_sum(layer_weights * values, weights), total, out=np.zeros_like(total), where=total > 0.0)


def _direct_prior(fields, slanted):
    """The direct-beam prior of each host column along the slant paths toward the sun, or the vertical."""
    def compute():
        mu0 = _mu0(fields)
        cloud, clear = _cloud_layers(fields), _clear_sky_layers(fields)
        shape = cloud.shape[1:]
        blocks, loose, v, gamma = _vertical_blocks(fields)
        if not slanted:
            return _transmittance_of_blocks(blocks, loose, clear.sum(axis=0), v, mu0, 0.0, gamma).reshape(shape)
        fraction = np.asarray(fields["layer_cloud_fraction"], dtype=np.float64)
        weights = _area_weights(fields)
        path_cloud, path_fraction = gather_layers(cloud, weights), gather_layers(fraction, weights)
        # Column properties of the crossed columns, weighted by the cloud optical depth
        # (relative variance) or the cloud fraction (cloud width per area) met in each.
        v_path = _path_mean(v.reshape(shape), cloud, weights, path_cloud.sum(axis=0))
        rho = cloud_width_per_area(fields["total_cloud_fraction"],
                                   STAIRCASE_TO_EUCLIDEAN * np.asarray(fields["cloud_edge_length"], dtype=np.float64))
        rho_path = _path_mean(rho, fraction, weights, path_fraction.sum(axis=0))
        gamma_path = _path_mean(gamma.reshape(shape), fraction, weights, path_fraction.sum(axis=0))
        return direct_transmittance_prior(path_fraction, path_cloud, slant_sum(clear, weights), v_path, mu0,
                                          np.diff(np.asarray(fields["z_edge"], dtype=np.float64)), rho_path,
                                          gamma_path)
    return _memo(fields, ("direct_prior", slanted), compute)


# --- the features -------------------------------------------------------------------------

def _grid_shape(fields):
    for key, value in fields.items():
        if key in _LAYER_KEYS:
            return np.shape(value)[1:]
        if _is_plane_key(key):
            return np.shape(value)
    raise ValidationError("host_fields holds no (ny, nx) field to fix the host grid size")


def cos_solar_zenith(fields):
    """Cosine of the solar zenith angle, ``mu0`` [1], the same for every column."""
    return np.full(_grid_shape(fields), _mu0(fields))


def surface_albedo(fields):
    """Broadband surface albedo of the column [1]."""
    return np.asarray(fields["surface_albedo"], dtype=np.float64)


def log_column_optical_depth(fields):
    """``ln(1 + tau)`` of the vertical column optical depth ``tau`` [1] (finite in clear sky)."""
    return _log_tau(fields)


def cloud_fraction(fields):
    """Vertically projected (total) cloud fraction of the column [1]."""
    return np.asarray(fields["total_cloud_fraction"], dtype=np.float64)


def column_optical_depth_relative_std(fields):
    """Sub-grid standard deviation of column optical depth over its mean [1] (0 when the mean is 0)."""
    mean = np.asarray(fields["column_optical_depth_mean"], dtype=np.float64)
    std = np.asarray(fields["column_optical_depth_std"], dtype=np.float64)
    return np.divide(std, mean, out=np.zeros_like(mean), where=mean > 0.0)


def cloud_top_height(fields, layer_cloud_fraction_threshold=0.0):
    """Top edge height [m] of the highest layer whose cloud fraction exceeds the threshold; 0 if none."""
    return _cloud_extent(fields, layer_cloud_fraction_threshold)[0]


def cloud_base_height(fields, layer_cloud_fraction_threshold=0.0):
    """Bottom edge height [m] of the lowest layer whose cloud fraction exceeds the threshold; 0 if none."""
    return _cloud_extent(fields, layer_cloud_fraction_threshold)[1]


def cloud_top_shadow_length(fields, layer_cloud_fraction_threshold=0.0):
    """Horizontal length of the shadow cast by the cloud top, ``h_top tan(theta0)`` [m]."""
    tan0 = math.tan(math.radians(_scalar(fields, "solar_zenith_angle")))
    return cloud_top_height(fields, layer_cloud_fraction_threshold) * tan0


def cloud_edge_length(fields):
    """Sub-grid cloud-edge length per unit area [m-1]."""
    return np.asarray(fields["cloud_edge_length"], dtype=np.float64)


def _independent_column_feature(flux):
    def feature(fields, host_fluxes="monte_carlo"):
        return _independent_column(fields, flux)
    feature.__name__ = f"independent_column_{flux}"
    feature.__doc__ = (f"The host's independent-column {flux.replace('_', ' ')} [1] (fraction of the incident "
                       "flux).\n\n"
                       "    ``host_fluxes`` (a recipe parameter) names the kind of fluxes the host passes (the\n"
                       "    column solver they come from); it does not change the computation.\n")
    return feature


#: Fluxes whose neighbourhood excess is a feature: what horizontal transport could bring.
NEIGHBOUR_EXCESS_FLUXES = ("surface_downward_direct_flux", "surface_downward_diffuse_flux", "toa_upward_flux")


def _neighbour_excess_feature(flux):
    def feature(fields, radius, host_fluxes="monte_carlo"):
        own = _independent_column(fields, flux)
        mean = _memo(fields, ("nm_ica", flux, radius), lambda: neighbourhood_mean(
            own, radius, _scalar(fields, "dx"), _scalar(fields, "dy")))
        return mean - own
    feature.__name__ = f"neighbour_excess_independent_column_{flux}"
    feature.__doc__ = (f"Neighbourhood mean of the host's independent-column {flux.replace('_', ' ')} over the window "
                       "reaching ``radius`` [m] beyond the column, minus the column's own [1].\n\n"
                       "    Light scattered in one column leaves through others: in 3D a column's diffuse and\n"
                       "    reflected fluxes lean toward their neighbourhood's (the smoothing of the non-local\n"
                       "    independent pixel approximation; Marshak et al. 1995), and its direct flux toward\n"
                       "    that of the columns its slant path crosses.  The excess says how far and which way.\n")
    return feature


def neighbour_mean_cloud_fraction(fields, radius):
    """Mean total cloud fraction over the window reaching ``radius`` [m] beyond the column [1]."""
    return _memo(fields, ("nm_cf", radius), lambda: neighbourhood_mean(
        cloud_fraction(fields), radius, _scalar(fields, "dx"), _scalar(fields, "dy")))


def neighbour_contrast_cloud_fraction(fields, radius):
    """Column cloud fraction minus its neighbourhood mean at ``radius`` [m] [1]."""
    return cloud_fraction(fields) - neighbour_mean_cloud_fraction(fields, radius)


def neighbour_mean_log_optical_depth(fields, radius):
    """Neighbourhood mean of ``ln(1 + tau)`` over the window reaching ``radius`` [m] [1]."""
    return _memo(fields, ("nm_lt", radius), lambda: neighbourhood_mean(
        _log_tau(fields), radius, _scalar(fields, "dx"), _scalar(fields, "dy")))


def neighbour_contrast_log_optical_depth(fields, radius):
    """Column ``ln(1 + tau)`` minus its neighbourhood mean at ``radius`` [m] [1]."""
    return _log_tau(fields) - neighbour_mean_log_optical_depth(fields, radius)


def cloud_edge_distance(fields, edge_cloud_fraction=0.5, edge_distance_cap=10000.0):
    """Signed distance [m] to the nearest host-grid cloud edge: positive in cloud, negative in clear sky.

    A host column is cloudy when its total cloud fraction is at least
    ``edge_cloud_fraction``; the edge runs along the faces between cloudy and clear
    columns.  The distance is ``D - min(dx, dy) / 2``, with ``D`` the periodic distance
    between the column centre and the nearest centre of the other kind (exact for
    distances along the grid axes), capped at ``edge_distance_cap`` [m].
    """
    dx, dy = _scalar(fields, "dx"), _scalar(fields, "dy")
    half = 0.5 * min(dx, dy)
    cloudy = cloud_fraction(fields) >= edge_cloud_fraction
    reach = edge_distance_cap + half
    inside = np.minimum(_distance_to(~cloudy, dx, dy, reach) - half, edge_distance_cap)
    outside = np.minimum(_distance_to(cloudy, dx, dy, reach) - half, edge_distance_cap)
    return np.where(cloudy, inside, -outside)


def _log_tau_gradient(fields):
    def compute():
        lt = _log_tau(fields)
        gx = (_periodic_shift(lt, 0, -1) - _periodic_shift(lt, 0, 1)) / (2.0 * _scalar(fields, "dx"))
        gy = (_periodic_shift(lt, -1, 0) - _periodic_shift(lt, 1, 0)) / (2.0 * _scalar(fields, "dy"))
        return gx, gy
    return _memo(fields, "grad", compute)


def log_optical_depth_gradient_along_beam(fields):
    """Derivative of ``ln(1 + tau)`` in the direction the beam travels [m-1] (centred, periodic).

    Positive where optical depth grows down-sun (the column faces the sunlit side of a
    thicker neighbour), negative where it falls (the column lies behind one).
    """
    gx, gy = _log_tau_gradient(fields)
    phi = math.radians(_scalar(fields, "solar_beam_azimuth"))
    return gx * math.cos(phi) + gy * math.sin(phi)


def log_optical_depth_gradient_across_beam(fields):
    """Magnitude of the derivative of ``ln(1 + tau)`` across the beam direction [m-1].

    Only the magnitude: the two sides across the beam are mirror images, so the sign
    carries no radiative meaning.
    """
    gx, gy = _log_tau_gradient(fields)
    phi = math.radians(_scalar(fields, "solar_beam_azimuth"))
    return np.abs(-gx * math.sin(phi) + gy * math.cos(phi))


def slant_optical_depth(fields):
    """Optical depth along the straight path from the column's surface centre toward the sun [1].

    The path crosses neighbouring columns (periodic); each layer contributes the
    optical depth of the columns it crosses, weighted by the path length inside each,
    divided by ``mu0`` (Beer-Lambert along the slant path).
    """
    def compute():
        weights = path_weights(fields["z_edge"], _scalar(fields, "dx"), _scalar(fields, "dy"),
                               _scalar(fields, "solar_zenith_angle"), _scalar(fields, "solar_beam_azimuth"),
                               reach=_reach(fields))
        return slant_sum(np.asarray(fields["layer_optical_depth"], dtype=np.float64), weights) / _mu0(fields)
    return _memo(fields, "slant", compute)


def slant_minus_vertical_optical_depth(fields):
    """Slant-path optical depth toward the sun minus the column's own ``tau / mu0`` [1]."""
    return slant_optical_depth(fields) - column_optical_depth(fields) / _mu0(fields)


def cloud_top_height_upsun_minus_downsun(fields, cloud_side_distance=2000.0, layer_cloud_fraction_threshold=0.0):
    """Cloud-top height ``cloud_side_distance`` [m] toward the sun minus as far away from it [m].

    Bilinear, periodic sampling of :func:`cloud_top_height`.  Positive: taller cloud on
    the sun's side (the column lies in a cloud's shade); negative: taller cloud down-sun
    (the column faces a sunlit cloud side, or is the sunlit edge of a cloud).
    """
    top = cloud_top_height(fields, layer_cloud_fraction_threshold)
    phi = math.radians(_scalar(fields, "solar_beam_azimuth"))
    sx = -cloud_side_distance * math.cos(phi) / _scalar(fields, "dx")
    sy = -cloud_side_distance * math.sin(phi) / _scalar(fields, "dy")
    return _shift_bilinear(top, sx, sy) - _shift_bilinear(top, -sx, -sy)


def direct_beam_prior(fields):
    """Direct-beam prior: surface direct flux over the incident flux along the slant path toward the sun [1].

    :func:`direct_transmittance_prior` of the path from the column's surface centre
    toward the sun (periodic, through neighbouring columns as for
    :func:`slant_optical_depth`): layer cloud fractions and clear-sky and cloud optical
    depths gathered along the path with the path weights, maximum-random overlap of the
    gathered cloud fractions, the cloud's optical depth gamma-distributed with the
    in-cloud relative variance of the crossed columns (:func:`in_cloud_relative_variance`,
    weighted by the cloud optical depth the path meets in each).
    """
    return _direct_prior(fields, slanted=True)


def direct_beam_prior_minus_independent_column(fields, host_fluxes="monte_carlo"):
    """Direct-beam prior minus the host's independent-column direct flux [1]: a prior direct correction.

    ``host_fluxes`` (a recipe parameter) names the kind of independent-column fluxes the
    host passes; it does not change the computation.
    """
    return direct_beam_prior(fields) - _independent_column(fields, "surface_downward_direct_flux")


def direct_beam_prior_slant_minus_vertical(fields):
    """Direct-beam prior along the slant path minus the same formula along the vertical [1].

    A prior direct correction in the manner of the tilted independent column (tilted
    minus vertical of one method, so that the method's own errors largely cancel).
    """
    return _direct_prior(fields, slanted=True) - _direct_prior(fields, slanted=False)


def _layer_interception(tau, mu0):
    """Share of the incident direct beam that each layer of a column removes, top down [1]:
    ``exp(-tau_above / mu0) * (1 - exp(-tau_k / mu0))`` (Beer-Lambert), layers bottom first."""
    above = np.cumsum(tau[::-1], axis=0)[::-1] - tau
    return np.exp(-above / mu0) * -np.expm1(-tau / mu0)


def _interception(fields, tilted):
    def compute():
        tau = np.asarray(fields["layer_optical_depth"], dtype=np.float64)
        mu0 = _mu0(fields)
        if not tilted:
            return _layer_interception(tau, mu0).sum(axis=0)
        weights = _area_weights(fields)
        path_tau = gather_layers(tau, weights)
        # A tilted layer's share goes to the cells it crosses in proportion to the optical
        # depth the path meets in each (w tau), not to the path length alone: a path
        # grazing a cloud and clear air loses the beam in the cloud.
        per_tau = np.divide(_layer_interception(path_tau, mu0), path_tau, out=np.zeros_like(path_tau),
                            where=path_tau > 0.0)
        return (scatter_layers(per_tau, weights) * tau).sum(axis=0)
    return _memo(fields, ("interception", tilted), compute)


def direct_beam_interception_tilted(fields):
    """Share of the incident direct beam removed inside the column's own layers, from tilted columns [1].

    The tilted independent column at host resolution: along the path toward the sun
    through each column's surface centre the layers' optical depths are gathered
    (:func:`~surrogate3d.pairs.slant_path.gather_layers`), each tilted layer removes
    ``exp(-tau_above / mu0) (1 - exp(-tau_k / mu0))`` of the beam, and that share is
    returned to the host cells the path crosses in proportion to the optical depth it
    meets in each (through the adjoint
    :func:`~surrogate3d.pairs.slant_path.scatter_layers`, which keeps the domain sum) and
    summed over the column's layers.  The beam a column removes is the light it scatters
    and absorbs: a sunlit cloud side removes more than its vertical column says (up to
    ``1 + h tan(theta0) / dx`` for a column of height ``h``: its top and its side), a
    shaded column less.

    References
    ----------
    Varnai, T., and R. Davies, 1999: Effects of cloud heterogeneities on shortwave
    radiation: comparison of cloud-top variability and internal heterogeneity. J. Atmos.
    Sci., 56, 4206-4224 (the tilted independent pixel approximation).
    """
    return _interception(fields, tilted=True)


def direct_beam_interception_tilted_minus_vertical(fields):
    """:func:`direct_beam_interception_tilted` minus the same share along the vertical [1]."""
    return _interception(fields, tilted=True) - _interception(fields, tilted=False)


def direct_beam_interception_relative_change(fields):
    """Tilted minus vertical interception over the vertical one (at least 0.01) [1]: the
    relative change of the light a column scatters and absorbs, as the absorption changes."""
    vertical = _interception(fields, tilted=False)
    return (_interception(fields, tilted=True) - vertical) / np.maximum(vertical, 0.01)


class Feature:
    """A registered feature: its function, unit, the host fields and recipe parameters it uses.

    Attributes
    ----------
    name : str
    function : callable
        ``function(fields, **parameters) -> ndarray (ny, nx)``.
    units : str
    keys : tuple of str
        Host-field keys it reads (besides the scalars ``dx``, ``dy`` and sun angles).
    parameters : tuple of str
        Recipe parameters passed to it as keyword arguments.
    per_radius : bool
        Whether it is computed once per radius of the recipe's ``neighbour_radii``.
    """

    def __init__(self, function, units, keys, parameters=(), per_radius=False):
        self.name = function.__name__
        self.function, self.units, self.keys = function, units, tuple(keys)
        self.parameters, self.per_radius = tuple(parameters), per_radius

    @property
    def description(self):
        """First line of the function's docstring."""
        return (self.function.__doc__ or "").strip().splitlines()[0]


_LAYERS = ("layer_cloud_fraction", "z_edge")
_TAU = ("layer_optical_depth",)
_THRESHOLD = ("layer_cloud_fraction_threshold",)
_HOST_FLUXES = ("host_fluxes",)
_PRIOR = ("layer_cloud_fraction", "layer_optical_depth", "layer_clear_sky_optical_depth", "z_edge",
          "total_cloud_fraction", "column_optical_depth_std", "cloud_edge_length")
_ICA_DIRECT = ("independent_column_surface_downward_direct_flux",)

#: The feature registry, in the default order.
FEATURES = {f.name: f for f in [
    Feature(cos_solar_zenith, "1", ()),
    Feature(surface_albedo, "1", ("surface_albedo",)),
    Feature(log_column_optical_depth, "1", _TAU),
    Feature(cloud_fraction, "1", ("total_cloud_fraction",)),
    Feature(column_optical_depth_relative_std, "1", ("column_optical_depth_mean", "column_optical_depth_std")),
    Feature(cloud_top_height, "m", _LAYERS, _THRESHOLD),
    Feature(cloud_base_height, "m", _LAYERS, _THRESHOLD),
    Feature(cloud_top_shadow_length, "m", _LAYERS, _THRESHOLD),
    Feature(cloud_edge_length, "m-1", ("cloud_edge_length",)),
    *[Feature(_independent_column_feature(flux), "1",
              ((f"independent_column_{flux}",) if flux != "surface_downward_flux" else
               ("independent_column_surface_downward_direct_flux", "independent_column_surface_downward_diffuse_flux")),
              _HOST_FLUXES)
      for flux in INDEPENDENT_COLUMN_FLUXES],
    Feature(neighbour_mean_cloud_fraction, "1", ("total_cloud_fraction",), per_radius=True),
    Feature(neighbour_contrast_cloud_fraction, "1", ("total_cloud_fraction",), per_radius=True),
    Feature(neighbour_mean_log_optical_depth, "1", _TAU, per_radius=True),
    Feature(neighbour_contrast_log_optical_depth, "1", _TAU, per_radius=True),
    Feature(cloud_edge_distance, "m", ("total_cloud_fraction",), ("edge_cloud_fraction", "edge_distance_cap")),
    Feature(log_optical_depth_gradient_along_beam, "m-1", _TAU),
    Feature(log_optical_depth_gradient_across_beam, "m-1", _TAU),
    Feature(slant_optical_depth, "1", _TAU + ("z_edge",)),
    Feature(slant_minus_vertical_optical_depth, "1", _TAU + ("z_edge",)),
    Feature(cloud_top_height_upsun_minus_downsun, "m", _LAYERS, ("cloud_side_distance",) + _THRESHOLD),
    *[Feature(_neighbour_excess_feature(flux), "1", (f"independent_column_{flux}",), _HOST_FLUXES, per_radius=True)
      for flux in NEIGHBOUR_EXCESS_FLUXES],
    # Physical priors (not in the default recipe: docs/features.md).
    Feature(direct_beam_prior, "1", _PRIOR),
    Feature(direct_beam_prior_minus_independent_column, "1", _PRIOR + _ICA_DIRECT, _HOST_FLUXES),
    Feature(direct_beam_prior_slant_minus_vertical, "1", _PRIOR),
    Feature(direct_beam_interception_tilted, "1", _TAU + ("z_edge",)),
    Feature(direct_beam_interception_tilted_minus_vertical, "1", _TAU + ("z_edge",)),
    Feature(direct_beam_interception_relative_change, "1", _TAU + ("z_edge",)),
]}

#: Features of the default recipe: the registry up to the neighbourhood excesses and physical priors.
DEFAULT_FEATURES = tuple(list(FEATURES)[:list(FEATURES).index(
    f"neighbour_excess_independent_column_{NEIGHBOUR_EXCESS_FLUXES[0]}")])


def column_name(feature, radius=None):
    """Name of one feature column: the feature name, suffixed with the radius for per-radius features."""
    return feature if radius is None else f"{feature}_{float(radius):g}m"


def validate_host_fields(fields, keys=None):
    """Check host fields for shape, finiteness and range; raise ValidationError naming the key.

    Parameters
    ----------
    fields : dict
        Host fields (see the module docstring).
    keys : iterable of str, optional
        Keys that must be present besides the scalars; default: those present.

    Returns
    -------
    tuple of int
        ``(ny, nx)`` of the host grid.
    """
    if not isinstance(fields, dict):
        raise ValidationError(f"host_fields must be a dict of numpy arrays; got {type(fields).__name__}")
    keys = set(keys or ()) | set(_SCALARS)
    missing = sorted(k for k in keys if k not in fields)
    if missing:
        raise ValidationError("host_fields is missing " + ", ".join(repr(k) for k in missing))
    for key in _SCALARS:
        value = np.asarray(fields[key], dtype=np.float64)
        if value.ndim != 0 or not np.isfinite(value):
            raise ValidationError(f"host_fields[{key!r}] must be a finite scalar; got {fields[key]!r}")
    for key in ("dx", "dy"):
        check_number(f"host_fields[{key!r}]", fields[key], 0.0, None, low_open=True, error=ValidationError)
    check_solar_zenith_angle(fields["solar_zenith_angle"], "host_fields['solar_zenith_angle']", ValidationError)
    if "slant_path_reach" in fields:
        check_number("host_fields['slant_path_reach']", fields["slant_path_reach"], 0.0, None, error=ValidationError)
    shape2d = None
    for key in sorted(k for k in fields if _is_plane_key(k)):
        value = np.asarray(fields[key])
        if value.ndim != 2:
            raise ValidationError(f"host_fields[{key!r}] must have dimensions (ny, nx); got shape {value.shape}")
        if shape2d is None:
            shape2d = value.shape
        elif value.shape != shape2d:
            raise ValidationError(f"host_fields[{key!r}] has shape {value.shape}; other fields have {shape2d}")
    layered = [k for k in _LAYER_KEYS if k in fields]
    if layered or "z_edge" in keys:
        if "z_edge" not in fields:
            raise ValidationError("host_fields is missing 'z_edge' (layer edge heights in m)")
        z_edge = np.asarray(fields["z_edge"], dtype=np.float64)
        if z_edge.ndim != 1 or z_edge.size < 2 or not np.all(np.isfinite(z_edge)) or np.any(np.diff(z_edge) <= 0):
            raise ValidationError(f"host_fields['z_edge'] must be strictly increasing layer edge heights [m]; "
                                  f"got {z_edge!r}")
        for key in layered:
            value = np.asarray(fields[key])
            expected = (z_edge.size - 1,) + (shape2d or value.shape[1:])
            if value.shape != expected:
                raise ValidationError(f"host_fields[{key!r}] has shape {value.shape}; expected {expected} "
                                      f"(nz, ny, nx) for {z_edge.size - 1} layers")
            if shape2d is None:
                shape2d = value.shape[1:]
    if shape2d is None or min(shape2d) < 1:
        raise ValidationError("host_fields holds no (ny, nx) field to fix the host grid size")
    for key in sorted(k for k in fields if _is_plane_key(k) or k in _LAYER_KEYS):
        value = np.asarray(fields[key], dtype=np.float64)
        low, high = _ALLOWED_RANGE.get(key, (-np.inf, np.inf))
        # Two reductions settle the common case: the minimum and maximum are NaN if any
        # value is, and within [low, high] (finite) only if every value is.
        lowest, highest = _min_max(value) if value.size else (low, high)
        if np.isfinite(lowest) and np.isfinite(highest) and lowest >= low and highest <= high:
            continue
        check_array(f"host_fields[{key!r}]", value, None if np.isinf(low) else low, None if np.isinf(high) else high,
                    error=ValidationError)
    return tuple(int(n) for n in shape2d)


def _min_max(value):
    """Minimum and maximum (NaN if any value is NaN), reading each cache-sized chunk once."""
    flat = value.reshape(-1)
    chunk = 8 * CELL_BLOCK
    parts = [(part.min(), part.max()) for part in (flat[i:i + chunk] for i in range(0, flat.size, chunk))]
    lows, highs = zip(*parts)
    return np.min(lows), np.max(highs)


def compute_features(host_fields, recipe):
    """Feature matrix of a host grid.

    Parameters
    ----------
    host_fields : dict of ndarray
        Host-model fields (see the module docstring); the grid is periodic.
    recipe : surrogate3d.pairs.recipe.FeatureRecipe
        Ordered features and their parameters (:func:`~surrogate3d.pairs.recipe.default_recipe` for
        the default ones).

    Returns
    -------
    ndarray, shape (ny * nx, n_columns)
        One row per host column in row-major ``(iy, ix)`` order; columns as
        ``recipe.column_names()``, units as ``recipe.column_units()``.  Stored
        column-major (Fortran order).

    Raises
    ------
    surrogate3d.errors.ValidationError
        Missing or malformed host fields.

    Examples
    --------
    >>> import numpy as np
    >>> from surrogate3d.pairs.recipe import FeatureRecipe
    >>> fields = {"layer_optical_depth": np.ones((2, 3, 4)), "z_edge": [0.0, 500.0, 1000.0],
    ...           "dx": 1000.0, "dy": 1000.0, "solar_zenith_angle": 60.0, "solar_beam_azimuth": 0.0}
    >>> compute_features(fields, FeatureRecipe(["log_column_optical_depth"])).shape
    (12, 1)
    """
    keys = set()
    for name in recipe.features:
        keys.update(FEATURES[name].keys)
    ny, nx = validate_host_fields(host_fields, keys)
    fields = _Fields(host_fields)
    names = recipe.column_names()
    # Column-major storage: each feature is written as one contiguous row, and the
    # transposed view avoids a slow strided copy of the whole matrix.
    out = np.empty((len(names), ny * nx))
    j = 0
    for name in recipe.features:
        feature = FEATURES[name]
        kwargs = {p: recipe.parameters[p] for p in feature.parameters}
        radii = recipe.parameters["neighbour_radii"] if feature.per_radius else [None]
        for radius in radii:
            args = {} if radius is None else {"radius": float(radius)}
            out[j].reshape(ny, nx)[...] = feature.function(fields, **args, **kwargs)
            j += 1
    return out.T
