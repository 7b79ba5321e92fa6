"""Solar Monte Carlo solver for scenes: 3D and independent-column modes of one kernel.

The direct beam follows Beer-Lambert along exact slant paths (in 3D sampled by every
batch's random rays); Monte Carlo photons carry only the scattered light.  Both modes share the physics and
the noise model, so "3D minus independent column" isolates the 3D effect.
"""

import contextlib
import math
import time

import numba
import numpy as np

from .. import __version__
from ..core.config import (BATCHES, CLEAR_CELL_OPTICAL_THICKNESS, CLEAR_CUBE, DIRECT_BEAM_TILE, MAJORANT_BLOCK,
                           MAX_BATCH_SIZE,
                           MAX_SCATTERING_EVENTS, MIN_BATCH_SIZE, MONTE_CARLO_PHOTONS, MONTE_CARLO_WAVE,
                           PROGRESS_PHOTONS, RAY_TABLE_LAYERS, ROULETTE_WEIGHT, SOLAR_CONSTANT)
from ..core.run_result import make_run_result
from ..core.validation import check_integer, check_number
from ..errors import ParameterError
from ..scenes.model import spacing
from ..scenes.validation import validate_scene
from . import _geometry, _transport
from ._records import Beam, Grid, Optics, Run, RunSums
from .sun import beam_direction, check_sun

#: Largest clear-cube radius: a block code (radius + 1) takes four bits.
MAX_CLEAR_CUBE = 14


#: Declared ranges of the integer options of :func:`solve_monte_carlo`: name -> (low, high).
_INTEGER_OPTIONS = {"photons": (1, None), "seed": (0, 2**63 - 1), "batch_size": (1, None), "batches": (2, None),
                    "rays_per_column": (1, 16),
                    "threads": (1, numba.config.NUMBA_NUM_THREADS), "max_scattering_events": (1, None),
                    "majorant_block": (1, 64), "clear_cube": (0, MAX_CLEAR_CUBE)}
#: Declared ranges of its real options: name -> (low, high, low_open).
_REAL_OPTIONS = {"roulette_weight": (0.0, 1.0, True), "solar_constant": (0.0, None, True)}
#: Options whose None stands for a default chosen later.
_DEFAULTED = ("batch_size", "batches", "threads")


def check_monte_carlo_options(**options):
    """Options of :func:`solve_monte_carlo` checked against their declared ranges, before any work.

    Parameters
    ----------
    **options
        Any of ``photons``, ``seed``, ``batch_size``, ``batches``, ``rays_per_column``,
        ``threads``, ``max_scattering_events``, ``majorant_block``, ``clear_cube``,
        ``roulette_weight`` and ``solar_constant``; ``batch_size``, ``batches`` and ``threads``
        may be None (their defaults).  ``batch_size`` and ``batches`` exclude each other.

    Returns
    -------
    dict
        The options as int or float.

    Raises
    ------
    surrogate3d.errors.ParameterError
        An option is outside its range (named as the parameter) or not one of these.

    Examples
    --------
    >>> check_monte_carlo_options(photons=2000, rays_per_column=17)
    Traceback (most recent call last):
    ...
    surrogate3d.errors.ParameterError: rays_per_column must be an integer in [1, 16]; got 17
    """
    if options.get("batch_size") is not None and options.get("batches") is not None:
        raise ParameterError(f"give batch_size or batches, not both; got batch_size={options['batch_size']!r} and "
                             f"batches={options['batches']!r}")
    checked = {}
    for name, value in options.items():
        if value is None and name in _DEFAULTED:
            checked[name] = None
        elif name in _INTEGER_OPTIONS:
            checked[name] = check_integer(name, value, *_INTEGER_OPTIONS[name])
        elif name in _REAL_OPTIONS:
            low, high, low_open = _REAL_OPTIONS[name]
            checked[name] = check_number(name, value, low, high, low_open=low_open)
        else:
            raise ParameterError(f"{name} is not an option of solve_monte_carlo; known: "
                                 f"{sorted({**_INTEGER_OPTIONS, **_REAL_OPTIONS})}")
    return checked


