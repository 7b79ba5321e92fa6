"""Solar Monte Carlo solver for scenes: 3D and independent-column modes of one kernel.

The direct beam is computed deterministically (Beer-Lambert along exact slant paths);
Monte Carlo photons carry only the scattered light.  Both modes share the physics and
the noise model, so "3D minus independent column" isolates the 3D effect.
"""

import math
import time

import numpy as np

from .. import __version__
from ..archive.results import make_run_result
from ..errors import ParameterError
from ..scenes.model import spacing
from ..scenes.validation import validate_scene
from . import _geometry, _transport
from .sun import beam_direction, check_sun

#: Solar constant [W m-2] (Kopp and Lean 2011, Geophys. Res. Lett. 38, L01706).
SOLAR_CONSTANT = 1361.0
#: Batches per parallel wave; fixed so results do not depend on the thread count.
WAVE = 8
DEFAULT_MAJORANT_BLOCK = (8, 8, 4)


def _check_int(name, value, low, high=None):
    try:
        ok = int(value) == value
    except (TypeError, ValueError, OverflowError):
        ok = False
    if not ok or value < low or (high is not None and value > high):
        rng = f"[{low}, {high}]" if high is not None else f">= {low}"
        raise ParameterError(f"{name} must be an integer {rng}; got {value!r}")
    return int(value)


def _check_float(name, value, low, high, low_open=False, high_open=False):
    try:
        v = float(value)
    except (TypeError, ValueError):
        v = math.nan
    lo_ok = v > low if low_open else v >= low
    hi_ok = v < high if high_open else v <= high
    if not (math.isfinite(v) and lo_ok and hi_ok):
        lb = "(" if low_open else "["
        hb = ")" if high_open else "]"
        raise ParameterError(f"{name} must be in {lb}{low}, {high}{hb}; got {value!r}")
    return v


def default_batch_size(photons):
    """Batch size giving at least 32 batches (for the standard errors), 1000 to 50000 photons."""
    return int(min(50_000, max(1_000, math.ceil(photons / 32))))


