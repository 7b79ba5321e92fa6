"""Skill of the shipped shortwave models on scenes of cloud generators they never saw.

The shipped corrections (``models/default``) were trained on scenes of surrogate3d's own
generator.  This benchmark builds scenes with four generators written from scratch here,
without reference to that generator, runs them through the normal pipeline (``simulate``,
``pairs``, ``score``, the commands of the model card) and prints the skill per target and
per generator of the models and of the baselines, with the share of columns the models
flag as outside their training envelope.

The generators (liquid clouds only; every size in metres, liquid water in kg m-3):

* ``foreign-poisson-bubbles``: Poisson-placed cumulus bodies with dome tops and flat
  bases, radii from a lognormal, liquid water increasing with height above the base.
* ``foreign-spectral-layer``: a layer cloud cut from an anisotropic Gaussian random field
  of our own spectral synthesis (power law, stretched and rotated), holes where the field
  is low, thicker and higher-topped where it is high.
* ``foreign-towers-under-deck``: small cumulus towers under a mid-level deck broken into
  periodic Voronoi cells, with gaps along the cell walls.
* ``foreign-sheared-band``: a meandering band of deep, tilted convective cores with a
  trailing layer of stratiform cloud on the side they lean to.

Every scene has a random optics choice (two bands with a near-infrared vapour absorber of
random strength, or the visible band alone), a surface of a random kind, a droplet number
that sets the effective radius from the liquid water, and a stretched vertical grid.

Every scene also carries what a longwave run needs, drawn from a second random stream of
its seed (so the shortwave scene is the same with or without them): a constant-lapse-rate
air temperature, a relative humidity falling from a surface value to a free-tropospheric
one (saturated in cloud), and a skin temperature and emissivity by surface kind.  With
``--longwave`` the shipped longwave models (``models/longwave``) are scored too, through
the commands of their model card (``simulate --spectrum longwave``, ``pairs --spectrum
longwave``, ``score``), in a second table.

Usage::

    python benchmarks/bench_foreign_scenes.py --out DIR [--scenes-per-generator 4] \
        [--photons 600000] [--jobs 2] [--seed 11] [--quick] [--models FILE ...] \
        [--longwave] [--longwave-photons 1500000] [--longwave-models FILE ...]

Writes ``DIR/archive`` (scenes and their runs), ``DIR/pairs.nc``, ``DIR/score-<model>``
(the reports of ``surrogate3d score``), ``DIR/pictures`` (one scene per generator) and
``DIR/summary.md`` (the printed tables); with ``--longwave`` also
``DIR/pairs-longwave.nc`` and ``DIR/score-longwave-<model>``.  An interrupted run
continues where it stopped: scene files already written are kept and ``simulate`` keeps
its finished runs.
"""

import argparse
import io
import os
import subprocess
import sys
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
from scipy.spatial import cKDTree

import surrogate3d
from surrogate3d._atomic import write_bytes_atomic, write_text_atomic
from surrogate3d.archive import write_scene
from surrogate3d.scenes import make_scene
from surrogate3d.scenes.optics import (cloud_extinction, cloud_single_scattering, gas_absorption_layer_optical_depth,
                                       mix_optics, rayleigh_layer_optical_depth, solar_weights)

#: Domain side [m]: the shipped model's features reach 5 km, a quarter of it.
DOMAIN = 20000.0
#: Cell size [m] of the real run (200 x 200 columns) and of ``--quick`` (80 x 80 columns).
CELL, QUICK_CELL = 100.0, 250.0
QUICK_PHOTONS = 20000
ZENITHS = ("10", "35", "55", "75")
REPOSITORY = Path(__file__).resolve().parents[1]
RECIPE = REPOSITORY / "training" / "features.toml"
DEFAULT_MODELS = tuple(str(REPOSITORY / "models" / "default" / f"{name}.coefficients.json")
                       for name in ("boosted", "ridge"))
BASELINES = ("tilted independent column", "non-local independent pixel", "direct-beam prior")
TARGET_LABELS = {"surface_downward_flux": "sfc total", "surface_downward_direct_flux": "sfc direct",
                 "surface_downward_diffuse_flux": "sfc diffuse", "toa_upward_flux": "TOA up",
                 "atmosphere_absorption": "absorption"}
DEFAULT_LONGWAVE_MODELS = tuple(str(REPOSITORY / "models" / "longwave" / f"{name}.coefficients.json")
                                for name in ("boosted", "ridge"))
LONGWAVE_BASELINES = ("effective cloud fraction",)
#: The four longwave targets the shipped models correct (the air's net absorption is not
#: among them: its benchmarks are too noisy per host column, models/longwave/MODEL_CARD.md).
LONGWAVE_TARGET_LABELS = {"longwave_surface_downward_flux": "sfc down", "longwave_surface_upward_flux": "sfc up",
                          "longwave_toa_upward_flux": "top up", "longwave_surface_net_absorption": "sfc net"}
#: Options of the model card's ``simulate --spectrum longwave``: spectral intervals of at
#: most 50 cm-1 and its photons per run (the backward estimate keeps its default rays).
LONGWAVE_RESOLUTION, LONGWAVE_PHOTONS = 50, 1500000
QUICK_LONGWAVE_PHOTONS = 50000

#: Adiabatic increase of liquid water with height above cloud base [kg m-3 per m]: about
#: 2 g m-3 per km in a warm boundary layer, less in colder air aloft (from memory).
ADIABATIC_RATE = 2.0e-6
#: Ceiling of the liquid water content [kg m-3], a generous one for deep convective cores.
LWC_CEILING = 3.0e-3
WATER_DENSITY = 1000.0
#: Ratio of volume-mean to effective radius cubed of droplet spectra, k = 0.8 for maritime
#: and 0.67 for continental clouds (Martin, Johnson and Spice 1994); one value in between.
SPECTRAL_SHAPE_K = 0.75
#: Surface kinds: visible and near-infrared albedo ranges [1] (typical values, from memory).
SURFACES = {
    "ocean": ((0.03, 0.07), (0.03, 0.06)),
    "forest": ((0.03, 0.06), (0.20, 0.32)),
    "cropland": ((0.05, 0.10), (0.28, 0.40)),
    "desert": ((0.22, 0.35), (0.35, 0.50)),
    "snow": ((0.60, 0.70), (0.40, 0.55)),
}
#: Temperature decrease with height [K m-1] of every scene's air, the standard
#: atmosphere's tropospheric lapse rate (ICAO 1993), also used for its hydrostatic pressure.
LAPSE_RATE = 6.5e-3
#: Surface kinds in the longwave: ranges of the skin minus surface-air temperature [K]
#: (cool ocean skin; land warmer, desert much warmer in sunshine; snow colder, radiating),
#: of the broadband emissivity [1] and of the relative humidity of the surface air [1]
#: (typical values, from memory).
LONGWAVE_SURFACES = {
    "ocean": ((-1.5, 1.0), (0.985, 0.995), (0.70, 0.95)),
    "forest": ((-1.0, 3.0), (0.97, 0.99), (0.60, 0.90)),
    "cropland": ((-1.0, 5.0), (0.95, 0.98), (0.50, 0.85)),
    "desert": ((2.0, 10.0), (0.90, 0.94), (0.15, 0.45)),
    "snow": ((-4.0, -1.0), (0.97, 0.995), (0.70, 0.95)),
}