@contextlib.contextmanager
def _numba_threads(threads):
    """Run the kernels on ``threads`` numba threads (None: numba's setting), then restore it."""
    old = numba.get_num_threads()
    if threads is not None:
        numba.set_num_threads(threads)
    try:
        yield
    finally:
        numba.set_num_threads(old)


def default_batch_size(photons, batches=None):
    """Photons per batch.

    With ``batches``, the size that splits ``photons`` into at most that many batches (the
    standard errors are then precise to about ``1 / sqrt(2 (batches - 1))``).  Without, a
    size giving at least :data:`~surrogate3d.core.config.BATCHES` batches, from
    :data:`~surrogate3d.core.config.MIN_BATCH_SIZE` to
    :data:`~surrogate3d.core.config.MAX_BATCH_SIZE` photons.
    """
    if batches is not None:
        return max(1, math.ceil(photons / batches))
    return int(min(MAX_BATCH_SIZE, max(MIN_BATCH_SIZE, math.ceil(photons / BATCHES))))


#: Result field -> the column sum of :data:`_transport.SUM_NAMES` it is the batch mean of.
_RESULT_TALLIES = {
    "toa_upward_flux": "toa_upward",
    "surface_downward_direct_flux": "surface_downward_direct",
    "surface_downward_diffuse_flux": "surface_downward_diffuse",
    "surface_upward_flux": "surface_upward",
    "atmosphere_absorption": "atmosphere_absorbed",
    "surface_absorption": "surface_absorbed",
}


