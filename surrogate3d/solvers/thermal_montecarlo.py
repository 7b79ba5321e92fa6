"""Thermal (longwave) Monte Carlo for cell grids: 3D and independent-column modes of one kernel.

Sources are the air cells, the surface and (optionally) a black body lighting the top;
photons are drawn over (source, spectral interval) in proportion to the power each sends
out, so one run gives the broadband answer.  Tallies are net exchanges weighted by the balance
heuristic (:mod:`surrogate3d.solvers._thermal_kernel`): no noise where emitter and
absorber have the same Planck radiance, energy conserved to round-off in every run.
``docs/methods/longwave.md`` ("Thermal Monte Carlo") describes the estimator and its checks.
"""

import math
import time
from collections import namedtuple

import numpy as np

from ..core.config import MAX_SCATTERING_EVENTS, MONTE_CARLO_PHOTONS, MONTE_CARLO_WAVE, PROGRESS_PHOTONS
from ..core.validation import check_array, check_integer, check_number, check_option, fail
from ..errors import ParameterError
from ..scenes.planck import planck_band_radiance
from . import _thermal_kernel as kernel
from ._array_checks import as_float_array, broadcast_to_shape
from .heating import DRY_AIR_SPECIFIC_HEAT, SECONDS_PER_DAY, STANDARD_GRAVITY
from .montecarlo import _numba_threads, default_batch_size

#: The two modes: periodic 3D transport, or every photon confined to its column.
MODES = ("full_3d", "independent_column")
#: Widest step [K] of the temperature table of Planck radiances.  Linear interpolation
#: errs by at most 4.3e-5 relative on the 10 cm-1 intervals (3000 cm-1 at 150 K) and
#: 7e-7 on their sum, between 150 and 350 K (measured).
PLANCK_TABLE_STEP = 0.1
#: Most temperatures in that table (wider temperature ranges get a wider step).
PLANCK_TABLE_SIZE = 4097
#: Default weight, relative to a photon's starting weight, below which Russian roulette
#: decides whether it goes on.
THERMAL_ROULETTE_WEIGHT = 0.1
#: Column results, in the order of the result dictionary.
COLUMN_RESULTS = ("surface_downward_flux", "surface_upward_flux", "toa_upward_flux", "atmosphere_net_absorption",
                  "surface_net_absorption")


def _table_radiance(table, t0, inv_dt, temperature):
    """Radiance of every interval (rows of ``table``) at ``temperature`` (any shape), interpolated
    linearly as :func:`surrogate3d.solvers._thermal_kernel.table_radiance` does: (nrow,) + shape."""
    t = np.asarray(temperature, dtype=np.float64)
    u = (t - t0) * inv_dt
    i = np.minimum(np.where(u > 0.0, u, 0.0).astype(np.int64), table.shape[1] - 2)
    f = u - i
    return table[:, i] + f * (table[:, i + 1] - table[:, i])


def planck_table(wavenumber_low, wavenumber_high, t_min, t_max):
    """Band radiances of the intervals on a temperature grid covering ``[t_min, t_max]``.

    Parameters
    ----------
    wavenumber_low, wavenumber_high : ndarray (ninterval,)
        Interval limits [m-1].
    t_min, t_max : float
        Coldest and warmest temperature to cover [K], ``0 < t_min <= t_max``.

    Returns
    -------
    t0 : float
        First temperature [K] (``t_min``).
    inv_dt : float
        Inverse of the step [K-1]; the step is at most :data:`PLANCK_TABLE_STEP` unless the
        range needs more than :data:`PLANCK_TABLE_SIZE` temperatures.
    radiance : ndarray (ninterval, nt)
        ``planck_band_radiance`` at every temperature [W m-2 sr-1].

    Examples
    --------
    >>> t0, inv_dt, radiance = planck_table(np.array([80000.0]), np.array([125000.0]), 250.0, 300.0)
    >>> radiance.shape, round(1.0 / inv_dt, 3)
    ((1, 501), 0.1)
    """
    nt = min(PLANCK_TABLE_SIZE, max(2, int(math.ceil((t_max - t_min) / PLANCK_TABLE_STEP - 1e-9)) + 1))
    step = max(PLANCK_TABLE_STEP if nt == 2 else (t_max - t_min) / (nt - 1), 1e-12)
    temperatures = t_min + step * np.arange(nt)
    radiance = planck_band_radiance(temperatures[None, :], wavenumber_low[:, None], wavenumber_high[:, None])
    return float(t_min), 1.0 / step, np.ascontiguousarray(radiance)