@dataclass
class Environment:
    """What a scene draws besides its clouds.

    Attributes
    ----------
    bands : tuple of str
        ``("visible", "near_infrared")`` or ``("visible",)``.
    vapour_optical_depth : float
        Near-infrared absorption optical depth of the whole column [1].
    vapour_scale_height : float
        Scale height of the absorber [m].
    surface : str
        Key of :data:`SURFACES`.
    surface_albedo : numpy.ndarray
        Albedo per band [1].
    droplet_number : float
        Cloud droplet number concentration [m-3].
    surface_air_temperature : float
        Air temperature at the surface [K], for the hydrostatic pressure and the longwave
        temperature profile.
    """

    bands: tuple
    vapour_optical_depth: float
    vapour_scale_height: float
    surface: str
    surface_albedo: np.ndarray
    droplet_number: float
    surface_air_temperature: float


@dataclass
class LongwaveSurface:
    """What a scene draws for the longwave besides the shortwave :class:`Environment`.

    Attributes
    ----------
    skin_temperature : float
        Radiative temperature of the surface [K].
    emissivity : float
        Broadband longwave emissivity of the surface [1].
    surface_humidity : float
        Relative humidity of the surface air [1].
    free_humidity : float
        Relative humidity the profile tends to aloft [1].
    moist_scale_height : float
        Height over which the relative humidity falls toward ``free_humidity`` [m].
    """

    skin_temperature: float
    emissivity: float
    surface_humidity: float
    free_humidity: float
    moist_scale_height: float


def draw_longwave_surface(rng, env):
    """Draw the skin temperature, emissivity and humidity profile of one scene.

    The skin temperature is the surface air temperature plus an offset, and the emissivity
    and surface relative humidity come from the ranges of the surface kind
    (:data:`LONGWAVE_SURFACES`); the relative humidity aloft is 0.15-0.45, reached over
    a scale height of 1-3 km.

    Parameters
    ----------
    rng : numpy.random.Generator
        A stream of its own, so that the shortwave draws stay those of the scene seed.
    env : Environment
        The scene's shortwave draws (surface kind and surface air temperature).

    Returns
    -------
    LongwaveSurface
    """
    offset, emissivity, humidity = LONGWAVE_SURFACES[env.surface]
    return LongwaveSurface(env.surface_air_temperature + rng.uniform(*offset), float(rng.uniform(*emissivity)),
                           float(rng.uniform(*humidity)), float(rng.uniform(0.15, 0.45)),
                           float(rng.uniform(1000.0, 3000.0)))


def saturation_specific_humidity(temperature, pressure):
    """Specific humidity of air saturated over liquid water.

    Parameters
    ----------
    temperature : numpy.ndarray
        Air temperature [K].
    pressure : numpy.ndarray
        Air pressure [Pa].

    Returns
    -------
    numpy.ndarray
        [kg kg-1].

    Examples
    --------
    At 20 degC and 1000 hPa, about 14.7 g kg-1:

    >>> round(float(saturation_specific_humidity(np.array(293.15), np.array(1e5))) * 1e3, 1)
    14.7

    References
    ----------
    Bolton, D. (1980), The computation of equivalent potential temperature, Mon. Wea. Rev.
    108, 1046-1053 (saturation vapour pressure, his eq. 10).
    """
    celsius = temperature - 273.15
    vapour = 611.2 * np.exp(17.67 * celsius / (celsius + 243.5))
    ratio = 0.622  # molar mass of water over that of dry air
    return ratio * vapour / (pressure - (1.0 - ratio) * vapour)


def longwave_state(z_edge, pressure, lwc, env, surface):
    """Air temperature and specific humidity of a scene.

    The temperature falls at :data:`LAPSE_RATE` from the surface air temperature; the
    relative humidity is ``RH_free + (RH_sfc - RH_free) exp(-z / H)`` at layer-centre
    height ``z``, and 1 in cells with liquid water (cloud is saturated air).

    Parameters
    ----------
    z_edge : numpy.ndarray, shape (nz + 1,)
        Layer edges [m].
    pressure : numpy.ndarray, shape (nz + 1,)
        Pressure at the edges [Pa].
    lwc : numpy.ndarray, shape (nz, ny, nx)
        Liquid water content [kg m-3].
    env : Environment
    surface : LongwaveSurface

    Returns
    -------
    air_temperature : numpy.ndarray, shape (nz,)
        [K].
    specific_humidity : numpy.ndarray, shape (nz, ny, nx)
        [kg kg-1].
    """
    z = 0.5 * (z_edge[1:] + z_edge[:-1])
    temperature = env.surface_air_temperature - LAPSE_RATE * z
    layer_pressure = np.sqrt(pressure[1:] * pressure[:-1])  # mean of the logarithm, as in hydrostatic air
    humidity = surface.free_humidity + (surface.surface_humidity - surface.free_humidity) * np.exp(
        -z / surface.moist_scale_height)
    saturated = saturation_specific_humidity(temperature, layer_pressure)[:, None, None]
    relative = np.where(lwc > 0.0, 1.0, humidity[:, None, None])
    return temperature, relative * saturated


def draw_environment(rng):
    """Draw optics, surface and droplet number of one scene.

    Two bands (visible and near infrared) in 70 % of the scenes, else the visible band
    alone; a near-infrared vapour absorber of column optical depth 0.02-0.4 and scale
    height 1.5-2.5 km; a surface kind of :data:`SURFACES` with its albedo per band drawn
    from its ranges; a droplet number of 25-250 cm-3 (log-uniform); a surface air
    temperature of 283-302 K.

    Parameters
    ----------
    rng : numpy.random.Generator

    Returns
    -------
    Environment
    """
    bands = ("visible", "near_infrared") if rng.random() < 0.7 else ("visible",)
    surface = str(rng.choice(list(SURFACES)))
    albedo = np.array([rng.uniform(*SURFACES[surface][b]) for b in range(len(bands))])
    # From clean maritime to continental droplet numbers: effective radii of about 6-15 um
    # at 0.1-1 g m-3 of liquid water follow from them.
    number = float(np.exp(rng.uniform(np.log(25e6), np.log(250e6))))
    return Environment(bands, float(rng.uniform(0.02, 0.4)), float(rng.uniform(1500.0, 2500.0)), surface,
                       albedo, number, float(rng.uniform(283.0, 302.0)))