def cube_radius(clear, max_radius):
    """Radius of the all-clear cube around every cell of a boolean grid.

    ``radius[b, k, j, i] = r`` says that every cell within ``r`` cells of (k, j, i) in each
    index direction (periodic in the last two axes, cut at the first axis' ends) is clear.

    Parameters
    ----------
    clear : bool ndarray (nband, nz, ny, nx)
    max_radius : int
        Largest radius, at least 0; capped so that a cube fits in the grid.

    Returns
    -------
    uint8 ndarray like ``clear``
    """
    ny, nx = clear.shape[2], clear.shape[3]
    radius = np.zeros(clear.shape, dtype=np.uint8)
    grown = ~clear
    for r in range(1, int(min(max_radius, (min(nx, ny) - 1) // 2, 254)) + 1):
        near = grown | np.roll(grown, 1, axis=3) | np.roll(grown, -1, axis=3)
        near = near | np.roll(near, 1, axis=2) | np.roll(near, -1, axis=2)
        up, down = np.zeros_like(near), np.zeros_like(near)
        up[:, 1:], down[:, :-1] = near[:, :-1], near[:, 1:]
        grown = near | up | down
        radius[~grown] = r
    return radius


def _largest_divisor(n, at_most):
    return max(d for d in range(1, max(1, at_most) + 1) if n % d == 0)


def majorant_blocks(kext, z_edge, dx, dy, block, max_radius):
    """The grid of majorant blocks the 3D photons are tracked on.

    Blocks are ``bx x by`` columns (the largest divisors of nx and ny not above
    ``block``) by ``block`` layers (the top block may be thinner).  A cell is clear air
    where its optical thickness across its smallest size is at most
    :data:`~surrogate3d.core.config.CLEAR_CELL_OPTICAL_THICKNESS`, and a block is clear where all its cells are.

    Parameters
    ----------
    kext : float32 ndarray (nband, nz, ny, nx)
        Extinction [m-1].
    z_edge : ndarray (nz + 1,)
        Layer edges [m].
    dx, dy : float
        Cell size [m].
    block : int
        Cells per block side, >= 1.
    max_radius : int
        Largest radius (blocks) of the clear cubes crossed in one step, >= 0.

    Returns
    -------
    kmaj : float32 (nband, nbz, nby, nbx)
        Largest extinction in every block [m-1]; ``kext`` itself for blocks of one cell.
    bskip : uint8 (nband, nbz, nby, nbx)
        Radius of the cube of clear blocks around every block (:func:`cube_radius`).
    kclear : float64 (nband,)
        Largest extinction of the clear cells [m-1].
    bx, by : int
        Columns per block along x and y.
    bedge : int64 (nbz + 1,)
        Layer index of every block's bottom edge, then ``nz``.
    clear_below, clear_above : int64 (nband,)
        Block rows below ``clear_below`` and from ``clear_above`` up are clear in every
        column (the clear slabs under the lowest and over the highest cloud).
    """
    nb, nz, ny, nx = kext.shape
    bx, by = _largest_divisor(nx, block), _largest_divisor(ny, block)
    bedge = np.minimum(np.arange(-(-nz // block) + 1) * block, nz).astype(np.int64)
    nbz = bedge.size - 1
    size = np.minimum(np.minimum(dx, dy), np.diff(z_edge))[None, :, None, None]
    clear = kext * size <= CLEAR_CELL_OPTICAL_THICKNESS
    kclear = np.array([kext[b][clear[b]].max() if clear[b].any() else 0.0 for b in range(nb)], dtype=np.float64)
    pad = ((0, 0), (0, nbz * block - nz), (0, 0), (0, 0))
    shape = (nb, nbz, block, ny // by, by, nx // bx, bx)
    if block == 1:
        kmaj = kext  # the same array: a cell walk then reads one extinction per step
    else:
        kmaj = np.pad(kext, pad).reshape(shape).max(axis=(2, 4, 6)).astype(np.float32)
    bclear = np.pad(clear, pad, constant_values=True).reshape(shape).all(axis=(2, 4, 6))
    row_clear = bclear.all(axis=(2, 3))
    clear_below = np.array([np.argmin(np.append(rows, False)) for rows in row_clear], dtype=np.int64)
    clear_above = np.array([nbz - np.argmin(np.append(rows[::-1], False)) for rows in row_clear], dtype=np.int64)
    return kmaj, cube_radius(bclear, max_radius), kclear, bx, by, bedge, clear_below, clear_above


def _majorant_grid(kmaj, bskip, kclear, bx, by, bedge, clear_below, clear_above, z_edge, dx, dy):
    """The :class:`~surrogate3d.solvers._records.Grid` of the cells and the blocks of :func:`majorant_blocks`.

    The kernel reads first a four-bit block code: 0 for a block tracked at its majorant, 1
    for a block tracked at the clear-air rate ``kclear`` (no majorant read), ``r + 1`` for
    the centre of a clear cube of radius ``r`` (at most :data:`MAX_CLEAR_CUBE`).  Two codes
    share a byte (blocks ``2i`` in the low half, ``2i + 1`` in the high half of byte ``i``
    along x), so the codes take an eighth of the memory of the majorants and stay in the
    cache, which spares the walk a majorant read wherever it crosses clear air.
    """
    clear_rate = kmaj <= kclear[:, None, None, None]
    code = np.where(clear_rate, np.minimum(bskip.astype(np.int64), MAX_CLEAR_CUBE) + 1, 0).astype(np.uint8)
    # Two codes per byte, the even block in the low half: half the cache the codes take.
    if code.shape[3] % 2:
        code = np.concatenate([code, np.zeros(code.shape[:3] + (1,), np.uint8)], axis=3)
    packed = np.ascontiguousarray(code[..., 0::2] | (code[..., 1::2] << 4))
    return Grid(z_edge, float(dx), float(dy), int(bx), int(by), bedge, np.ascontiguousarray(z_edge[bedge]), kmaj,
                packed, kclear, clear_below, clear_above)


def _ray_table_edges(nz, layers):
    """Layer-edge indices every ``layers`` layers (where the per-ray source tables are kept)."""
    return np.minimum(np.arange(-(-nz // layers) + 1) * layers, nz).astype(np.int64)


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

    Returns ``(kext, ssa_g, column_props)``.  For 3D tracing each cell's extinction,
    single-scattering albedo and asymmetry sit side by side in one (nband, nz, ny, nx, 3)
    array, of which ``kext`` (nband, nz, ny, nx) and ``ssa_g`` (..., 2) are views: a
    collision finds its cell's albedo and asymmetry in the cache line the walk has just
    read (12-byte records, unpadded: the walk's speed follows the bytes it keeps in the
    cache more than the few records that straddle two lines).  For independent columns
    ``column_props`` is (nband, ny, nx, nz, 3) with each column's properties contiguous.
    Arrays of the other mode are empty placeholders.
    """
    nb = ext.shape[0]
    if independent_columns:
        props = np.zeros(ext.shape + (3,), dtype=np.float32)
        props[..., 0], props[..., 1], props[..., 2] = ext, ssa, asym
        column = np.ascontiguousarray(props.transpose(0, 2, 3, 1, 4))
        return np.zeros((nb, 1, 1, 1), np.float32), np.zeros((nb, 1, 1, 1, 2), np.float32), column
    optics = np.zeros(ext.shape + (3,), dtype=np.float32)
    optics[..., 0], optics[..., 1], optics[..., 2] = ext, ssa, asym
    return optics[..., 0], optics[..., 1:3], np.zeros((nb, 1, 1, 1, 3), np.float32)


def _arrays(scene):
    """Optical properties rounded to single precision, the precision the kernels trace with.

    The direct beam uses the same rounded values as the photons (a relative change of at
    most 6e-8).  Extinction and single-scattering albedo come back in double precision
    (for the exact independent-column direct beam), the asymmetry in single precision.
    """
    def c(name):
        return np.ascontiguousarray(scene[name].values.astype(np.float32), dtype=np.float64)

    return (c("extinction"), c("single_scattering_albedo"),
            np.ascontiguousarray(scene["asymmetry_parameter"].values, dtype=np.float32),
            np.ascontiguousarray(scene["surface_albedo"].values, dtype=np.float64))


def solve_monte_carlo(scene, solar_zenith_angle, solar_beam_azimuth=0.0, *, photons=MONTE_CARLO_PHOTONS, seed=0,
                      independent_columns=False, batch_size=None, batches=None, rays_per_column=1, threads=None,
                      per_band=False, solar_constant=SOLAR_CONSTANT, majorant_block=MAJORANT_BLOCK,
                      clear_cube=CLEAR_CUBE,
                      roulette_weight=ROULETTE_WEIGHT, max_scattering_events=MAX_SCATTERING_EVENTS, progress=None):
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
    batches : int, optional
        Instead of ``batch_size``: at most this many batches (>= 2) of
        ``ceil(photons / batches)`` photons each (whole batches: 1 000 photons and 300
        batches give 250).  Standard errors from ``n`` batches are themselves uncertain by
        about ``1 / sqrt(2 (n - 1))``: 13 % for 32, 5 % for 200.  Every batch traces its own
        direct beam, so many batches cost more: on the shared benchmark scene (128 x 128 x 40
        cells) 6-9 CPU ms per batch, 1.29 times the CPU of the default 50 batches at 2.5
        million photons for 200 (``docs/methods/monte-carlo.md``, "Tallies and their errors").
    rays_per_column : int
        Strata per column and horizontal axis of the direct beam every batch traces (3D
        mode), in [1, 16]: each stratum gets a ray at a uniformly random point of it and
        one at the mirror image of that point through its centre (antithetic pair).  The
        pair of the default keeps the direct beam's noise at a tenth of the photons' in
        800 m host-column means of the shared benchmark scene (``docs/methods/monte-carlo.md``).
    threads : int, optional
        Numba threads (default: numba's setting).
    per_band : bool
        Also return the column fluxes of every band (fractions of the band's incident flux).
    solar_constant : float
        [W m-2], used for W m-2 conversions and heating rates (default 1361, Kopp and Lean 2011).
    majorant_block : int
        Cells per side of the majorant blocks of delta tracking (3D mode), in [1, 64];
        1 tracks against every cell's own extinction.  Only the cost depends on it.
    clear_cube : int
        Largest radius (blocks) of the cubes of clear-air blocks a photon crosses in one
        step (3D mode), in [0, 14]; 0 crosses every block.  Only the cost depends on it.
    roulette_weight : float
        Photon weight, relative to the starting weight, below which a photon's survival of
        a collision or a surface hit is decided by Russian roulette instead of reducing its
        weight (its expected absorption is tallied either way); in (0, 1].  The default 0.3
        stops tracing photons of small weight after a reflection by a dark surface: on the
        shared benchmark scene it needs about 10 % less CPU time than 0.1 for the same noise
        in the surface fluxes.
    max_scattering_events : int
        Safety cap per photon; a photon reaching it is absorbed where it is (counted in the
        metadata as ``scattering_events``).
    progress : callable, optional
        Called with the number of photons finished after every wave of batches.

    Returns
    -------
    xarray.Dataset
        A run result (:func:`surrogate3d.archive.make_run_result`): column fluxes as
        fractions of the incident flux on the horizontal (the five of
        :data:`surrogate3d.archive.COLUMN_FLUXES` and ``surface_absorption``), their
        standard errors per column and of their domain means, from the spread between
        batches (every batch an independent estimate of everything, the direct beam
        included), absorption per cell, heating rate when the scene has ``air_pressure``.

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
    >>> out = solve_monte_carlo(scene, 30.0, photons=20_000, seed=1)
    >>> round(float(out.toa_upward_flux.mean()), 2)        # standard error 0.003
    0.29
    >>> float(out.surface_downward_direct_flux.mean())     # exp(-5 / cos 30 deg) = 0.0031088...
    0.0031088...
    """
    validate_scene(scene)
    zenith, azimuth = check_sun(solar_zenith_angle, solar_beam_azimuth)
    checked = check_monte_carlo_options(
        photons=photons, seed=seed, batch_size=batch_size, batches=batches, rays_per_column=rays_per_column,
        threads=threads,
        roulette_weight=roulette_weight, max_scattering_events=max_scattering_events, solar_constant=solar_constant,
        majorant_block=majorant_block, clear_cube=clear_cube)
    photons, seed, threads, solar_constant = (checked[k] for k in ("photons", "seed", "threads", "solar_constant"))
    batch_size = default_batch_size(photons, checked["batches"]) if batch_size is None else checked["batch_size"]
    nsub, roulette = checked["rays_per_column"], checked["roulette_weight"]
    max_events, block, clear_cube = checked["max_scattering_events"], checked["majorant_block"], checked["clear_cube"]

    started = time.perf_counter()
    ext, ssa, asym, alb = _arrays(scene)
    weights = np.ascontiguousarray(scene["solar_weight"].values, dtype=np.float64)
    z_edge = np.ascontiguousarray(scene["z_edge"].values, dtype=np.float64)
    dx, dy = spacing(scene)
    nb, nz, ny, nx = ext.shape
    ux, uy, uz = beam_direction(zenith, azimuth)
    mu0 = -uz
    n_batches = max(2, -(-photons // batch_size))
    nsum = len(_transport.SUM_NAMES)

    with _numba_threads(threads):
        kext, ssa_g, column_props = tracking_arrays(ext, ssa, asym, independent_columns)
        del asym
        if independent_columns:
            absorbed, surface, source = direct_beam_column(ext, ssa, alb, z_edge, mu0)
            w3 = weights[:, None, None]
            column_direct = np.ascontiguousarray(np.stack([w3 * surface, w3 * absorbed.sum(axis=1),
                                                           w3 * (1.0 - alb) * surface]))
            cdf = np.cumsum((source * weights[:, None]).reshape(-1))
            grid = _majorant_grid(np.zeros((nb, 1, 1, 1), np.float32), np.zeros((nb, 1, 1, 1), np.uint8), np.zeros(nb),
                                  1, 1, np.array([0, nz]), np.zeros(nb, np.int64), np.zeros(nb, np.int64), z_edge,
                                  dx, dy)
            czi = np.zeros(2, np.int64)
            nsub, reach = 1, (0.0, 0.0)
            slabs = _geometry.uniform_slabs(np.zeros((nb, nz, 1)), np.ones((nb, nz, 1)), z_edge, mu0)  # unused
            segments, tiles = 1, (1, 1)
            sweep = (np.zeros((nb, 1, 1, 1, 1, 1), np.float32), np.zeros(2, np.int64), np.zeros((0, 2), np.int32),
                     np.zeros((0, 2)))
            # Run-level scale: the whole photon weight of all batches maps to 2**61 units.
            energy = cdf[-1] if cdf.size and cdf[-1] > 0.0 else 1.0
        else:
            absorbed = None
            column_direct = np.zeros((3, nb, ny, nx))
            cdf = np.zeros(1)
            grid = _majorant_grid(*majorant_blocks(kext, z_edge, dx, dy, block, clear_cube), z_edge, dx, dy)
            czi = _ray_table_edges(nz, RAY_TABLE_LAYERS)
            path = (z_edge[-1] - z_edge[0]) / mu0
            reach = (path * ux, path * uy)
            slabs = _geometry.uniform_slabs(kext, ssa_g[..., 0], z_edge, mu0)
            segments = _geometry.max_segments(slabs.top - slabs.bottom, z_edge[slabs.top] - z_edge[slabs.bottom], ux,
                                              uy, uz, dx, dy)
            tiles = _geometry.tile_sides(nx, ny, DIRECT_BEAM_TILE)
            sweep = _geometry.sweep_tables(kext, ssa_g[..., 0], slabs.bottom, slabs.top, *tiles)
            # A batch's whole beam, direct and scattered, is at most one column's flux per column.
            energy = float(nx * ny)
        del ext, ssa  # traced from the single-precision copies
        edge_slot = np.full(nz + 1, -1, dtype=np.int64)
        edge_slot[czi[::-1]] = np.arange(czi.size)
        kept = np.ascontiguousarray(np.column_stack([np.arange(czi.size), czi[::-1]]), dtype=np.int64)

        col_sum = np.zeros((nb, ny, nx, nsum))
        spread = np.zeros((3, ny * nx + 1, nsum))
        # Fixed-point cell tallies: the run's whole energy maps to at most 2**61 units, far
        # inside int64 and fine enough (2**-61) that rounding never shows.
        scale = 2.0**61 / (n_batches * energy)
        cell_fixed = np.zeros((numba.get_num_threads(), nz, ny, nx), dtype=np.int64)
        optics = Optics(kext, ssa_g, column_props, alb, weights)
        beam = Beam(ux, uy, uz, nsub, *tiles, segments, *sweep, *reach, edge_slot, kept, czi, cdf, column_direct)
        run = Run(not independent_columns, seed, batch_size, roulette, max_events)
        sums = RunSums(col_sum, spread, cell_fixed, scale)
        chunk = MONTE_CARLO_WAVE * max(1, PROGRESS_PHOTONS // (MONTE_CARLO_WAVE * batch_size))
        events = 0
        for first in range(0, n_batches, chunk):
            n = min(chunk, n_batches - first)
            events += _transport.run_batches(first, n, MONTE_CARLO_WAVE, run, optics, grid, beam, slabs, sums)
            if progress is not None:
                progress((first + n) * batch_size)
        cell = cell_fixed.sum(axis=0) / (scale * n_batches)
        if absorbed is not None:
            cell += (weights[:, None, None, None] * absorbed).sum(axis=0)

    # The batch sums keep a column's tallies side by side, (..., ny, nx, 6); tally first from here.
    mean = np.moveaxis(col_sum, -1, 1) / n_batches
    dev, devsq = spread[0], spread[1]
    var = np.maximum(devsq - dev**2 / n_batches, 0.0) / (n_batches - 1)
    se_all = np.sqrt(var / n_batches)
    se = np.moveaxis(se_all[:-1].reshape(ny, nx, nsum), -1, 0)
    domain_se = se_all[-1]
    order = {name: q for q, name in enumerate(_transport.SUM_NAMES)}
    fields = {flux: order[tally] for flux, tally in _RESULT_TALLIES.items()}
    fluxes = {flux: mean[:, q].sum(axis=0) for flux, q in fields.items()}
    errors = {flux: se[q] for flux, q in fields.items()}
    band_fluxes = None
    if per_band:
        inv = 1.0 / np.where(weights > 0, weights, 1.0)[:, None, None]
        band_fluxes = {flux: mean[:, q] * inv for flux, q in fields.items()}
    heating = None
    if "air_pressure" in scene:
        from .heating import heating_rate

        heating = heating_rate(cell, solar_constant * mu0, scene["air_pressure"].values)
    result = make_run_result(
        fluxes, errors, cell, solver="independent_column" if independent_columns else "full_3d",
        solar_zenith_angle=zenith, solar_beam_azimuth=azimuth,
        metadata={"run_photons": n_batches * batch_size, "run_seed": seed, "run_scattering_events": events,
                  "run_wall_time": time.perf_counter() - started, "run_solar_constant": solar_constant,
                  "run_package_version": __version__, "run_batches": n_batches},
        per_band=band_fluxes, heating_rate=heating, band=list(scene["band"].values),
        domain_standard_errors={flux: domain_se[q] for flux, q in fields.items()})
    result.attrs["rays_per_column"] = nsub
    return result