def _checked_intervals(intervals):
    low = as_float_array("intervals.wavenumber_low", intervals.wavenumber_low)
    high = as_float_array("intervals.wavenumber_high", intervals.wavenumber_high)
    band = np.asarray(intervals.band)
    if low.ndim != 1 or low.size == 0 or high.shape != low.shape or band.shape != low.shape:
        raise ParameterError(f"intervals must hold 1-D arrays of one length; got wavenumber_low {low.shape}, "
                             f"wavenumber_high {high.shape}, band {band.shape}")
    check_array("intervals.wavenumber_low", low, 0.0, None)
    check_array("intervals.wavenumber_high", high, 0.0, None, low_open=True)
    if not np.issubdtype(band.dtype, np.integer):
        raise ParameterError(f"intervals.band must hold integers; got dtype {band.dtype}")
    check_array("intervals.band", band, 0, None)
    empty = high <= low
    if empty.any():
        i = int(np.argmax(empty))
        fail("intervals.wavenumber_high", "greater than wavenumber_low", high[i], i)
    return low, high, band.astype(np.int64)


def _field(name, value, shape, what, low=None, high=None, low_open=False, high_open=False):
    array = as_float_array(name, value)
    check_array(name, array, low, high, low_open=low_open, high_open=high_open)
    return np.ascontiguousarray(broadcast_to_shape(name, array, shape, what), dtype=np.float64)


def _pressure_thickness(air_pressure_edges, nz, ny, nx):
    p = as_float_array("air_pressure_edges", air_pressure_edges)
    check_array("air_pressure_edges", p, 0.0, None, low_open=True)
    if p.shape == (nz + 1,):
        p = p[:, None, None]
    elif p.shape != (nz + 1, ny, nx):
        raise ParameterError(f"air_pressure_edges must have shape ({nz + 1},) or ({nz + 1}, {ny}, {nx}); "
                             f"got {p.shape}")
    p = np.broadcast_to(p, (nz + 1, ny, nx))
    dp = p[:-1] - p[1:]
    if np.any(dp <= 0.0):
        k, j, i = (int(v) for v in np.unravel_index(int(np.argmax(dp <= 0.0)), dp.shape))
        fail("air_pressure_edges", "strictly decreasing upward", p[k + 1, j, i], (k + 1, j, i))
    return dp


def _escape_power(k_abs, chord):
    """:func:`surrogate3d.solvers._thermal_kernel.escape_power` of arrays."""
    x = k_abs * chord
    return np.where(x < 1e-12, k_abs, np.where(x > 40.0, 1.0 / chord, -np.expm1(-x) / chord))


def mean_chord(z_edge, dx, dy, full_3d):
    """Mean chord length of the cells of every layer [m]: ``4 V / S`` of a box (Cauchy's
    formula for convex bodies), ``2 dz`` of an infinite slab (independent columns)."""
    dz = np.diff(z_edge)
    if not full_3d:
        return 2.0 * dz
    return 2.0 * dx * dy * dz / (dx * dy + dx * dz + dy * dz)


def _sources(gas, cloud, band_of, temperature, t_surface, emissivity, t_top, z_edge, chord, table):
    """The sampling powers and the proposals of the spectral sampling (:class:`~._thermal_kernel.Sources`)
    and the Planck table (:class:`~._thermal_kernel.PlanckTable`)."""
    t0, inv_dt, radiance = table
    nz = gas.shape[1]
    nband = cloud.shape[0]
    # Cells are drawn in proportion to their escaping emission, about.
    cell_power = kernel.cell_sampling_power(gas, cloud, band_of, temperature, z_edge, chord, t0, inv_dt, radiance)
    surface_power = emissivity * np.pi * _table_radiance(radiance, t0, inv_dt, t_surface).sum(axis=0)
    top_power = np.zeros_like(surface_power)
    if t_top > 0.0:
        top_power[:] = np.pi * _table_radiance(radiance, t0, inv_dt, t_top).sum()
    cdf = np.cumsum(np.concatenate([cell_power.ravel(), surface_power.ravel(), top_power.ravel()]))

    t_max = np.concatenate([temperature.reshape(nz, -1).max(axis=1), [t_surface.max(), max(t_top, t0)]])
    at_max = _table_radiance(radiance, t0, inv_dt, t_max)  # (ninterval, nz + 2)
    cloud_max = np.ascontiguousarray(cloud[..., 0].reshape(nband, nz, -1).max(axis=2))
    proposal = at_max[:, :nz] * _escape_power(gas + cloud_max[band_of], chord[None, :])
    cell_cdf = np.ascontiguousarray(np.cumsum(proposal.T, axis=1))
    planck_cdf = np.ascontiguousarray(np.cumsum(at_max[:, nz:].T, axis=1))
    sources = kernel.Sources(cdf, cell_cdf, cloud_max, np.ascontiguousarray(chord, dtype=np.float64), planck_cdf,
                             t_max)
    return sources, kernel.PlanckTable(t0, inv_dt, radiance)