def stretched_edges(top, layers, bottom):
    """Layer edges whose thickness grows geometrically from the surface.

    Parameters
    ----------
    top : float
        Height of the top edge [m].
    layers : int
        Number of layers.
    bottom : float
        Thickness of the lowest layer [m]; ``bottom * layers < top``.

    Returns
    -------
    numpy.ndarray, shape (layers + 1,)
        Edges [m], from 0 to ``top``.

    Examples
    --------
    >>> edges = stretched_edges(4000.0, 30, 50.0)
    >>> round(float(edges[1]), 1), float(edges[-1]), bool(np.all(np.diff(edges, 2) > 0))
    (50.0, 4000.0, True)
    """
    low, high = 1.0 + 1e-9, 2.0
    for _ in range(100):  # bisection on the growth ratio r of bottom * (r**n - 1) / (r - 1) = top
        ratio = 0.5 * (low + high)
        if bottom * (ratio ** layers - 1.0) / (ratio - 1.0) > top:
            high = ratio
        else:
            low = ratio
    edges = np.concatenate([[0.0], np.cumsum(bottom * ratio ** np.arange(layers))])
    return edges * (top / edges[-1])


def hydrostatic_pressure(z_edge, surface_temperature, lapse_rate=LAPSE_RATE, surface_pressure=101325.0):
    """Pressure at heights in an atmosphere of constant lapse rate.

    Parameters
    ----------
    z_edge : numpy.ndarray
        Heights [m].
    surface_temperature : float
        [K].
    lapse_rate : float
        Temperature decrease with height [K m-1].
    surface_pressure : float
        [Pa].

    Returns
    -------
    numpy.ndarray
        Pressure [Pa].

    References
    ----------
    The barometric formula for a constant lapse rate, e.g. Wallace, J. M. and P. V. Hobbs
    (2006), Atmospheric Science, 2nd ed., Academic Press.
    """
    gravity, gas_constant = 9.80665, 287.05
    return surface_pressure * (1.0 - lapse_rate * z_edge / surface_temperature) ** (
        gravity / (gas_constant * lapse_rate))


def spectral_field(rng, n, cell, slope, outer_scale, stretch=1.0, angle=0.0):
    """Gaussian random field on a periodic square grid by spectral synthesis.

    White noise filtered in Fourier space to the power spectrum
    ``(k_a**2 + k_0**2) ** (-slope / 2)``, where ``k_a`` is the wavenumber in coordinates
    stretched by ``stretch`` along the direction ``angle`` and ``k_0 = 2 pi / outer_scale``
    flattens the spectrum at scales beyond the outer scale.

    Parameters
    ----------
    rng : numpy.random.Generator
    n : int
        Cells per side.
    cell : float
        Cell size [m].
    slope : float
        Exponent of the 2D power spectrum [1]; its azimuthal sum falls as ``k**(1 - slope)``.
    outer_scale : float
        Largest scale with power-law variance [m].
    stretch : float
        Elongation of the structures along ``angle`` [1], >= 1.
    angle : float
        Direction of elongation [rad], counterclockwise from +x.

    Returns
    -------
    numpy.ndarray, shape (n, n)
        Zero mean, unit standard deviation, indexed (y, x).

    References
    ----------
    Fourier filtering of white noise: common practice.
    """
    k = 2.0 * np.pi * np.fft.fftfreq(n, cell)
    ky, kx = np.meshgrid(k, k, indexing="ij")
    along = np.cos(angle) * kx + np.sin(angle) * ky
    across = -np.sin(angle) * kx + np.cos(angle) * ky
    k2 = (stretch * along) ** 2 + (across / stretch) ** 2 + (2.0 * np.pi / outer_scale) ** 2
    amplitude = k2 ** (-slope / 4.0)
    amplitude[0, 0] = 0.0
    field = np.fft.ifft2(np.fft.fft2(rng.standard_normal((n, n))) * amplitude).real
    return (field - field.mean()) / field.std()


def periodic_offset(a, b, period):
    """Shortest signed distance ``a - b`` on a circle of length ``period`` (same units).

    Examples
    --------
    >>> float(periodic_offset(19500.0, 500.0, 20000.0))
    -1000.0
    """
    return (a - b + 0.5 * period) % period - 0.5 * period


def adiabatic_slab(z_edge, base, top, rate):
    """Layer means of liquid water rising linearly from a base to a top, per column.

    Parameters
    ----------
    z_edge : numpy.ndarray, shape (nz + 1,)
        Layer edges [m].
    base, top : numpy.ndarray, shape (ny, nx)
        Cloud base and top [m]; no cloud where ``top <= base``.
    rate : float or numpy.ndarray (ny, nx)
        Increase of liquid water with height above the base [kg m-3 per m].

    Returns
    -------
    numpy.ndarray, shape (nz, ny, nx)
        Layer-mean liquid water [kg m-3]: the exact mean over each layer, so that thin
        clouds keep their liquid water path on a coarse grid.
    """
    z0, z1 = z_edge[:-1, None, None], z_edge[1:, None, None]
    lo = np.clip(base, z0, z1)
    hi = np.clip(np.maximum(top, base), z0, z1)
    integral = 0.5 * rate * ((hi - base) ** 2 - (lo - base) ** 2)
    return np.maximum(integral, 0.0) / (z1 - z0)


def effective_radius(lwc, droplet_number):
    """Droplet effective radius [m] from liquid water and droplet number.

    ``r_e = (3 LWC / (4 pi rho_w N k)) ** (1/3)``, with ``k`` the cube of the ratio of
    volume-mean to effective radius; clipped to 4-20 um.

    Parameters
    ----------
    lwc : numpy.ndarray
        Liquid water content [kg m-3].
    droplet_number : float
        Droplet number concentration [m-3].

    Returns
    -------
    numpy.ndarray
        [m]; 0 where there is no liquid water.

    Examples
    --------
    0.3 g m-3 of liquid water in 100 droplets per cm3:

    >>> round(float(effective_radius(np.array(0.3e-3), 100e6)) * 1e6, 1)
    9.8

    References
    ----------
    Martin, G. M., D. W. Johnson and A. Spice (1994), The measurement and
    parameterization of effective radius of droplets in warm stratocumulus clouds, J.
    Atmos. Sci. 51, 1823-1842.
    """
    radius = (3.0 * lwc / (4.0 * np.pi * WATER_DENSITY * droplet_number * SPECTRAL_SHAPE_K)) ** (1.0 / 3.0)
    return np.where(lwc > 0.0, np.clip(radius, 4e-6, 20e-6), 0.0)


