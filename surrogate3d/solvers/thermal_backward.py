"""Backward (adjoint) Monte Carlo estimate of the longwave fluxes at the surface and the top of every column.

The forward thermal Monte Carlo (:mod:`surrogate3d.solvers.thermal_montecarlo`) follows
photons from where they are emitted and counts them where they arrive; the fluxes of one
column then rest on the few photons that happen to end there.  Here rays start where the
flux is wanted, spread over the column's surface (downward flux) or its top (upward
flux), and gather the emission along their paths deterministically
(:mod:`surrogate3d.solvers._thermal_backward_kernel`).  ``docs/methods/longwave.md``
("Backward estimate of the column fluxes") describes the method, its checks and its noise.
"""

import math
import time

import numpy as np

from ..core.config import MAX_SCATTERING_EVENTS
from ..core.validation import check_integer, check_number
from . import _thermal_backward_kernel as kernel
from ._thermal_kernel import Boundaries, Medium, PlanckTable
from .montecarlo import _numba_threads
from .thermal_montecarlo import (THERMAL_ROULETTE_WEIGHT, _statistics, _table_radiance, checked_scene,
                                 planck_table)

#: Default rays per column and flux, and batches they are split into.
BACKWARD_RAYS = 256
BACKWARD_BATCHES = 32
#: Share of the spectral proposal taken by the Planck radiance at a reference temperature;
#: the rest follows the clear-sky flux of the domain-mean column (:func:`spectral_proposal`).
PLANCK_SHARE = 0.2
#: Gauss-Legendre points in the cosine of the clear-sky fluxes of the proposal.
PROPOSAL_COSINES = 8


def _exclusive_product(values):
    # Products along axis 1 of the values before each index (1 for the first).
    return np.cumprod(np.concatenate([np.ones_like(values[:, :1]), values[:, :-1]], axis=1), axis=1)


def spectral_proposal(gas, cloud_absorption, band_of, layer_temperature, surface_temperature, emissivity,
                      top_temperature, z_edge, table, planck_share=PLANCK_SHARE):
    """Cumulative spectral proposals of the rays for the surface downward and the top upward flux.

    Per interval, ``(1 - planck_share)`` times its share of the flux of a plane-parallel,
    non-scattering column (the domain-mean column: layer-mean temperatures and cloud
    absorption, mean surface) plus ``planck_share`` times its share of the Planck radiance
    at a reference temperature (the mean of the bottom layer for the downward flux, of the
    surface for the upward flux).  The rays' estimate is unbiased for any proposal that is
    positive wherever a radiance can be; this one roughly follows the radiance, which keeps
    the spectral part of the noise small, and the Planck share keeps it positive where the
    clear column sends nothing (the window under cloud).

    Parameters
    ----------
    gas : ndarray (ninterval, nz)
        Gas absorption coefficient [m-1].
    cloud_absorption : ndarray (nband, nz)
        Layer-mean cloud absorption coefficient [m-1].
    band_of : ndarray (ninterval,)
        Band of every interval.
    layer_temperature : ndarray (nz,)
        Layer-mean air temperature [K].
    surface_temperature, emissivity : float
        Mean surface temperature [K] and emissivity [1].
    top_temperature : float
        Temperature [K] of the black body lighting the top, 0 for none.
    z_edge : ndarray (nz + 1,)
        Layer edges [m].
    table : tuple
        ``(t0, inv_dt, radiance)`` of :func:`~surrogate3d.solvers.thermal_montecarlo.planck_table`.
    planck_share : float
        Share of the Planck part, in (0, 1].

    Returns
    -------
    ndarray (2, ninterval)
        Cumulative proposals, each ending at 1: surface downward, top upward.

    References
    ----------
    Chandrasekhar, S., 1960: *Radiative Transfer*. Dover (plane-parallel radiances; from memory).

    Examples
    --------
    >>> t0, inv_dt, radiance = planck_table(np.array([40000.0, 80000.0]), np.array([80000.0, 125000.0]),
    ...                                     280.0, 280.0)
    >>> cdf = spectral_proposal(np.full((2, 1), 1.0), np.zeros((1, 1)), np.array([0, 0]), np.array([280.0]),
    ...                         280.0, 1.0, 0.0, np.array([0.0, 100.0]), (t0, inv_dt, radiance))
    >>> bool(np.allclose(cdf[:, 0], radiance[0, 0] / radiance[:, 0].sum()))    # isothermal and black: Planck
    True
    """
    planck_share = check_number("planck_share", planck_share, 0.0, 1.0, low_open=True)
    t0, inv_dt, radiance = table
    mu, weight = np.polynomial.legendre.leggauss(PROPOSAL_COSINES)
    mu, weight = 0.5 * (mu + 1.0), 0.5 * weight
    tau = (gas + cloud_absorption[band_of]) * np.diff(z_edge)[None, :]
    trans = np.exp(-tau[:, :, None] / mu)                                      # (ninterval, nz, ncos)
    emitted = _table_radiance(radiance, t0, inv_dt, layer_temperature)[:, :, None] * (1.0 - trans)
    below = _exclusive_product(trans)                                         # through the layers below
    above = _exclusive_product(trans[:, ::-1])[:, ::-1]                        # through the layers above
    through = below[:, -1] * trans[:, -1]                                      # (ninterval, ncos)
    b_top = _table_radiance(radiance, t0, inv_dt, top_temperature) if top_temperature > 0.0 else 0.0
    down = (emitted * below).sum(axis=1) + np.reshape(b_top, (-1, 1)) * through
    flux_down = 2.0 * np.pi * (down * mu * weight).sum(axis=1)
    b_surface = _table_radiance(radiance, t0, inv_dt, surface_temperature)
    up = (emitted * above).sum(axis=1) + (emissivity * b_surface + (1.0 - emissivity) * flux_down / np.pi)[:, None] \
        * through
    flux_up = 2.0 * np.pi * (up * mu * weight).sum(axis=1)
    planck = [_table_radiance(radiance, t0, inv_dt, t) for t in (float(layer_temperature[0]), surface_temperature)]
    rows = []
    for flux, reference in zip((flux_down, flux_up), planck):
        clear = flux / flux.sum() if flux.sum() > 0.0 else reference / reference.sum()
        rows.append(np.cumsum((1.0 - planck_share) * clear + planck_share * reference / reference.sum()))
    cdf = np.array(rows)
    return np.ascontiguousarray(cdf / cdf[:, -1:])