def _statistics(values):
    """Mean over batches, its standard error, and the same for the domain mean: values (nbatch, ny, nx)."""
    n = values.shape[0]
    domain = values.mean(axis=(1, 2))
    return (values.mean(axis=0), values.std(axis=0, ddof=1) / math.sqrt(n), float(domain.mean()),
            float(domain.std(ddof=1) / math.sqrt(n)))


CheckedScene = namedtuple("CheckedScene", ["low", "high", "band_of", "gas", "ext", "ssa", "asym", "t_air",
                                           "t_surface", "emissivity", "z", "dx", "dy", "mode", "t_top"])
CheckedScene.__doc__ = """The inputs of a thermal solver, checked, as float64 arrays of full shape (the
interval limits [m-1] and bands; gas absorption (ninterval, nz); cloud extinction, single-scattering
albedo and asymmetry (nband, nz, ny, nx); air temperature (nz, ny, nx); surface temperature and
emissivity (ny, nx); layer edges (nz + 1,); cell size; mode; top temperature, 0 for none)."""


def checked_scene(gas_absorption, intervals, cloud_extinction, cloud_single_scattering_albedo,
                  cloud_asymmetry_parameter, air_temperature, surface_temperature, surface_emissivity, z_edge, dx,
                  dy, mode, top_temperature):
    """The scene arguments of a thermal solver, checked.

    Parameters
    ----------
    gas_absorption, intervals, cloud_extinction, cloud_single_scattering_albedo, cloud_asymmetry_parameter
        As for :func:`solve_thermal_monte_carlo` (same units and shapes).
    air_temperature, surface_temperature, surface_emissivity, z_edge, dx, dy, mode, top_temperature
        As for :func:`solve_thermal_monte_carlo` (same units and shapes).

    Returns
    -------
    CheckedScene

    Raises
    ------
    surrogate3d.errors.ParameterError
        In one line naming the variable and the index of the first bad value.
    """
    low, high, band_of = _checked_intervals(intervals)
    nint = low.size
    t_air = as_float_array("air_temperature", air_temperature)
    check_array("air_temperature", t_air, 0.0, None, low_open=True)
    if t_air.ndim != 3:
        raise ParameterError(f"air_temperature must have shape (nz, ny, nx); got {t_air.shape}")
    nz, ny, nx = t_air.shape
    gas = as_float_array("gas_absorption", gas_absorption)
    check_array("gas_absorption", gas, 0.0, None)
    if gas.shape != (nint, nz):
        raise ParameterError(f"gas_absorption must have shape (ninterval, nz) = ({nint}, {nz}); got {gas.shape}")
    ext = as_float_array("cloud_extinction", cloud_extinction)
    nband = ext.shape[0] if ext.ndim == 4 else int(band_of.max()) + 1
    if nband <= band_of.max():
        raise ParameterError(f"cloud_extinction has {nband} bands; intervals.band reaches {int(band_of.max())}")
    shape = (nband, nz, ny, nx)
    what = "(nband, nz, ny, nx)"
    ext = _field("cloud_extinction", ext, shape, what, 0.0)
    ssa = _field("cloud_single_scattering_albedo", cloud_single_scattering_albedo, shape, what, 0.0, 1.0)
    asym = _field("cloud_asymmetry_parameter", cloud_asymmetry_parameter, shape, what, -1.0, 1.0, True, True)
    t_surface = _field("surface_temperature", surface_temperature, (ny, nx), "(ny, nx)", 0.0, None, True)
    emissivity = _field("surface_emissivity", surface_emissivity, (ny, nx), "(ny, nx)", 0.0, 1.0)
    z = as_float_array("z_edge", z_edge)
    check_array("z_edge", z)
    if z.shape != (nz + 1,):
        raise ParameterError(f"z_edge must have shape ({nz + 1},); got {z.shape}")
    rises = np.diff(z) > 0.0
    if not rises.all():
        i = int(np.argmin(rises)) + 1
        fail("z_edge", "strictly rising", z[i], i)
    dx = check_number("dx", dx, 0.0, None, low_open=True)
    dy = check_number("dy", dy, 0.0, None, low_open=True)
    mode = check_option("mode", mode, MODES)
    t_top = 0.0 if top_temperature is None else check_number("top_temperature", top_temperature, 0.0, None,
                                                             low_open=True)
    return CheckedScene(low, high, band_of, gas, ext, ssa, asym, t_air, t_surface, emissivity, z, dx, dy, mode,
                        t_top)