def poisson_bubbles(rng, n, cell):
    """Poisson-placed cumulus bodies with dome tops and flat bases.

    Cloud centres are a Poisson process whose density gives a cover of 0.08-0.35 before
    overlap; each cloud has a lognormal radius (median 250-600 m, log standard deviation
    0.5), a depth of 0.5-1.3 times its diameter below a capping inversion 1.5-3 km above
    the scene's base, and a top ``base + depth (1 - (r/R)**2) ** q`` at distance ``r``
    from its axis (``q`` of 0.5-1: from an ellipsoid to a paraboloid).  Bases jitter by
    60 m about a scene base of 400-1500 m.  Liquid water rises at 30-70 % of the
    adiabatic rate, less toward the cloud's rim.

    Parameters
    ----------
    rng : numpy.random.Generator
    n : int
        Columns per side.
    cell : float
        Column size [m].

    Returns
    -------
    z_edge : numpy.ndarray
        Layer edges [m] (34-40 layers up to 1 km above the inversion).
    lwc : numpy.ndarray, shape (nz, n, n)
        Liquid water content [kg m-3].
    """
    scene_base = rng.uniform(400.0, 1500.0)
    inversion = scene_base + rng.uniform(1500.0, 3000.0)
    z_edge = stretched_edges(inversion + 1000.0, int(rng.integers(34, 41)), rng.uniform(50.0, 70.0))
    xy = (np.arange(n) + 0.5) * cell
    lwc = np.zeros((z_edge.size - 1, n, n))
    median = rng.uniform(250.0, 600.0)
    mean_area = np.pi * median ** 2 * np.exp(2.0 * 0.5 ** 2)  # of a lognormal radius
    count = rng.poisson(rng.uniform(0.08, 0.35) * DOMAIN ** 2 / mean_area)
    for _ in range(count):
        radius = min(median * np.exp(0.5 * rng.standard_normal()), 2500.0)
        base = scene_base + rng.normal(0.0, 60.0)
        depth = min(rng.uniform(0.5, 1.3) * 2.0 * radius, inversion - base)
        cx, cy = rng.uniform(0.0, DOMAIN, 2)
        # Only the columns of the cloud's bounding box, found through the periodic wrap.
        reach = int(np.ceil(radius / cell)) + 1
        ix = (int(cx / cell) + np.arange(-reach, reach + 1)) % n
        iy = (int(cy / cell) + np.arange(-reach, reach + 1)) % n
        r2 = (periodic_offset(xy[ix][None, :], cx, DOMAIN) ** 2 + periodic_offset(xy[iy][:, None], cy, DOMAIN) ** 2
              ) / radius ** 2
        inside = np.clip(1.0 - r2, 0.0, None)
        top = np.where(r2 < 1.0, base + depth * inside ** rng.uniform(0.5, 1.0), base)
        rate = ADIABATIC_RATE * rng.uniform(0.3, 0.7) * (1.0 - 0.5 * np.minimum(r2, 1.0))
        cloud = adiabatic_slab(z_edge, base, top, rate)
        block = np.ix_(np.arange(z_edge.size - 1), iy, ix)
        lwc[block] = np.maximum(lwc[block], cloud)
    return z_edge, lwc


def spectral_layer(rng, n, cell):
    """A layer cloud with holes from a stretched, rotated Gaussian random field.

    The field (2D spectral exponent 2.4-3.4, outer scale 4-15 km, stretched 1-3 times
    along a random direction) is cloudy above its ``1 - f`` quantile (cloud cover ``f``
    of 0.55-0.97).  Where cloudy, the thickness grows with the field's excess over the
    threshold, ``H (1 - exp(-excess / 0.6))`` with ``H`` of 200-700 m, so the top varies
    and the cloud thins toward its holes; the base undulates by 30 m about 300-1500 m.
    Liquid water rises at 60-95 % of the adiabatic rate.

    Parameters
    ----------
    rng : numpy.random.Generator
    n : int
        Columns per side.
    cell : float
        Column size [m].

    Returns
    -------
    z_edge : numpy.ndarray
        Layer edges [m] (30-38 layers up to 1.5-2.5 km above the thickest top).
    lwc : numpy.ndarray, shape (nz, n, n)
        Liquid water content [kg m-3].
    """
    field = spectral_field(rng, n, cell, rng.uniform(2.4, 3.4), rng.uniform(4000.0, 15000.0),
                           rng.uniform(1.0, 3.0), rng.uniform(0.0, np.pi))
    excess = field - np.quantile(field, 1.0 - rng.uniform(0.55, 0.97))
    thickness = np.where(excess > 0.0, rng.uniform(200.0, 700.0) * (1.0 - np.exp(-excess / 0.6)), 0.0)
    base = rng.uniform(300.0, 1500.0) + 30.0 * spectral_field(rng, n, cell, 3.0, 3000.0)
    z_edge = stretched_edges(float((base + thickness).max()) + rng.uniform(1500.0, 2500.0),
                             int(rng.integers(30, 39)), rng.uniform(40.0, 60.0))
    return z_edge, adiabatic_slab(z_edge, base, base + thickness, ADIABATIC_RATE * rng.uniform(0.6, 0.95))