def majorant_grid(ext, block, z_edge, dx, dy):
    """Blocks of cells for the tracking: a majorant per block and a flag where cells are walked.

    In an optically thin or nearly uniform block (clear air) null-collision tracking against
    the block's largest extinction crosses the block in one step with few null collisions;
    where a block mixes cloud and clear air the photon walks its cells one by one instead.

    Parameters
    ----------
    ext : ndarray (nband, nz, ny, nx)
        Extinction [m-1].
    block : (int, int, int)
        Block size in cells along x, y and z.
    z_edge : ndarray (nz + 1,)
        Layer edges [m].
    dx, dy : float
        Cell size [m].

    Returns
    -------
    kmaj : float64 (nband, ncz, ncy, ncx)
        Largest extinction in each block [m-1].
    exact : bool (nband, ncz, ncy, ncx)
        True where the photon walks the cells of the block.
    czi : int64 (ncz + 1,)
        Fine layer index of each block edge in z.
    z_to_cz : int64 (nz,)
        Block index of every layer.
    """
    bx, by, bz = block
    nb, nz, ny, nx = ext.shape
    ncx, ncy, ncz = -(-nx // bx), -(-ny // by), -(-nz // bz)
    padded = np.zeros((nb, ncz * bz, ncy * by, ncx * bx))
    padded[:, :nz, :ny, :nx] = ext
    blocks = padded.reshape(nb, ncz, bz, ncy, by, ncx, bx)
    kmaj = blocks.max(axis=(2, 4, 6))
    padded[:, nz:], padded[:, :, ny:], padded[:, :, :, nx:] = np.inf, np.inf, np.inf
    kmin = padded.reshape(blocks.shape).min(axis=(2, 4, 6))
    czi = np.minimum(np.arange(ncz + 1) * bz, nz).astype(np.int64)
    height = np.diff(z_edge[czi])[None, :, None, None]
    size = np.sqrt((bx * dx) ** 2 + (by * dy) ** 2 + height**2)
    cell = min(dx, dy, float(np.diff(z_edge).min()))
    # Null-collision tracking costs a memory access per candidate, cell walking one per cell:
    # track against the majorant where candidates are rarer than cells, or mostly real.
    cheap = (kmaj * size <= 0.2) | (kmaj * cell <= 0.5) | (kmin >= 0.75 * kmaj)
    return np.ascontiguousarray(kmaj), np.ascontiguousarray(~cheap), czi, (np.arange(nz) // bz).astype(np.int64)


def direct_beam_column(ext, ssa, alb, z_edge, mu0):
    """Direct beam of every column treated as an infinite plane-parallel atmosphere.

    Returns ``(absorbed, surface, source)`` like :func:`_geometry.direct_beam_3d`, with
    one ray per column (vertical slant paths ``dz / mu0``), Beer-Lambert law.
    """
    nb, nz, ny, nx = ext.shape
    tau = ext * (np.diff(z_edge) / mu0)[None, :, None, None]
    above = np.cumsum(tau[:, ::-1], axis=1)[:, ::-1] - tau  # optical depth above each layer's top
    t_top = np.exp(-above)
    removed = t_top * -np.expm1(-tau)
    surface = np.exp(-tau.sum(axis=1))
    absorbed = (1.0 - ssa) * removed
    source = (ssa * removed).sum(axis=1) + alb * surface
    return absorbed, surface, source.reshape(nb, ny * nx)


def tracking_arrays(ext, ssa, asym, independent_columns):
    """The float32 arrays the kernels trace with.

    Returns ``(kext, ssa_g, column_props)``: for 3D tracing the extinction (nband, nz, ny,
    nx) apart from the (…, 2) single-scattering albedo and asymmetry, so that tracking
    touches little memory; for independent columns (nband, ny, nx, nz, 4) with each
    column's properties contiguous.  Arrays of the other mode are empty placeholders.
    """
    nb = ext.shape[0]
    if independent_columns:
        props = np.zeros(ext.shape + (4,), dtype=np.float32)
        props[..., 0], props[..., 1], props[..., 2] = ext, ssa, asym
        column = np.ascontiguousarray(props.transpose(0, 2, 3, 1, 4))
        return np.zeros((nb, 1, 1, 1), np.float32), np.zeros((nb, 1, 1, 1, 2), np.float32), column
    ssa_g = np.empty(ext.shape + (2,), dtype=np.float32)
    ssa_g[..., 0], ssa_g[..., 1] = ssa, asym
    return np.ascontiguousarray(ext, dtype=np.float32), ssa_g, np.zeros((nb, 1, 1, 1, 4), np.float32)


def _arrays(scene):
    """Optical properties rounded to single precision, the precision the kernels trace with.

    Using the rounded values for the deterministic direct beam too keeps it consistent with
    the photons (a relative change of at most 6e-8).
    """
    def c(name):
        return np.ascontiguousarray(scene[name].values.astype(np.float32), dtype=np.float64)

    return (c("extinction"), c("single_scattering_albedo"), c("asymmetry_parameter"),
            np.ascontiguousarray(scene["surface_albedo"].values, dtype=np.float64))


def solve_monte_carlo(scene, solar_zenith_angle, solar_beam_azimuth=0.0, *, photons=1_000_000, seed=0,
                      independent_columns=False, batch_size=None, rays_per_column=2, threads=None,
                      per_band=False, solar_constant=SOLAR_CONSTANT, majorant_block=DEFAULT_MAJORANT_BLOCK,
                      roulette_weight=0.1, max_scattering_events=100_000, progress=None):
    """Broadband (and per-band) solar fluxes of a scene by Monte Carlo.

    Parameters
    ----------
    scene : xarray.Dataset
        A valid scene (see :func:`surrogate3d.scenes.make_scene`).
    solar_zenith_angle : float
        Solar zenith angle [degree], in [0, 90).
    solar_beam_azimuth : float
        Direction of travel of the direct beam [degree], counterclockwise from +x.
    photons : int
        Photons to trace (rounded up to whole batches), >= 1.
    seed : int
        Random seed, >= 0.  The same seed gives identical results for any ``threads``.
    independent_columns : bool
        Confine every photon to the column where it started (independent column
        approximation); the direct beam then follows vertical slant paths in its column.
    batch_size : int, optional
        Photons per batch (default :func:`default_batch_size`).  Bands are sampled inside
        every batch in proportion to their solar weight times scattered fraction, so the
        batch size does not depend on the number of bands.
    rays_per_column : int
        Direct-beam rays per column and horizontal axis (3D mode), in [1, 16].
    threads : int, optional
        Numba threads (default: numba's setting).
    per_band : bool
        Also return the column fluxes of every band (fractions of the band's incident flux).
    solar_constant : float
        [W m-2], used for W m-2 conversions and heating rates (default 1361, Kopp and Lean 2011).
    majorant_block : (int, int, int)
        Cells per majorant block along x, y, z for null-collision tracking (3D mode).
    roulette_weight : float
        Photon weight, relative to the starting weight, below which Russian roulette replaces
        absorption by weight; in (0, 1].
    max_scattering_events : int
        Safety cap per photon; a photon reaching it is absorbed where it is (counted in the
        metadata as ``scattering_events``).
    progress : callable, optional
        Called with the number of photons finished after every wave of batches.

    Returns
    -------
    xarray.Dataset
        A run result (:func:`surrogate3d.archive.make_run_result`): column fluxes as
        fractions of the incident flux on the horizontal with standard errors from
        batch-to-batch variance (zero for the deterministic direct beam), absorption per
        cell, heating rate when the scene has ``air_pressure``.

    References
    ----------
    Marchuk, G. I. et al., 1980: The Monte Carlo Methods in Atmospheric Optics. Springer.
    Henyey, L. G. and Greenstein, J. L., 1941: Diffuse radiation in the galaxy. Astrophys. J. 93, 70-83.
    Woodcock, E. et al., 1965: Techniques used in the GEM code for Monte Carlo neutronics
    calculations in reactors and other systems of complex geometry. ANL-7050.
    Villefranque, N. et al., 2019: A path-tracing Monte Carlo library for 3-D radiative
    transfer in highly resolved cloudy atmospheres. J. Adv. Model. Earth Syst. 11, 2449-2473.

    Examples
    --------
    >>> import numpy as np
    >>> from surrogate3d.scenes import make_scene
    >>> scene = make_scene(np.full((1, 4, 4, 4), 0.005), 1.0, 0.85, [0, 250, 500, 750, 1000], 100, 100)
    >>> out = solve_monte_carlo(scene, 30.0, photons=20_000, seed=1)   # doctest: +SKIP
    >>> float(out.toa_upward_flux.mean())                               # doctest: +SKIP
    """
    validate_scene(scene)
    zenith, azimuth = check_sun(solar_zenith_angle, solar_beam_azimuth)
    photons = _check_int("photons", photons, 1)
    seed = _check_int("seed", seed, 0, 2**63 - 1)
    batch_size = default_batch_size(photons) if batch_size is None else _check_int("batch_size", batch_size, 1)
    nsub = _check_int("rays_per_column", rays_per_column, 1, 16)
    roulette = _check_float("roulette_weight", roulette_weight, 0.0, 1.0, low_open=True)
    max_events = _check_int("max_scattering_events", max_scattering_events, 1)
    solar_constant = _check_float("solar_constant", solar_constant, 0.0, math.inf, low_open=True, high_open=True)
    block = tuple(_check_int("majorant_block", b, 1) for b in majorant_block)
    if len(block) != 3:
        raise ParameterError(f"majorant_block must have three sizes (x, y, z); got {majorant_block!r}")

    started = time.perf_counter()
    ext, ssa, asym, alb = _arrays(scene)
    weights = np.ascontiguousarray(scene["solar_weight"].values, dtype=np.float64)
    z_edge = np.ascontiguousarray(scene["z_edge"].values, dtype=np.float64)
    dx, dy = spacing(scene)
    nb, nz, ny, nx = ext.shape
    ux, uy, uz = beam_direction(zenith, azimuth)
    mu0 = -uz

    kext, ssa_g, column_props = tracking_arrays(ext, ssa, asym, independent_columns)
    if independent_columns:
        absorbed, surface, source = direct_beam_column(ext, ssa, alb, z_edge, mu0)
        nsub_used = 1
        kmaj, exact = np.zeros((nb, 1, 1, 1)), np.zeros((nb, 1, 1, 1), dtype=bool)
        czi, z_to_cz, bx, by = np.zeros(2, np.int64), np.zeros(nz, np.int64), 1, 1
        ray_cum = ray_trans = np.zeros((nb, 1, 1))
    else:
        kmaj, exact, czi, z_to_cz = majorant_grid(ext, block, z_edge, dx, dy)
        bx, by = block[0], block[1]
        absorbed, surface, source, ray_cum, ray_trans = _geometry.direct_beam_3d(
            ext, ssa, alb, z_edge, dx, dy, ux, uy, uz, nsub, czi)
        nsub_used = nsub
    nrays = source.shape[1]
    safe_w = np.where(weights > 0, weights, 1.0)
    cdf = np.cumsum((source * weights[:, None]).reshape(-1))

    n_batches = max(2, -(-photons // batch_size))
    col_sum = np.zeros((nb, _transport.N_TALLIES, ny, nx))
    col_sumsq = np.zeros((_transport.N_TALLIES, ny, nx))
    band_sumsq = np.zeros_like(col_sum)
    cell_sum = np.zeros((nz, ny, nx))
    events = 0
    if cdf.size and cdf[-1] > 0.0:
        import numba

        old_threads = numba.get_num_threads()
        if threads is not None:
            numba.set_num_threads(_check_int("threads", threads, 1, numba.config.NUMBA_NUM_THREADS))
        try:
            chunk = WAVE * max(1, 200_000 // (WAVE * batch_size))
            for first in range(0, n_batches, chunk):
                n = min(chunk, n_batches - first)
                events += _transport.run_batches(
                    first, n, WAVE, not independent_columns, seed, batch_size, cdf, safe_w, nrays,
                    kext, ssa_g, column_props, alb, z_edge, dx, dy, ux, uy, uz, nsub_used, kmaj, exact, czi,
                    bx, by, z_to_cz, ray_cum, ray_trans, roulette, max_events, col_sum, col_sumsq, band_sumsq,
                    cell_sum)
                if progress is not None:
                    progress((first + n) * batch_size)
        finally:
            numba.set_num_threads(old_threads)

    mc_mean = col_sum / n_batches
    var = np.maximum(col_sumsq - col_sum.sum(axis=0) ** 2 / n_batches, 0.0) / (n_batches - 1)
    mc_se = np.sqrt(var / n_batches)
    # Deterministic direct-beam parts, broadband = solar-weighted sum over bands.
    w4 = weights[:, None, None]
    det_abs_col = absorbed.sum(axis=1)
    fluxes = {
        "toa_upward_flux": mc_mean[:, 0].sum(axis=0),
        "surface_downward_direct_flux": (w4 * surface).sum(axis=0),
        "surface_downward_diffuse_flux": mc_mean[:, 1].sum(axis=0),
        "surface_upward_flux": (w4 * alb * surface).sum(axis=0) + mc_mean[:, 2].sum(axis=0),
        "atmosphere_absorption": (w4 * det_abs_col).sum(axis=0) + mc_mean[:, 3].sum(axis=0),
    }
    errors = {
        "toa_upward_flux": mc_se[0],
        "surface_downward_direct_flux": np.zeros((ny, nx)),
        "surface_downward_diffuse_flux": mc_se[1],
        "surface_upward_flux": mc_se[2],
        "atmosphere_absorption": mc_se[3],
    }
    cell = (weights[:, None, None, None] * absorbed).sum(axis=0) + cell_sum / n_batches
    band_fluxes = None
    if per_band:
        inv = 1.0 / safe_w[:, None, None]
        band_fluxes = {
            "toa_upward_flux": mc_mean[:, 0] * inv,
            "surface_downward_direct_flux": surface.copy(),
            "surface_downward_diffuse_flux": mc_mean[:, 1] * inv,
            "surface_upward_flux": alb * surface + mc_mean[:, 2] * inv,
            "atmosphere_absorption": det_abs_col + mc_mean[:, 3] * inv,
        }
    heating = None
    if "air_pressure" in scene:
        from .heating import heating_rate

        heating = heating_rate(cell, solar_constant * mu0, scene["air_pressure"].values)
    surface_absorbed = (w4 * (1.0 - alb) * surface).sum(axis=0) + mc_mean[:, 4].sum(axis=0)
    result = make_run_result(
        fluxes, errors, cell, solver="independent_column" if independent_columns else "full_3d",
        solar_zenith_angle=zenith, solar_beam_azimuth=azimuth,
        metadata={"photons": n_batches * batch_size, "seed": seed, "scattering_events": events,
                  "wall_time": time.perf_counter() - started, "solar_constant": solar_constant,
                  "package_version": __version__},
        per_band=band_fluxes, heating_rate=heating, band=list(scene["band"].values))
    result.attrs["surface_absorption_domain_mean"] = float(surface_absorbed.mean())
    result.attrs["batches"] = n_batches
    result.attrs["rays_per_column"] = nsub_used
    return result