def solve_thermal_monte_carlo(gas_absorption, intervals, cloud_extinction, cloud_single_scattering_albedo,
                              cloud_asymmetry_parameter, air_temperature, surface_temperature, surface_emissivity,
                              z_edge, dx, dy, *, mode="full_3d", top_temperature=None, air_pressure_edges=None,
                              photons=MONTE_CARLO_PHOTONS, seed=0, batch_size=None, threads=None,
                              roulette_weight=THERMAL_ROULETTE_WEIGHT, max_scattering_events=MAX_SCATTERING_EVENTS,
                              progress=None):
    """Broadband longwave fluxes, net absorption and heating of a cell grid by Monte Carlo.

    Parameters
    ----------
    gas_absorption : array_like, shape (ninterval, nz)
        Gas absorption coefficient of every spectral interval and layer [m-1], >= 0,
        horizontally uniform (for example :func:`surrogate3d.scenes.longwave_optics.gas_absorption_coefficient`
        of every layer's mean temperature, pressure and humidity).  Layer 0 is the bottom.
    intervals : surrogate3d.scenes.longwave_optics.SpectralIntervals
        The intervals: limits [m-1] and band index
        (:func:`~surrogate3d.scenes.longwave_optics.spectral_intervals`).
    cloud_extinction, cloud_single_scattering_albedo, cloud_asymmetry_parameter : array_like
        Cloud optics per band and cell, broadcastable to (nband, nz, ny, nx) with nband above
        the largest band index (:func:`~surrogate3d.scenes.longwave_optics.cloud_optics`):
        [m-1] >= 0, [1] in [0, 1], [1] in (-1, 1).  An interval's optics are gas plus cloud
        of its band, as :func:`~surrogate3d.scenes.longwave_optics.mix_longwave_optics` combines them.
    air_temperature : array_like, shape (nz, ny, nx)
        [K], > 0; uniform within every cell.
    surface_temperature, surface_emissivity : float or array_like, broadcastable to (ny, nx)
        [K] > 0 and [1] in [0, 1]; the surface is grey and reflects ``1 - emissivity``
        like a Lambertian surface.
    z_edge : array_like, shape (nz + 1,)
        Layer edges [m], strictly rising.
    dx, dy : float
        Cell size [m], > 0.
    mode : {"full_3d", "independent_column"}
        Periodic 3D transport, or every photon confined to the column where it started
        (independent column approximation).
    top_temperature : float, optional
        [K] > 0 of a black body lighting the top isotropically (downward flux ``pi B`` in
        every interval); default None: nothing comes from space.
    air_pressure_edges : array_like, shape (nz + 1,) or (nz + 1, ny, nx), optional
        [Pa], > 0 and strictly decreasing upward; when given, heating rates are returned.
    photons : int
        Photons to trace (rounded up to whole batches), >= 1.
    seed : int
        Random seed, >= 0; the same seed gives identical results for any ``threads``.
    batch_size : int, optional
        Photons per batch (default: at least 32 batches of 1 000 to 50 000 photons).
    threads : int, optional
        Numba threads (default: numba's setting).
    roulette_weight : float
        Weight, relative to a photon's starting weight, below which Russian roulette
        decides whether it goes on, in (0, 1]; changes only the noise and the cost.
    max_scattering_events : int
        Safety cap per photon, >= 1; a photon reaching it is absorbed where it is.
    progress : callable, optional
        Called with the number of photons finished after every wave of batches.

    Returns
    -------
    dict
        Per column (ny, nx), W m-2: ``surface_downward_flux``, ``surface_upward_flux``,
        ``toa_upward_flux``, ``atmosphere_net_absorption`` (absorbed minus emitted by the
        column's air) and ``surface_net_absorption``; for each ``NAME`` also ``NAME_se``
        (ny, nx), ``NAME_domain_mean`` and ``NAME_domain_mean_se`` (floats), and
        ``batches[NAME]`` (nbatch, ny, nx), every batch's estimate.  Per cell (nz, ny, nx):
        ``cell_net_absorption`` [W m-2 of column area] and ``cell_net_absorption_se``, and
        with ``air_pressure_edges`` ``heating_rate`` [K day-1] and ``heating_rate_se``.
        ``toa_downward_flux`` [W m-2] (exact), ``photons``, ``batch_count``, ``seed``,
        ``mode``, ``scattering_events``, ``wall_time``, ``cpu_time`` (all threads) and
        ``setup_cpu_time`` (before the first photon) [s].  Standard
        errors come from the spread between independent batches.

    Raises
    ------
    surrogate3d.errors.ParameterError
        An input is NaN, out of range or of the wrong shape; the message names it and the index.

    Notes
    -----
    Energy is conserved to round-off in every run: ``toa_downward_flux - toa_upward_flux =
    atmosphere_net_absorption + surface_net_absorption`` summed over the domain.  Where
    every emitter and absorber has one temperature, every net absorption is exactly 0.

    References
    ----------
    Green, J. S. A., 1967: Division of radiative streams into internal transfer and cooling
    to space. Q. J. R. Meteorol. Soc., 93, 371-372.
    Cherkaoui, M., J.-L. Dufresne, R. Fournier, J.-Y. Grandpeix and A. Lahellec, 1996: Monte
    Carlo simulation of radiation in gases with a narrow-band model and a net-exchange
    formulation. J. Heat Transfer, 118, 401-407.
    Veach, E. and L. J. Guibas, 1995: Optimally combining sampling techniques for Monte Carlo
    rendering. Proc. SIGGRAPH 95, 419-428.

    Examples
    --------
    An isothermal cloudy box at 280 K over a black surface at 280 K, lit from the top by a
    black body at 280 K: every net exchange is zero, with no noise (Kirchhoff).

    >>> from surrogate3d.scenes.longwave_optics import SpectralIntervals
    >>> window = SpectralIntervals(np.array([80000.0]), np.array([125000.0]), np.array([0]))
    >>> out = solve_thermal_monte_carlo(np.full((1, 2), 1e-4), window, np.full((1, 2, 2, 2), 0.02), 0.6, 0.8,
    ...                                 np.full((2, 2, 2), 280.0), 280.0, 1.0, [0.0, 500.0, 1000.0], 100.0, 100.0,
    ...                                 top_temperature=280.0, photons=4000, seed=1)
    >>> float(np.abs(out["cell_net_absorption"]).max()), float(out["surface_net_absorption_se"].max())
    (0.0, 0.0)
    >>> round(float(out["surface_downward_flux"][0, 0]), 3)      # pi B(280 K) in 800-1250 cm-1
    95.675
    """
    started, cpu_started = time.perf_counter(), time.process_time()
    scene = checked_scene(gas_absorption, intervals, cloud_extinction, cloud_single_scattering_albedo,
                          cloud_asymmetry_parameter, air_temperature, surface_temperature, surface_emissivity,
                          z_edge, dx, dy, mode, top_temperature)
    low, high, band_of, gas, ext, ssa, asym, t_air, t_surface, emissivity, z, dx, dy, mode, t_top = scene
    nz, ny, nx = t_air.shape
    dp = None if air_pressure_edges is None else _pressure_thickness(air_pressure_edges, nz, ny, nx)
    photons = check_integer("photons", photons, 1)
    seed = check_integer("seed", seed, 0, 2**63 - 1)
    batch_size = default_batch_size(photons) if batch_size is None else check_integer("batch_size", batch_size, 1)
    if threads is not None:
        import numba

        threads = check_integer("threads", threads, 1, numba.config.NUMBA_NUM_THREADS)
    roulette = check_number("roulette_weight", roulette_weight, 0.0, 1.0, low_open=True)
    max_events = check_integer("max_scattering_events", max_scattering_events, 1)

    temperatures = np.concatenate([t_air.ravel(), t_surface.ravel(), [t_top] if t_top > 0.0 else []])
    table = planck_table(low, high, float(temperatures.min()), float(temperatures.max()))
    cloud = np.ascontiguousarray(np.stack([ext * (1.0 - ssa), ext * ssa, asym], axis=-1))
    t_air = np.ascontiguousarray(t_air)
    gas = np.ascontiguousarray(gas)
    chord = mean_chord(z, dx, dy, mode == "full_3d")
    sources, planck = _sources(gas, cloud, band_of, t_air, t_surface, emissivity, t_top, z, chord, table)
    medium = kernel.Medium(gas, cloud, band_of, t_air, np.ascontiguousarray(z), dx, dy)
    boundaries = kernel.Boundaries(t_surface, emissivity, t_top)
    n_batches = max(2, -(-photons // batch_size))
    run = kernel.ThermalRun(mode == "full_3d", seed, batch_size, roulette, max_events)
    cell_spread = np.zeros((3, nz * ny * nx))
    col_values = np.zeros((n_batches, len(kernel.COLUMN_TALLIES), ny, nx))
    setup_cpu = time.process_time() - cpu_started
    chunk = MONTE_CARLO_WAVE * max(1, PROGRESS_PHOTONS // (MONTE_CARLO_WAVE * batch_size))
    events = 0
    with _numba_threads(threads):
        for first in range(0, n_batches, chunk):
            count = min(chunk, n_batches - first)
            events += kernel.run_batches(first, count, MONTE_CARLO_WAVE, run, medium, boundaries, planck, sources,
                                         cell_spread, col_values)
            if progress is not None:
                progress((first + count) * batch_size)

    t0, inv_dt, radiance = table
    surface_black = np.pi * _table_radiance(radiance, t0, inv_dt, t_surface).sum(axis=0)
    top_down = np.pi * float(_table_radiance(radiance, t0, inv_dt, t_top).sum()) if t_top > 0.0 else 0.0
    tally = dict(zip(kernel.COLUMN_TALLIES, np.moveaxis(col_values, 1, 0)))
    emitting = emissivity > 0.0
    # The surface's net absorption is eps (down - pi B): its net-exchange estimate gives the
    # downward flux wherever the surface absorbs at all (no noise where the air above is at
    # the surface's temperature), the flux reaching it elsewhere.
    down = np.where(emitting, surface_black + tally["surface_net"] / np.where(emitting, emissivity, 1.0),
                    tally["surface_arrival"])
    per_batch = {
        "surface_downward_flux": down,
        "surface_upward_flux": emissivity * surface_black + (1.0 - emissivity) * down,
        "toa_upward_flux": top_down + tally["space_net"],
        "atmosphere_net_absorption": tally["atmosphere_net"],
        "surface_net_absorption": tally["surface_net"],
    }
    out = {}
    for name in COLUMN_RESULTS:
        out[name], out[name + "_se"], out[name + "_domain_mean"], out[name + "_domain_mean_se"] = \
            _statistics(per_batch[name])
    sums, sumsq, pivot = cell_spread
    var = np.maximum(sumsq - sums ** 2 / n_batches, 0.0) / (n_batches - 1)
    out["cell_net_absorption"] = (pivot + sums / n_batches).reshape(nz, ny, nx)
    out["cell_net_absorption_se"] = np.sqrt(var / n_batches).reshape(nz, ny, nx)
    if dp is not None:
        per_watt = STANDARD_GRAVITY / DRY_AIR_SPECIFIC_HEAT / dp * SECONDS_PER_DAY
        out["heating_rate"] = out["cell_net_absorption"] * per_watt
        out["heating_rate_se"] = out["cell_net_absorption_se"] * per_watt
    out.update(batches=per_batch, toa_downward_flux=top_down, photons=n_batches * batch_size, batch_count=n_batches,
               seed=seed, mode=mode, scattering_events=int(events), wall_time=time.perf_counter() - started,
               cpu_time=time.process_time() - cpu_started, setup_cpu_time=setup_cpu)
    return out