def towers_under_deck(rng, n, cell):
    """Small cumulus towers under a mid-level deck broken into Voronoi cells.

    Towers: a Gaussian random field dominated by scales under its outer scale of 0.8-2 km
    is cloudy above its ``1 - f`` quantile (cover ``f`` of 0.06-0.25); a tower's top rises
    with the square root of the field's excess, up to 0.6-2 km above a base of
    500-1200 m.  Deck: periodic Voronoi cells around Poisson points (mean cell size 1.5-4
    km), 200-600 m thick before each cell's scaling by 0.5-1.2, with its base at 3-5 km, thinning
    toward the cell walls and open within 60-300 m of them.  Liquid water rises at 50-90 %
    of the adiabatic rate in the towers, 30-60 % in the colder deck.

    Parameters
    ----------
    rng : numpy.random.Generator
    n : int
        Columns per side.
    cell : float
        Column size [m].

    Returns
    -------
    z_edge : numpy.ndarray
        Layer edges [m] (38-44 layers up to 1 km above the deck).
    lwc : numpy.ndarray, shape (nz, n, n)
        Liquid water content [kg m-3].
    """
    field = spectral_field(rng, n, cell, 3.0, rng.uniform(800.0, 2000.0))
    excess = np.clip(field - np.quantile(field, 1.0 - rng.uniform(0.06, 0.25)), 0.0, None)
    tower_base = rng.uniform(500.0, 1200.0)
    tower_top = tower_base + rng.uniform(600.0, 2000.0) * np.sqrt(excess / max(excess.max(), 1e-12))

    size = rng.uniform(1500.0, 4000.0)
    seeds = rng.uniform(0.0, DOMAIN, (max(int(rng.poisson((DOMAIN / size) ** 2)), 4), 2))
    xy = (np.arange(n) + 0.5) * cell
    gx, gy = np.meshgrid(xy, xy)
    distance, nearest = cKDTree(seeds, boxsize=DOMAIN).query(np.column_stack([gx.ravel(), gy.ravel()]), k=2)
    # Half the difference of the two nearest distances: the distance to the cell wall.
    wall = (0.5 * (distance[:, 1] - distance[:, 0])).reshape(n, n)
    cell_scale = rng.uniform(0.5, 1.2, len(seeds))[nearest[:, 0]].reshape(n, n)
    gap = rng.uniform(60.0, 300.0)
    deck_thickness = rng.uniform(200.0, 600.0) * cell_scale * np.sqrt(np.clip((wall - gap) / 400.0, 0.0, 1.0))
    deck_base = rng.uniform(3000.0, 5000.0) + np.zeros((n, n))

    z_edge = stretched_edges(float(deck_base.max() + deck_thickness.max()) + 1000.0, int(rng.integers(38, 45)),
                             rng.uniform(60.0, 80.0))
    lwc = adiabatic_slab(z_edge, tower_base, tower_top, ADIABATIC_RATE * rng.uniform(0.5, 0.9))
    lwc += adiabatic_slab(z_edge, deck_base, deck_base + deck_thickness, ADIABATIC_RATE * rng.uniform(0.3, 0.6))
    return z_edge, lwc


def sheared_band(rng, n, cell):
    """A meandering band of deep tilted convective cores with trailing stratiform cloud.

    The band runs along x, its axis at ``y0 + A sin(2 pi m x / L + phi)`` (``A`` up to 2
    km, ``m`` of 1 or 2, so it closes on the periodic domain).  Cores sit along it every
    2-4 km (Poisson), 400 m off the axis at most, with radius of median 0.6-1.2 km, base
    800-1500 m and top 5-9 km; each leans across the band by 0.15-0.5 m per m of height,
    its radius rounding off near the top, its liquid water rising at 8-20 % of the
    adiabatic rate and falling off as ``exp(-1.5 (r/R)**2)`` from its axis.  On the side
    the cores lean to, a stratiform layer trails behind the band: its liquid water, 0.05-0.3
    g m-3 at the axis, falls off exponentially over 4-7 km; it is broken where a random
    field (elongated along the band) is low, and spans from a base of 3.5-4.5 km, sinking
    by 1 km over those 4-7 km, to 1-2 km under the cores' mean top.  The scene is then
    turned by a multiple of 90 degrees and mirrored in half the cases.

    Parameters
    ----------
    rng : numpy.random.Generator
    n : int
        Columns per side.
    cell : float
        Column size [m].

    Returns
    -------
    z_edge : numpy.ndarray
        Layer edges [m] (40-46 layers up to 1.5 km above the highest core).
    lwc : numpy.ndarray, shape (nz, n, n)
        Liquid water content [kg m-3].
    """
    xy = (np.arange(n) + 0.5) * cell
    amplitude, waves, phase, y0 = rng.uniform(0.0, 2000.0), int(rng.integers(1, 3)), rng.uniform(0, 2 * np.pi), \
        rng.uniform(0.0, DOMAIN)
    axis = y0 + amplitude * np.sin(2.0 * np.pi * waves * xy / DOMAIN + phase)
    across = periodic_offset(xy[:, None], axis[None, :], DOMAIN)  # (y, x): signed distance from the axis
    lean = rng.choice([-1.0, 1.0]) * rng.uniform(0.15, 0.5)
    cores = max(int(rng.poisson(DOMAIN / rng.uniform(2000.0, 4000.0))), 1)
    median, base = rng.uniform(600.0, 1200.0), rng.uniform(800.0, 1500.0)
    tops = rng.uniform(5000.0, 9000.0, cores)
    z_edge = stretched_edges(float(tops.max()) + 1500.0, int(rng.integers(40, 47)), rng.uniform(70.0, 90.0))
    z = 0.5 * (z_edge[1:] + z_edge[:-1])
    lwc = np.zeros((z.size, n, n))
    for top in tops:
        radius = median * np.exp(0.4 * rng.standard_normal())
        along0, offset0 = rng.uniform(0.0, DOMAIN), rng.uniform(-400.0, 400.0)
        rate = ADIABATIC_RATE * rng.uniform(0.08, 0.2)
        for k in np.flatnonzero((z > base) & (z < top)):
            height = (z[k] - base) / (top - base)
            shrink = np.sqrt(1.0 - height ** 6)  # nearly a column, rounded off at the top
            r2 = (periodic_offset(xy[None, :], along0, DOMAIN) ** 2
                  + (across - offset0 - lean * (z[k] - base)) ** 2) / (radius * shrink) ** 2
            core = np.where(r2 < 2.0, rate * (z[k] - base) * np.exp(-1.5 * r2), 0.0)
            lwc[k] = np.maximum(lwc[k], core)
    width, peak = rng.uniform(4000.0, 7000.0), rng.uniform(0.05e-3, 0.3e-3)
    behind = np.sign(lean) * across
    breaks = spectral_field(rng, n, cell, 2.8, 6000.0, 2.0, 0.0) > rng.uniform(-1.0, 0.0)
    layer_base = rng.uniform(3500.0, 4500.0) - 1000.0 * np.clip(behind / width, 0.0, 1.0)
    layer_top = float(tops.mean()) - rng.uniform(1000.0, 2000.0)
    stratiform = np.where((behind > 0.0) & breaks, peak * np.exp(-behind / width), 0.0)
    inside = (z[:, None, None] > layer_base) & (z[:, None, None] < layer_top)
    lwc = np.maximum(lwc, np.where(inside, stratiform, 0.0))
    lwc = np.rot90(lwc, int(rng.integers(0, 4)), axes=(1, 2))
    if rng.random() < 0.5:
        lwc = lwc[:, :, ::-1]
    return z_edge, np.ascontiguousarray(lwc)


#: The generators by regime name.
GENERATORS = {
    "foreign-poisson-bubbles": poisson_bubbles,
    "foreign-spectral-layer": spectral_layer,
    "foreign-towers-under-deck": towers_under_deck,
    "foreign-sheared-band": sheared_band,
}


