"""Longwave (thermal) radiation of a whole scene by one longwave solver kind, as a run result.

The scene's longwave fields (:func:`surrogate3d.scenes.longwave_fields.longwave_fields`)
go to the thermal Monte Carlo in 3D or independent columns
(:func:`surrogate3d.solvers.thermal_montecarlo.solve_thermal_monte_carlo`) or to the
two-stream column solver on every spectral interval, summed
(:func:`surrogate3d.solvers.longwave_two_stream.longwave_two_stream`).  Nothing comes in
from space in either.  The result has the layout of
:func:`surrogate3d.core.longwave_result.make_longwave_result`.
"""

import time

import numpy as np

from .. import __version__
from ..core.config import MONTE_CARLO_PHOTONS
from ..core.data_model import LONGWAVE_SOLVERS
from ..core.longwave_result import LONGWAVE_COLUMN_FLUXES, make_longwave_result
from ..core.validation import check_integer, check_option
from ..errors import ParameterError
from ..scenes.longwave_fields import longwave_fields
from ..scenes.longwave_optics import DEFAULT_RESOLUTION, SpectralIntervals, mix_longwave_optics
from ..scenes.planck import planck_band_radiance
from .longwave_two_stream import longwave_two_stream
from .thermal_backward import backward_longwave_fluxes
from .thermal_montecarlo import solve_thermal_monte_carlo

#: Cells times intervals the two-stream path holds in memory at once (about 16 MB per array).
TWO_STREAM_CHUNK_VALUES = 2_000_000


def solve_longwave_scene(scene, solver, *, photons=MONTE_CARLO_PHOTONS, seed=0, resolution=DEFAULT_RESOLUTION,
                         batch_size=None, threads=None, label=None, boundary_rays=0):
    """Broadband longwave fluxes and net absorption of a scene by one longwave solver kind.

    Parameters
    ----------
    scene : xarray.Dataset
        A scene holding the longwave fields (``docs/archive-format.md``).
    solver : str
        ``"longwave_full_3d"``, ``"longwave_independent_column"`` (thermal Monte Carlo) or
        ``"longwave_two_stream"`` (two-stream per column and spectral interval).
    photons : int
        Photons of a Monte Carlo run, >= 1 (unused by the two-stream solver).
    seed : int
        Random seed of a Monte Carlo run, >= 0.
    resolution : float
        Widest spectral interval of the gas absorption [m-1], > 0; default 10 cm-1.
    batch_size, threads : int, optional
        As for :func:`~surrogate3d.solvers.thermal_montecarlo.solve_thermal_monte_carlo`.
    label : str, optional
        How the scene is called in messages (its file name).
    boundary_rays : int
        Monte Carlo solvers: rays per cell column of the backward estimate of the surface
        downward and top upward fluxes
        (:func:`~surrogate3d.solvers.thermal_backward.backward_longwave_fluxes`), >= 0; 0
        keeps the forward tallies.  With rays, those two fluxes come from the backward
        estimate and the surface's upward flux and net absorption follow from the
        downward one exactly (a grey Lambertian surface: ``up = eps pi B(T_s) + (1 - eps)
        down``, ``net = down - up``); the atmosphere's net absorption and the cells' stay
        forward estimates.  Far less noise per column at the same CPU
        (``docs/methods/longwave.md``, "Backward estimate of the column fluxes").

    Returns
    -------
    xarray.Dataset
        A longwave run result: column fluxes [W m-2] with standard errors, net absorption
        per cell [W m-2], heating rate [K day-1] and run metadata (``longwave_run_boundary_rays``
        says which estimate the boundary fluxes are).

    Raises
    ------
    surrogate3d.errors.ValidationError
        The scene lacks a longwave field or holds invalid values (one line naming the
        variable, and the index).
    surrogate3d.errors.ParameterError
        An option is out of range.

    References
    ----------
    See :func:`~surrogate3d.solvers.thermal_montecarlo.solve_thermal_monte_carlo` and
    :func:`~surrogate3d.solvers.longwave_two_stream.longwave_two_stream`.

    Examples
    --------
    >>> from surrogate3d.scenes.generator import generate_scene
    >>> scene = generate_scene("overcast", 0, nx=3, ny=2, nz=4)
    >>> result = solve_longwave_scene(scene, "longwave_two_stream", resolution=20000.0)
    >>> result["longwave_surface_downward_flux"].shape, int(result["longwave_run_photons"])
    ((2, 3), 0)
    """
    check_option("solver", solver, LONGWAVE_SOLVERS, ParameterError)
    boundary_rays = check_integer("boundary_rays", boundary_rays, 0)
    started = time.perf_counter()
    fields = longwave_fields(scene, label=label, resolution=resolution)
    if solver == "longwave_two_stream":
        return _two_stream(fields, started, resolution)
    out = solve_thermal_monte_carlo(
        fields.gas_absorption, fields.intervals, fields.cloud_extinction, fields.cloud_single_scattering_albedo,
        fields.cloud_asymmetry_parameter, fields.air_temperature, fields.surface_temperature,
        fields.surface_longwave_emissivity, fields.z_edge, fields.dx, fields.dy,
        mode=solver.removeprefix("longwave_"), air_pressure_edges=fields.air_pressure, photons=photons, seed=seed,
        batch_size=batch_size, threads=threads)
    names = {name: name.removeprefix("longwave_") for name in LONGWAVE_COLUMN_FLUXES}
    values, errors, domain_errors = ({k: out[v + suffix] for k, v in names.items()}
                                     for suffix in ("", "_se", "_domain_mean_se"))
    if boundary_rays:
        _backward_boundaries(fields, solver, seed, boundary_rays, threads, values, errors, domain_errors)
    return make_longwave_result(
        values, errors, domain_errors, out["cell_net_absorption"], solver=solver,
        net_absorption_standard_error=out["cell_net_absorption_se"], heating_rate=out["heating_rate"],
        heating_rate_standard_error=out["heating_rate_se"],
        metadata={**_metadata(out["photons"], out["seed"], out["scattering_events"], time.perf_counter() - started,
                              resolution), "longwave_run_batches": out["batch_count"],
                  "longwave_run_boundary_rays": boundary_rays})