def backward_longwave_fluxes(gas_absorption, intervals, cloud_extinction, cloud_single_scattering_albedo,
                             cloud_asymmetry_parameter, air_temperature, surface_temperature, surface_emissivity,
                             z_edge, dx, dy, *, mode="full_3d", top_temperature=None, rays_per_column=BACKWARD_RAYS,
                             seed=0, batches=BACKWARD_BATCHES, threads=None, roulette_weight=THERMAL_ROULETTE_WEIGHT,
                             max_scattering_events=MAX_SCATTERING_EVENTS):
    """Broadband longwave surface downward and top upward flux of every column by backward Monte Carlo.

    Rays start at random points of a column's surface (or top), in cosine-weighted
    directions up (or down), in spectral intervals drawn from :func:`spectral_proposal`
    (stratified per column and batch), and add up deterministically the emission that
    reaches their start along their path (air cells, surface, space); scattering and
    surface reflection are sampled.  The flux is ``pi`` times the mean radiance.

    Parameters
    ----------
    gas_absorption : array_like, shape (ninterval, nz)
        Gas absorption coefficient of every spectral interval and layer [m-1], >= 0.
    intervals : surrogate3d.scenes.longwave_optics.SpectralIntervals
        The intervals: limits [m-1] and band index.
    cloud_extinction, cloud_single_scattering_albedo, cloud_asymmetry_parameter : array_like
        Cloud optics per band and cell, broadcastable to (nband, nz, ny, nx): [m-1] >= 0,
        [1] in [0, 1], [1] in (-1, 1).
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
        Periodic 3D transport, or every ray confined to its column.
    top_temperature : float, optional
        [K] > 0 of a black body lighting the top isotropically; default None: cold space.
    rays_per_column : int
        Rays per column for each of the two fluxes, >= 1 (rounded up to whole batches).
    seed : int
        Random seed, >= 0; the same seed gives identical results for any ``threads``.
    batches : int
        Independent batches the rays are split into, >= 2 (standard errors from their spread).
    threads : int, optional
        Numba threads (default: numba's setting).
    roulette_weight : float
        Weight (a ray starts with 1) below which Russian roulette decides whether a ray
        goes on, in (0, 1]; changes only the noise and the cost.
    max_scattering_events : int
        Safety cap per ray, >= 1; a ray reaching it takes the radiance of its cell.

    Returns
    -------
    dict
        Per column (ny, nx) [W m-2]: ``surface_downward_flux`` and ``toa_upward_flux``; for
        each ``NAME`` also ``NAME_se`` (ny, nx), ``NAME_domain_mean`` and
        ``NAME_domain_mean_se`` (floats), and ``batches[NAME]`` (nbatch, ny, nx), every
        batch's estimate.  ``toa_downward_flux`` [W m-2] (exact), ``rays_per_column``,
        ``batch_count``, ``seed``, ``mode``, ``scattering_events``, ``wall_time``,
        ``cpu_time`` (all threads) and ``setup_cpu_time`` [s].  Standard errors come from
        the spread between independent batches.

    Raises
    ------
    surrogate3d.errors.ParameterError
        An input is NaN, out of range or of the wrong shape; the message names it and the index.

    Notes
    -----
    Same conventions and checks as
    :func:`~surrogate3d.solvers.thermal_montecarlo.solve_thermal_monte_carlo`.  Exact, with
    no noise, where air, surface and top share one temperature: every ray's radiance is
    formed relative to the radiance of its start cell
    (:mod:`~surrogate3d.solvers._thermal_backward_kernel`).

    References
    ----------
    Modest, M. F., 2013: *Radiative Heat Transfer*, 3rd ed. Academic Press, chapter on the
    Monte Carlo method: backward Monte Carlo and reciprocity (from memory).
    Walters, D. V. and R. O. Buckius, 1992: Rigorous development for radiation heat transfer
    in nonhomogeneous absorbing, emitting and scattering media. *Int. J. Heat Mass
    Transfer*, 35, 3323-3333 (reverse Monte Carlo; from memory).
    Henyey, L. G. and J. L. Greenstein, 1941: Diffuse radiation in the galaxy. *Astrophys.
    J.*, 93, 70-83.

    Examples
    --------
    An isothermal cloudy box at 280 K over a black surface at 280 K, lit from the top by a
    black body at 280 K: both fluxes are ``pi B(280 K)``, with no noise (Kirchhoff).

    >>> from surrogate3d.scenes.longwave_optics import SpectralIntervals
    >>> window = SpectralIntervals(np.array([80000.0]), np.array([125000.0]), np.array([0]))
    >>> out = backward_longwave_fluxes(np.full((1, 2), 1e-4), window, np.full((1, 2, 2, 2), 0.02), 0.6, 0.8,
    ...                                np.full((2, 2, 2), 280.0), 280.0, 1.0, [0.0, 500.0, 1000.0], 100.0, 100.0,
    ...                                top_temperature=280.0, rays_per_column=64, batches=4, seed=1)
    >>> round(float(out["surface_downward_flux"][0, 0]), 3), float(out["toa_upward_flux_se"].max()) < 1e-9
    (95.675, True)
    """
    started, cpu_started = time.perf_counter(), time.process_time()
    scene = checked_scene(gas_absorption, intervals, cloud_extinction, cloud_single_scattering_albedo,
                          cloud_asymmetry_parameter, air_temperature, surface_temperature, surface_emissivity,
                          z_edge, dx, dy, mode, top_temperature)
    rays = check_integer("rays_per_column", rays_per_column, 1)
    seed = check_integer("seed", seed, 0, 2**63 - 1)
    n_batches = check_integer("batches", batches, 2)
    if threads is not None:
        import numba

        threads = check_integer("threads", threads, 1, numba.config.NUMBA_NUM_THREADS)
    roulette = check_number("roulette_weight", roulette_weight, 0.0, 1.0, low_open=True)
    max_events = check_integer("max_scattering_events", max_scattering_events, 1)

    medium, boundaries, planck, cdf = kernel_inputs(scene)
    per_batch = -(-rays // n_batches)
    run = kernel.BackwardRun(scene.mode == "full_3d", seed, per_batch, roulette, max_events)
    nz, ny, nx = scene.t_air.shape
    values = np.zeros((n_batches, len(kernel.TARGETS), ny, nx))
    setup_cpu = time.process_time() - cpu_started
    with _numba_threads(threads):
        events = kernel.run_batches(n_batches, run, medium, boundaries, planck, cdf, values)

    out = {}
    per_name = dict(zip(kernel.TARGETS, np.moveaxis(values, 1, 0)))
    for name in kernel.TARGETS:
        out[name], out[name + "_se"], out[name + "_domain_mean"], out[name + "_domain_mean_se"] = \
            _statistics(per_name[name])
    t_top = scene.t_top
    top_down = np.pi * float(_table_radiance(planck.radiance, planck.t0, planck.inv_dt, t_top).sum()) \
        if t_top > 0.0 else 0.0
    out.update(batches=per_name, toa_downward_flux=top_down, rays_per_column=per_batch * n_batches,
               batch_count=n_batches, seed=seed, mode=scene.mode, scattering_events=int(events),
               wall_time=time.perf_counter() - started, cpu_time=time.process_time() - cpu_started,
               setup_cpu_time=setup_cpu)
    return out


def kernel_inputs(scene, planck_share=PLANCK_SHARE):
    """What the backward kernel reads.

    Parameters
    ----------
    scene : surrogate3d.solvers.thermal_montecarlo.CheckedScene
        Checked inputs (:func:`~surrogate3d.solvers.thermal_montecarlo.checked_scene`).
    planck_share : float
        As for :func:`spectral_proposal`.

    Returns
    -------
    medium, boundaries, planck : namedtuple
        The :class:`~surrogate3d.solvers._thermal_kernel.Medium` (cloud absorption and
        scattering coefficients [m-1] and asymmetry per band and cell),
        :class:`~surrogate3d.solvers._thermal_kernel.Boundaries` and
        :class:`~surrogate3d.solvers._thermal_kernel.PlanckTable` (covering every
        temperature of the scene).
    cdf : ndarray (2, ninterval)
        The cumulative spectral proposals of :func:`spectral_proposal`.

    Examples
    --------
    >>> from surrogate3d.scenes.longwave_optics import SpectralIntervals
    >>> from surrogate3d.solvers.thermal_montecarlo import checked_scene
    >>> window = SpectralIntervals(np.array([80000.0]), np.array([125000.0]), np.array([0]))
    >>> scene = checked_scene(np.full((1, 2), 1e-4), window, 0.0, 0.0, 0.0, np.full((2, 1, 1), 280.0), 290.0, 1.0,
    ...                       [0.0, 500.0, 1000.0], 100.0, 100.0, "full_3d", None)
    >>> medium, boundaries, planck, cdf = kernel_inputs(scene)
    >>> medium.cloud.shape, cdf.tolist()
    ((1, 2, 1, 1, 3), [[1.0], [1.0]])
    """
    temperatures = np.concatenate([scene.t_air.ravel(), scene.t_surface.ravel(),
                                   [scene.t_top] if scene.t_top > 0.0 else []])
    table = planck_table(scene.low, scene.high, float(temperatures.min()), float(temperatures.max()))
    cloud_abs = scene.ext * (1.0 - scene.ssa)
    cloud = np.ascontiguousarray(np.stack([cloud_abs, scene.ext * scene.ssa, scene.asym], axis=-1))
    medium = Medium(np.ascontiguousarray(scene.gas), cloud, scene.band_of, np.ascontiguousarray(scene.t_air),
                    np.ascontiguousarray(scene.z), scene.dx, scene.dy)
    boundaries = Boundaries(scene.t_surface, scene.emissivity, scene.t_top)
    cdf = spectral_proposal(scene.gas, cloud_abs.mean(axis=(2, 3)), scene.band_of, scene.t_air.mean(axis=(1, 2)),
                            float(scene.t_surface.mean()), float(scene.emissivity.mean()), scene.t_top, scene.z, table,
                            planck_share)
    return medium, boundaries, PlanckTable(*table), cdf