def build_scene(regime, seed, n, cell):
    """One scene of a generator, with its band optics, surface and longwave fields.

    Parameters
    ----------
    regime : str
        Key of :data:`GENERATORS`.
    seed : int
        Seed of the scene's draws.
    n : int
        Columns per side.
    cell : float
        Column size [m].

    Returns
    -------
    xarray.Dataset
        A scene of :func:`surrogate3d.scenes.make_scene`.
    """
    rng = np.random.default_rng(seed)
    env = draw_environment(rng)
    z_edge, lwc = GENERATORS[regime](rng, n, cell)
    lwc = np.minimum(lwc, LWC_CEILING)
    lwc[lwc < 1e-7] = 0.0  # below 0.1 mg m-3 a cell is clear air
    radius = effective_radius(lwc, env.droplet_number)
    dz = np.diff(z_edge)[:, None, None]
    pressure = hydrostatic_pressure(z_edge, env.surface_air_temperature)
    beta = cloud_extinction(lwc, np.where(lwc > 0.0, radius, 1.0))
    optics = []
    for band in env.bands:
        omega, g = cloud_single_scattering(band, np.where(lwc > 0.0, radius, 10e-6))
        rayleigh = rayleigh_layer_optical_depth(band, pressure)[:, None, None] / dz
        gas = 0.0
        if band == "near_infrared":
            gas = gas_absorption_layer_optical_depth(z_edge, env.vapour_optical_depth,
                                                     env.vapour_scale_height)[:, None, None] / dz
        optics.append(mix_optics(beta, omega, g, rayleigh, gas))
    ext, ssa, asym = (np.stack([o[i] for o in optics]) for i in range(3))
    # A stream of its own: the shortwave scene stays the one the seed gave before.
    surface = draw_longwave_surface(np.random.default_rng([seed, 1]), env)
    temperature, humidity = longwave_state(z_edge, pressure, lwc, env, surface)
    return make_scene(ext, ssa, asym, z_edge, cell, cell, surface_albedo=env.surface_albedo,
                      solar_weight=solar_weights(env.bands), band=list(env.bands), liquid_water_content=lwc,
                      effective_radius=radius, air_pressure=pressure, air_temperature=temperature,
                      specific_humidity=humidity, surface_temperature=surface.skin_temperature,
                      surface_longwave_emissivity=surface.emissivity,
                      attrs={"regime": regime, "seed": int(seed), "surface_kind": env.surface,
                             "droplet_number_per_m3": env.droplet_number,
                             "surface_air_temperature_K": env.surface_air_temperature,
                             "surface_relative_humidity": surface.surface_humidity,
                             "source": "benchmarks/bench_foreign_scenes.py"})


def save_picture(scene, path):
    """Write a PNG: map of column optical depth and a cross-section of liquid water.

    Parameters
    ----------
    scene : xarray.Dataset
    path : Path
        PNG file, written atomically.
    """
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    from matplotlib.colors import LogNorm

    dz = np.diff(scene["z_edge"].values)
    tau = np.einsum("b,bzyx,z->yx", scene["solar_weight"].values, scene["extinction"].values, dz)
    lwc = scene["liquid_water_content"].values * 1e3
    row = int(np.argmax((lwc * dz[:, None, None]).sum(axis=(0, 2))))
    km = scene["x"].values / 1000.0
    fig, (left, right) = plt.subplots(1, 2, figsize=(11, 4.6), gridspec_kw={"width_ratios": [1, 1.4]})
    image = left.pcolormesh(km, km, np.maximum(tau, 0.01), norm=LogNorm(0.1, max(float(tau.max()), 1.0)),
                            cmap="bone", shading="auto")
    left.axhline(km[row], color="tab:orange", lw=0.8)
    left.set(aspect="equal", xlabel="x [km]", ylabel="y [km]", title="column optical depth")
    fig.colorbar(image, ax=left, shrink=0.85)
    section = np.ma.masked_equal(lwc[:, row, :], 0.0)
    x_edge = np.arange(km.size + 1) * float(scene.attrs["dx_m"]) / 1000.0
    image = right.pcolormesh(x_edge, scene["z_edge"].values / 1000.0, section, cmap="PuBu", shading="flat")
    right.set(xlabel="x [km]", ylabel="height [km]", title=f"liquid water [g m-3] along y = {km[row]:.1f} km")
    fig.colorbar(image, ax=right, shrink=0.85)
    fig.suptitle(f"{scene.attrs['regime']} (seed {scene.attrs['seed']}, {', '.join(scene['band'].values)}, "
                 f"{scene.attrs['surface_kind']})")
    fig.tight_layout()
    buffer = io.BytesIO()
    fig.savefig(buffer, format="png", dpi=90)
    plt.close(fig)
    write_bytes_atomic(path, buffer.getvalue())


def write_scenes(archive, pictures, per_generator, seed, n, cell):
    """Write the scene files (keeping those already there) and one picture per generator.

    Parameters
    ----------
    archive, pictures : Path
        Directories (created).
    per_generator : int
        Scenes of each generator.
    seed : int
        Run seed; scene ``i`` of generator ``j`` gets seed ``seed * 10000 + 1000 j + i``.
    n : int
        Columns per side.
    cell : float
        Column size [m].

    Returns
    -------
    list of str
        One line per scene written: file, layers, cloud cover, optical depth, bands, surface
        (albedo, skin and surface air temperature, emissivity).
    """
    archive.mkdir(parents=True, exist_ok=True)
    pictures.mkdir(parents=True, exist_ok=True)
    lines = []
    for j, regime in enumerate(GENERATORS):
        for i in range(per_generator):
            scene_seed = seed * 10000 + 1000 * j + i
            path, picture = archive / f"{regime}_{scene_seed:08d}.nc", pictures / f"{regime}.png"
            if path.exists() and (i > 0 or picture.exists()):
                continue
            scene = build_scene(regime, scene_seed, n, cell)
            if i == 0 and not picture.exists():
                save_picture(scene, picture)
            if path.exists():
                continue
            write_scene(scene, path)
            dz = np.diff(scene["z_edge"].values)
            tau = np.einsum("b,bzyx,z->yx", scene["solar_weight"].values, scene["extinction"].values, dz)
            cover = float((scene["liquid_water_content"].values > 0).any(axis=0).mean())
            lines.append(f"{path.name}: {scene.sizes['z']} layers to {scene['z_edge'].values[-1] / 1000:.1f} km, "
                         f"cover {cover:.2f}, mean optical depth {tau.mean():.1f} (max {tau.max():.0f}), "
                         f"{'+'.join(scene['band'].values)}, {scene.attrs['surface_kind']} "
                         f"(albedo {', '.join(f'{a:.2f}' for a in scene['surface_albedo'].values[:, 0, 0])}; "
                         f"skin {float(scene['surface_temperature'].values.mean()):.1f} K under "
                         f"{scene.attrs['surface_air_temperature_K']:.1f} K air, emissivity "
                         f"{float(scene['surface_longwave_emissivity'].values.mean()):.3f}, surface relative "
                         f"humidity {scene.attrs['surface_relative_humidity']:.2f})")
    return lines