def _backward_boundaries(fields, solver, seed, rays, threads, values, errors, domain_errors):
    """Replace, in place, the surface fields and the top upward flux of a forward run by the backward
    estimate and what follows from it exactly at a grey Lambertian surface."""
    out = backward_longwave_fluxes(
        fields.gas_absorption, fields.intervals, fields.cloud_extinction, fields.cloud_single_scattering_albedo,
        fields.cloud_asymmetry_parameter, fields.air_temperature, fields.surface_temperature,
        fields.surface_longwave_emissivity, fields.z_edge, fields.dx, fields.dy, mode=solver.removeprefix("longwave_"),
        rays_per_column=rays, seed=seed, threads=threads)
    eps = np.broadcast_to(np.asarray(fields.surface_longwave_emissivity, dtype=np.float64), out["surface_downward_flux"].shape)
    intervals = fields.intervals
    # pi times the band radiance of the surface temperature, summed over the intervals [W m-2].
    black = np.pi * np.sum(planck_band_radiance(np.asarray(fields.surface_temperature, dtype=np.float64)[..., None],
                                                intervals.wavenumber_low, intervals.wavenumber_high), axis=-1)
    emitted = eps * black
    down_batches = out["batches"]["surface_downward_flux"]
    derived = {"longwave_surface_downward_flux": (1.0, 0.0), "longwave_surface_upward_flux": (1.0 - eps, emitted),
               "longwave_surface_net_absorption": (eps, -emitted)}
    for name, (factor, shift) in derived.items():
        batches = factor * down_batches + shift
        values[name] = factor * out["surface_downward_flux"] + shift
        errors[name] = factor * out["surface_downward_flux_se"]
        domain_errors[name] = _batch_standard_error(batches.mean(axis=(1, 2)))
    values["longwave_toa_upward_flux"] = out["toa_upward_flux"]
    errors["longwave_toa_upward_flux"] = out["toa_upward_flux_se"]
    domain_errors["longwave_toa_upward_flux"] = out["toa_upward_flux_domain_mean_se"]


def _batch_standard_error(batch_means):
    """Standard error of the mean of independent batch estimates."""
    n = batch_means.size
    return float(np.std(batch_means, ddof=1) / np.sqrt(n)) if n > 1 else 0.0


def _metadata(photons, seed, events, wall_time, resolution):
    return {"longwave_run_photons": photons, "longwave_run_seed": seed, "longwave_run_scattering_events": events,
            "longwave_run_wall_time": wall_time, "longwave_run_spectral_resolution": float(resolution),
            "longwave_run_package_version": __version__}


def _two_stream(fields, started, resolution):
    """Two-stream fluxes of every column summed over the spectral intervals (isothermal cells)."""
    nz, ny, nx = fields.air_temperature.shape
    intervals = fields.intervals
    dz = np.diff(fields.z_edge)
    temperature = np.moveaxis(fields.air_temperature, 0, -1)  # (ny, nx, nz): layers last
    sums = {}
    step = max(1, TWO_STREAM_CHUNK_VALUES // (nz * ny * nx))
    for first in range(0, len(intervals.band), step):
        part = slice(first, first + step)
        chunk = SpectralIntervals(intervals.wavenumber_low[part], intervals.wavenumber_high[part],
                                  intervals.band[part])
        ext, ssa, g = mix_longwave_optics(fields.gas_absorption[part, :, None, None], fields.cloud_extinction,
                                          fields.cloud_single_scattering_albedo, fields.cloud_asymmetry_parameter,
                                          chunk)
        out = longwave_two_stream(np.moveaxis(ext * dz[:, None, None], 1, -1), np.moveaxis(ssa, 1, -1),
                                  np.moveaxis(g, 1, -1), temperature, fields.surface_temperature,
                                  fields.surface_longwave_emissivity, chunk.wavenumber_low[:, None, None],
                                  chunk.wavenumber_high[:, None, None], air_pressure_edges=fields.air_pressure)
        for name in [n.removeprefix("longwave_") for n in LONGWAVE_COLUMN_FLUXES] + ["layer_net_absorption",
                                                                                  "heating_rate"]:
            sums[name] = sums.get(name, 0.0) + out[name].sum(axis=0)
    zero = np.zeros((ny, nx))
    return make_longwave_result(
        {name: sums[name.removeprefix("longwave_")] for name in LONGWAVE_COLUMN_FLUXES},
        dict.fromkeys(LONGWAVE_COLUMN_FLUXES, zero), dict.fromkeys(LONGWAVE_COLUMN_FLUXES, 0.0),
        np.moveaxis(sums["layer_net_absorption"], -1, 0), solver="longwave_two_stream",
        heating_rate=np.moveaxis(sums["heating_rate"], -1, 0),
        metadata=_metadata(0, 0, 0, time.perf_counter() - started, resolution))