def scenes_without_longwave(archive):
    """Scene files of an archive written before this script drew longwave fields.

    Parameters
    ----------
    archive : Path
        Archive directory.

    Returns
    -------
    list of str
        Their file names.
    """
    import xarray as xr

    from surrogate3d.scenes.variables import missing_longwave_variables

    names = []
    for path in sorted(archive.glob("*.nc")):
        with xr.open_dataset(path) as scene:
            if missing_longwave_variables(scene):
                names.append(path.name)
    return names


def run_cli(*arguments):
    """Run ``python -m surrogate3d ARGUMENTS`` with this process's package; return wall seconds."""
    env = dict(os.environ)
    # The children import the same surrogate3d as this script (a worktree before an install).
    package_root = str(Path(surrogate3d.__file__).resolve().parents[1])
    env["PYTHONPATH"] = os.pathsep.join([package_root] + [p for p in [env.get("PYTHONPATH")] if p])
    command = [sys.executable, "-m", "surrogate3d", *map(str, arguments)]
    print("$ surrogate3d " + " ".join(map(str, arguments)), flush=True)
    start = time.perf_counter()
    subprocess.run(command, check=True, env=env)
    return time.perf_counter() - start


def _report_rows(report):
    """The W m-2 rows of a score report, whole set (regime ``all``) and per regime."""
    rows = pd.concat([pd.read_csv(report / "metrics.csv"), pd.read_csv(report / "breakdown_regime.csv")])
    rows = rows[rows["units"] == "W m-2"]
    return rows.assign(regime=np.where(rows["breakdown"] == "all", "all", rows["group"].astype(str)))


def _cells(rows, targets):
    """A predictor's cells per target of ``targets``: the skill and the RMSE in brackets
    ("-" where the skill is undefined)."""
    rows = rows.set_index("target")
    cells = []
    for target in targets:
        value = rows.at[target, "skill"] if target in rows.index else np.nan
        rmse = rows.at[target, "rmse"] if target in rows.index else np.nan
        cells.append(f"{value:.2f} ({rmse:.1f})" if np.isfinite(value) else f"- ({rmse:.1f})")
    return cells


def markdown_table(header, rows):
    """A Markdown table from a header and rows of text cells."""
    lines = ["| " + " | ".join(header) + " |", "|" + "|".join("---" for _ in header) + "|"]
    return "\n".join(lines + ["| " + " | ".join(row) + " |" for row in rows])


def skill_table(reports, targets=TARGET_LABELS, baselines=BASELINES):
    """Skill per target and regime of the models and the baselines, from score reports.

    Parameters
    ----------
    reports : dict of str -> Path
        Model name -> directory written by ``surrogate3d score`` for it (all on the same pairs).
    targets : dict of str -> str
        Target -> column label, in column order; the flagged share is the first target's.
    baselines : sequence of str
        Predictor labels of the baselines in the reports.

    Returns
    -------
    str
        A Markdown table: per regime (``all`` first), no correction, the baselines and every
        model, each as the skill of the W m-2 errors with their RMSE [W m-2] in brackets,
        then the noise floor (the skill of a perfect model against the noisy benchmarks);
        the models with the share of columns flagged outside their training envelope.
    """
    rows = {name: _report_rows(report) for name, report in reports.items()}
    envelopes = {name: pd.read_csv(report / "envelope.csv") for name, report in reports.items()}
    first = next(iter(rows.values()))
    regimes = ["all"] + sorted(set(first["regime"]) - {"all"})
    body = []
    for regime in regimes:
        here = first[first["regime"] == regime]
        reference = here[here["predictor"] == "no correction"]
        n = int(reference["n"].iloc[0])
        body.append([f"{regime} ({n} columns)", "no correction", *_cells(reference, targets), ""])
        for baseline in baselines:
            body.append(["", baseline, *_cells(here[here["predictor"] == baseline], targets), ""])
        for name, model_rows in rows.items():
            mine = model_rows[(model_rows["regime"] == regime) & ~model_rows["predictor"].isin(
                ("no correction", *baselines))]
            envelope = envelopes[name]
            share = envelope.loc[(envelope["group"] == regime)
                                 & (envelope["target"] == next(iter(targets))), "share_outside"]
            flagged = f"{share.iloc[0]:.0%}" if len(share) else "-"
            for predictor, one in mine.groupby("predictor", sort=False):
                body.append(["", predictor, *_cells(one, targets), flagged])
        floor = reference.set_index("target")["noise_floor_skill"]
        body.append(["", "noise floor", *(f"{floor[t]:.2f}" if np.isfinite(floor.get(t, np.nan)) else "-"
                                          for t in targets), ""])
    return markdown_table(["scenes", "predictor", *targets.values(), "flagged"], body)


def envelope_features(pairs_path, model_path, top=3):
    """Which features leave a model's training ranges, per regime.

    Parameters
    ----------
    pairs_path : Path
        Pairs table.
    model_path : str
        Coefficient file.
    top : int
        Features listed per regime.

    Returns
    -------
    list of str
        Per regime: the shares of columns flagged, outside a range and beyond the distance
        threshold, then the features most often outside their range with the share of
        columns, the scenes' values and the training range.
    """
    import xarray as xr

    from surrogate3d.runtime import load_coefficients

    model = load_coefficients(model_path)
    with xr.open_dataset(pairs_path) as pairs:
        X = pairs["features"].sel(feature=model.feature_names).values
        regime = pairs["regime"].values.astype(str)
    check = model.envelope_check(X)
    low, high = model.envelope.feature_min, model.envelope.feature_max
    outside = ~((X >= low) & (X <= high))
    lines = []
    for name in sorted(set(regime)):
        rows = regime == name
        share = outside[rows].mean(axis=0)
        worst = [k for k in np.argsort(-share)[:top] if share[k] > 0]
        described = "; ".join(f"{model.feature_names[k]} {share[k]:.0%} ({X[rows, k].min():.3g} to "
                              f"{X[rows, k].max():.3g}, trained {low[k]:.3g} to {high[k]:.3g})" for k in worst)
        lines.append(f"- {name}: flagged {check.outside[rows].mean():.0%}, outside a range "
                     f"{check.outside_range[rows].mean():.0%}, beyond the distance "
                     f"{check.beyond_distance[rows].mean():.0%}" + (f"; {described}" if described else ""))
    return lines


def score_models(models, pairs, out, spectrum, wall):
    """Run ``surrogate3d score`` for every model; return model name -> report directory.

    Parameters
    ----------
    models : sequence of str
        Coefficient files.
    pairs : Path
        Pairs table.
    out : Path
        Directory the reports go in, as ``score-<model name>`` (shortwave) or
        ``score-longwave-<model name>``.
    spectrum : str
        ``"shortwave"`` or ``"longwave"``.
    wall : dict
        Wall times [s], updated.

    Returns
    -------
    dict of str -> Path
    """
    reports = {}
    for model in models:
        name = Path(model).name.split(".")[0]
        label = name if spectrum == "shortwave" else f"longwave-{name}"
        reports[name] = out / f"score-{label}"
        wall[f"score {label}"] = run_cli("score", model, pairs, "--out", reports[name])
    return reports


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--out", required=True, help="directory for the archive, pairs, reports and summary")
    parser.add_argument("--scenes-per-generator", type=int, default=4)
    parser.add_argument("--photons", type=int, default=600000, help="photons per shortwave Monte Carlo run")
    parser.add_argument("--jobs", type=int, default=2, help="worker processes of simulate")
    parser.add_argument("--seed", type=int, default=11, help="seed of the scenes and of simulate")
    parser.add_argument("--quick", action="store_true",
                        help=f"smoke test: {int(DOMAIN / QUICK_CELL)}^2 columns of {QUICK_CELL:g} m, "
                             f"at most {QUICK_PHOTONS} shortwave and {QUICK_LONGWAVE_PHOTONS} longwave photons, "
                             "one scene per generator")
    parser.add_argument("--models", nargs="+", default=list(DEFAULT_MODELS),
                        help="coefficient files to score (default: the shipped boosted and ridge models)")
    parser.add_argument("--longwave", action="store_true",
                        help="also run the longwave and score the longwave models (second table)")
    parser.add_argument("--longwave-photons", type=int, default=LONGWAVE_PHOTONS,
                        help=f"photons per longwave Monte Carlo run (default: {LONGWAVE_PHOTONS}, the longwave "
                             "model card's)")
    parser.add_argument("--longwave-models", nargs="+", default=list(DEFAULT_LONGWAVE_MODELS),
                        help="longwave coefficient files to score (default: the shipped longwave boosted and "
                             "ridge models)")
    args = parser.parse_args(argv)

    out = Path(args.out)
    if args.longwave and (out / "archive").is_dir():
        old = scenes_without_longwave(out / "archive")
        if old:
            parser.error(f"--longwave: scene {old[0]} in {out / 'archive'} (and {len(old) - 1} more) was written "
                         "without longwave fields; give a new --out")
    cell = QUICK_CELL if args.quick else CELL
    photons = min(args.photons, QUICK_PHOTONS) if args.quick else args.photons
    longwave_photons = min(args.longwave_photons, QUICK_LONGWAVE_PHOTONS) if args.quick else args.longwave_photons
    per_generator = 1 if args.quick else args.scenes_per_generator
    start = time.perf_counter()
    for line in write_scenes(out / "archive", out / "pictures", per_generator, args.seed, int(DOMAIN / cell), cell):
        print(line)
    wall = {"scenes": time.perf_counter() - start}
    wall["simulate"] = run_cli("simulate", out / "archive", "--zenith", *ZENITHS, "--random-azimuth", "--photons",
                               photons, "--jobs", args.jobs, "--seed", args.seed)
    wall["pairs"] = run_cli("pairs", out / "archive", "--out", out / "pairs.nc", "--host-resolution", 1000,
                            "--recipe", RECIPE)
    reports = score_models(args.models, out / "pairs.nc", out, "shortwave", wall)
    parts = [
        "# Shipped models on foreign scenes", "",
        f"{per_generator} scene(s) per generator, {int(DOMAIN / cell)}^2 columns of {cell:g} m, suns at "
        f"{', '.join(ZENITHS)} degrees, {photons} photons per run, seed {args.seed}.  Skill = 1 - RMSE / "
        "RMSE(no correction) of the W m-2 errors after the consistency step (surrogate3d score), RMSE "
        "[W m-2] in brackets; '-' where the benchmarks do not resolve a 3D effect.  flagged: share of "
        "columns outside the model's training envelope.  noise floor: skill of a perfect model against "
        "the Monte Carlo noise of the benchmarks.", "",
        skill_table(reports), "",
        f"Features outside the training ranges of {Path(args.models[0]).name} (the share of columns, the "
        "scenes' range of the feature and the training range):", "",
        *envelope_features(out / "pairs.nc", args.models[0]), ""]
    write_summary(out, parts, wall, start)
    if args.longwave:
        wall["simulate longwave"] = run_cli("simulate", out / "archive", "--spectrum", "longwave", "--photons",
                                            longwave_photons, "--longwave-resolution", LONGWAVE_RESOLUTION,
                                            "--jobs", args.jobs, "--seed", args.seed)
        wall["pairs longwave"] = run_cli("pairs", out / "archive", "--spectrum", "longwave", "--out",
                                         out / "pairs-longwave.nc", "--host-resolution", 1000)
        reports = score_models(args.longwave_models, out / "pairs-longwave.nc", out, "longwave", wall)
        parts += [
            "## Longwave", "",
            f"The same scenes, longwave: {longwave_photons} photons per run, spectral intervals of at most "
            f"{LONGWAVE_RESOLUTION} cm-1, the backward estimate of the surface and top fluxes at its default "
            f"rays (models/longwave/MODEL_CARD.md, 'How it was made').  Skill and RMSE [W m-2] as above; "
            "flagged: share of columns outside the model's envelope for the surface downward flux (those get "
            "the effective-cloud-fraction prior).  The air's net absorption is not corrected by the models "
            "and left out.", "",
            skill_table(reports, LONGWAVE_TARGET_LABELS, LONGWAVE_BASELINES), "",
            f"Features outside the training ranges of {Path(args.longwave_models[0]).name}:", "",
            *envelope_features(out / "pairs-longwave.nc", args.longwave_models[0]), ""]
        write_summary(out, parts, wall, start)


def write_summary(out, parts, wall, start):
    """Print the summary and write it to ``out/summary.md``, wall times last.

    Parameters
    ----------
    out : Path
        Output directory.
    parts : list of str
        Lines of the summary.
    wall : dict of str -> float
        Wall time [s] of every step.
    start : float
        ``time.perf_counter()`` at the start of the run.
    """
    text = "\n".join(parts + ["Wall time: " + ", ".join(f"{k} {v:.0f} s" for k, v in wall.items())
                              + f"; total {time.perf_counter() - start:.0f} s", ""])
    print(text)
    write_text_atomic(out / "summary.md", text)


if __name__ == "__main__":
    main()
