"""The synthetic scene generator: random cloud fields of a named regime, turned into optics.

For each cloud layer of a regime (:mod:`surrogate3d.scenes.regimes`):

1. a Fourier-filtered Gaussian field with an ``E(k) ~ k**(-5/3)`` spectrum, or the
   field of the layer's structure (clusters, streets, cells, a cascade:
   :mod:`surrogate3d.scenes.structures`), is thresholded at the quantile that gives
   exactly the layer's cloud fraction;
2. cloud thickness is the layer thickness times an edge taper (thin at cloud edges)
   and a lognormal multiplier from a second field (cloud-top variability); the base
   height varies with a third field;
3. the liquid water content grows linearly with height above the local cloud base,
   as in an adiabatic cloud, and the effective radius follows from the water content
   and a droplet number (Martin et al. 1994) or is fixed;
4. the water content (times the structure's water multiplier, if any) is scaled so
   that the mean cloud optical depth of the layer's cloudy columns equals its target;
5. a tilted layer is shifted level by level in proportion to the height above its base.

Layers are merged, the standard atmosphere gives temperature and pressure, the
relative-humidity profile of Manabe and Wetherald (1967) the water vapour (saturated in
cloud), and
:mod:`surrogate3d.scenes.optics` gives the per-band extinction, single-scattering
albedo and asymmetry parameter of cloud, Rayleigh scattering and an optional gas (or a
named optics set, :mod:`surrogate3d.scenes.optics_sets`).  The surface albedo is
uniform or a pattern of two surfaces (:mod:`surrogate3d.scenes.surface`), whose
longwave emissivity shares the pattern; the surface temperature is uniform.  Nothing of
the longwave fields draws random numbers: the shortwave fields of a seed are those of
the generator before it had them.
"""

import json
import zlib

import numpy as np

from ..core.validation import check_integer, check_number
from ..errors import ParameterError
from . import optics
from .atmosphere import (MAX_HEIGHT, SEA_LEVEL_PRESSURE, SURFACE_RELATIVE_HUMIDITY, specific_humidity,
                         standard_humidity, standard_pressure, standard_profile, standard_temperature)
from .model import make_scene
from .optics_sets import get_optics_set
from .random_fields import gaussian_random_field, quantile_mask, random_generator
from .regimes import get_regime
from .surface import albedo_map, longwave_emissivity, surface_pattern_from_dict

#: Adiabatic rate of increase of liquid water content with height [kg m-3 m-1]: about
#: 2 g m-3 per km for cloud bases near 10 degC and 900 hPa (common practice; it
#: depends on cloud-base temperature and pressure, see e.g. Brenguier et al. 2000).
#: The generator rescales the water content to the target optical depth, so this sets
#: only the reported ``adiabatic_fraction``.
ADIABATIC_LWC_LAPSE_RATE = 2.0e-6
#: Default grid of the demo: 64 x 64 columns of 100 m and 40 layers.
DEFAULT_GRID = {"nx": 64, "ny": 64, "nz": 40, "dx": 100.0}
#: Default Lambertian surface albedo [1] (dark ocean, common practice).
DEFAULT_SURFACE_ALBEDO = 0.06
#: Default surface for the longwave emissivity: ocean, as the default albedo.
DEFAULT_SURFACE_EMISSIVITY = "ocean"
#: Allowed surface (skin) temperatures [K]: about the coldest and hottest measured on Earth
#: (common practice for a plausibility range).
SURFACE_TEMPERATURE_RANGE = (150.0, 350.0)
#: Default scale height of the optional gas absorber [m] (water vapour, common practice).
DEFAULT_GAS_SCALE_HEIGHT = 2000.0
#: Smallest effective radius of cloud droplets [m] (GCM cloud optics bound their
#: radius at a few micrometres; common practice).
MIN_EFFECTIVE_RADIUS = 2.5e-6
#: Default bands when neither ``bands`` nor ``optics_set`` is given.
DEFAULT_BANDS = ("visible", "near_infrared")
_MIN_THICKNESS = 1.0
#: Key of the random stream of the surface pattern (layer streams are keyed by layer
#: index and stream number, so this cannot collide with them).
_SURFACE_STREAM = 2 ** 32


def vertical_grid(nz=None, top=None, z_edge=None):
    """Layer-edge heights [m] from a layer count and top height, or checked explicit edges.

    Parameters
    ----------
    nz : int, optional
        Number of layers of a uniform grid, in [1, 1000].
    top : float, optional
        Height of the domain top [m].
    z_edge : array_like, optional
        Explicit, possibly non-uniform edges: strictly increasing from 0 m.

    Returns
    -------
    numpy.ndarray, shape (nz + 1,)
    """
    if z_edge is not None:
        edges = np.asarray(z_edge, dtype=np.float64)
        if edges.ndim != 1 or edges.size < 2:
            raise ParameterError(f"z_edge must list at least two heights; got {z_edge!r}")
        if nz is not None and edges.size != nz + 1:
            raise ParameterError(f"z_edge has {edges.size} heights but nz={nz} needs {nz + 1}")
        if not np.all(np.isfinite(edges)) or edges[0] != 0.0:
            raise ParameterError(f"z_edge must be finite and start at 0 m; got z_edge[0]={edges[0]!r}")
        step = np.diff(edges)
        if np.any(step <= 0):
            i = int(np.argmax(step <= 0)) + 1
            raise ParameterError(f"z_edge must increase strictly; z_edge[{i}]={edges[i]!r} follows {edges[i - 1]!r}")
        if edges[-1] > MAX_HEIGHT:
            raise ParameterError(f"z_edge must stay below {MAX_HEIGHT:.0f} m; got top {edges[-1]!r}")
        if top is not None and not np.isclose(float(top), edges[-1]):
            raise ParameterError(f"top={top!r} disagrees with the last z_edge {edges[-1]!r}")
        return edges
    nz = check_integer("nz", DEFAULT_GRID["nz"] if nz is None else nz, 1, 1000)
    top = check_number("top", top, 0.0, MAX_HEIGHT, low_open=True)
    return np.linspace(0.0, top, nz + 1)


def _per_band(name, value, band_names, low, high):
    """A per-band array from a scalar, a sequence in band order or a mapping band -> value."""
    if isinstance(value, dict):
        unknown = [k for k in value if k not in band_names]
        if unknown:
            raise ParameterError(f"{name} names band {unknown[0]!r}, which is not among bands {band_names}")
        missing = [b for b in band_names if b not in value]
        if missing:
            raise ParameterError(f"{name} gives no value for band {missing[0]!r}")
        values = [value[b] for b in band_names]
    elif np.ndim(value) == 0:
        values = [value] * len(band_names)
    else:
        values = list(value)
        if len(values) != len(band_names):
            raise ParameterError(f"{name} has {len(values)} values for {len(band_names)} bands {band_names}")
    return np.array([check_number(f"{name}[{b}]", v, low, high) for b, v in zip(band_names, values)])


def _gas_profiles(gas_absorption, band_names, z_edge):
    """Per-band layer absorption optical depth of the optional gas, shape (nband, nz)."""
    out = np.zeros((len(band_names), z_edge.size - 1))
    if not gas_absorption:
        return out, {}
    if not isinstance(gas_absorption, dict):
        raise ParameterError("gas_absorption must map band names to a column optical depth or to "
                             "{'column_optical_depth': ..., 'scale_height': ...}")
    used = {}
    for band, spec in gas_absorption.items():
        if band not in band_names:
            raise ParameterError(f"gas_absorption names band {band!r}, which is not among bands {band_names}")
        if isinstance(spec, dict):
            unknown = set(spec) - {"column_optical_depth", "scale_height"}
            if unknown:
                raise ParameterError(f"gas_absorption[{band}] has unknown key {sorted(unknown)[0]!r}; "
                                     "allowed: column_optical_depth, scale_height")
            tau = spec.get("column_optical_depth", 0.0)
            height = spec.get("scale_height", DEFAULT_GAS_SCALE_HEIGHT)
        else:
            tau, height = spec, DEFAULT_GAS_SCALE_HEIGHT
        tau = check_number(f"gas_absorption[{band}] column_optical_depth", tau, 0.0, 100.0)
        height = check_number(f"gas_absorption[{band}] scale_height", height, 0.0, 1e5, low_open=True)
        out[band_names.index(band)] = optics.gas_absorption_layer_optical_depth(z_edge, tau, height)
        used[band] = {"column_optical_depth": tau, "scale_height": height}
    return out, used


def _effective_radius(layer, lwc):
    """Effective radius [m] of cloudy cells: fixed, or from water content and droplet number.

    Martin et al. (1994): ``r_e**3 = 3 LWC / (4 pi rho_w k N)``, bounded below by
    :data:`MIN_EFFECTIVE_RADIUS`.
    """
    if layer.effective_radius is not None:
        return np.full(lwc.shape, float(layer.effective_radius))
    coeff = 3.0 / (4.0 * np.pi * optics.WATER_DENSITY * layer.droplet_spectrum_k * layer.droplet_number)
    return np.maximum(np.cbrt(coeff * lwc), MIN_EFFECTIVE_RADIUS)


def _tilt(lwc, r_eff, z_edge, layer, dx, direction):
    """Shift each level of a layer's water by ``tilt * (z - base_height)`` toward ``direction``.

    Whole-cell periodic shifts (rounded), so the water of every level is only moved:
    the domain-mean optical depth is unchanged.
    """
    z = 0.5 * (z_edge[1:] + z_edge[:-1])
    reach = layer.tilt * (z - layer.base_height)
    angle = np.radians(direction)
    shift_x = np.rint(reach * np.cos(angle) / dx).astype(int)
    shift_y = np.rint(reach * np.sin(angle) / dx).astype(int)
    for k in np.flatnonzero(lwc.any(axis=(1, 2))):
        lwc[k] = np.roll(lwc[k], (shift_y[k], shift_x[k]), axis=(0, 1))
        r_eff[k] = np.roll(r_eff[k], (shift_y[k], shift_x[k]), axis=(0, 1))
    return lwc, r_eff


def _layer_water(layer, z_edge, shape, dx, rng_of, upper_base=None):
    """Liquid water content and effective radius of one cloud layer, shape (nz, ny, nx).

    Returns ``(lwc, r_eff, cloudy_columns, adiabatic_fraction, base, drawn)``; ``r_eff``
    is 0 where ``lwc`` is 0, ``base`` is NaN in columns without cloud and ``drawn`` holds
    the values the structure and tilt drew from the seed.  ``upper_base`` (NaN where the
    layer above has no cloud) caps cloud tops below that layer's base.  With a tilt,
    ``cloudy_columns`` are the columns the tilted cloud touches.
    """
    ny, nx = shape
    nz = z_edge.size - 1
    top_domain = float(z_edge[-1])
    water_multiplier, drawn = None, {}
    if layer.structure is None:
        mask_field = gaussian_random_field(shape, dx, dx, rng_of(0), outer_scale=layer.outer_scale)
    else:
        pattern = layer.structure.realise(shape, dx, rng_of(0))
        mask_field, water_multiplier, drawn = pattern.field, pattern.water_multiplier, dict(pattern.drawn)
    mask, threshold = quantile_mask(mask_field, layer.cloud_fraction)
    if not mask.any():
        return np.zeros((nz, ny, nx)), np.zeros((nz, ny, nx)), mask, 0.0, np.full(shape, np.nan), drawn
    taper = np.ones(shape)
    if layer.edge_taper > 0 and np.isfinite(threshold):
        taper = np.sqrt(np.clip((mask_field - threshold) / layer.edge_taper, 0.0, 1.0))
    sigma = np.sqrt(np.log1p(layer.cloud_top_variability ** 2))
    multiplier = np.exp(sigma * gaussian_random_field(shape, dx, dx, rng_of(1), outer_scale=layer.outer_scale)
                        - 0.5 * sigma * sigma)
    base = layer.base_height + layer.base_variability * gaussian_random_field(
        shape, dx, dx, rng_of(2), outer_scale=layer.outer_scale)
    base = np.clip(base, 0.0, top_domain - 2.0 * _MIN_THICKNESS)
    top = base + np.maximum(layer.thickness * taper * multiplier, _MIN_THICKNESS)
    if upper_base is not None:
        # Keep the layers in separate grid cells: a lower cloud stops below the cell that
        # holds the upper layer's base (unless both share their base cell).  NaN sorts
        # last, so columns without upper cloud get the domain top: no cap.
        cap = z_edge[np.clip(np.searchsorted(z_edge, upper_base, side="right") - 1, 0, nz)]
        top = np.where(cap > base + _MIN_THICKNESS, np.minimum(top, cap), top)
    top = np.clip(top, base + _MIN_THICKNESS, top_domain)

    k_base = np.clip(np.searchsorted(z_edge, base, side="right") - 1, 0, nz - 1)
    k_top = np.clip(np.searchsorted(z_edge, top, side="left") - 1, k_base, nz - 1)
    k = np.arange(nz)[:, None, None]
    cloudy = mask[None] & (k >= k_base[None]) & (k <= k_top[None])
    kk, jj, ii = np.nonzero(cloudy)
    lower = np.maximum(z_edge[kk], base[jj, ii])
    upper = np.minimum(z_edge[kk + 1], top[jj, ii])
    # Height above the local base of the middle of the cloudy part of each cell: the
    # cell-mean of a water content growing linearly from the base.
    height = np.maximum(0.5 * (lower + upper) - base[jj, ii], 0.25 * _MIN_THICKNESS)
    adiabatic = ADIABATIC_LWC_LAPSE_RATE * height
    if water_multiplier is not None:
        adiabatic = adiabatic * water_multiplier[jj, ii]
    dz = z_edge[kk + 1] - z_edge[kk]
    column = jj * nx + ii
    columns = np.flatnonzero(mask.ravel())
    # Scale the water content until the mean optical depth of the cloudy columns meets
    # the target.  With r_e ~ LWC**(1/3) the optical depth grows as scale**(2/3) (as
    # scale where the radius floor or a fixed radius applies), so the update
    # scale *= ratio**1.5 converges in a few steps.
    scale = 1.0
    for _ in range(60):
        r_cells = _effective_radius(layer, adiabatic * scale)
        tau = np.bincount(column, weights=optics.cloud_extinction(adiabatic * scale, r_cells) * dz,
                          minlength=ny * nx)
        ratio = layer.mean_optical_depth / tau[columns].mean()
        if abs(ratio - 1.0) < 1e-12:
            break
        scale *= ratio ** (1.0 if layer.effective_radius is not None else 1.5)
    lwc = np.zeros((nz, ny, nx))
    r_eff = np.zeros((nz, ny, nx))
    lwc[kk, jj, ii] = adiabatic * scale
    r_eff[kk, jj, ii] = _effective_radius(layer, adiabatic * scale)
    if layer.tilt > 0:
        direction = layer.tilt_direction if layer.tilt_direction is not None else float(rng_of(3).uniform(0.0, 360.0))
        drawn["tilt_direction"] = float(direction)
        lwc, r_eff = _tilt(lwc, r_eff, z_edge, layer, dx, direction)
        mask = lwc.any(axis=0)
    return lwc, r_eff, mask, float(scale), np.where(mask, base, np.nan), drawn


def _humidity(z_edge, temperature, cloudy, surface_pressure, surface_relative_humidity):
    """Specific humidity [kg kg-1] of every cell, shape of ``cloudy``: the profile of
    Manabe and Wetherald (1967) in clear air, saturation at the layer's temperature and
    pressure in cloudy cells (cloud droplets coexist with saturated vapour)."""
    clear = standard_humidity(z_edge, surface_pressure, surface_relative_humidity)
    centres = 0.5 * (z_edge[1:] + z_edge[:-1])
    saturated = specific_humidity(temperature, standard_pressure(centres, surface_pressure), 1.0)
    return np.where(cloudy, saturated[:, None, None], clear[:, None, None])


def _regime_key(name):
    """A stable integer naming the regime's random streams (same seed, different regimes differ)."""
    return zlib.crc32(name.encode("utf-8"))


def generate_scene(regime, seed, *, nx=DEFAULT_GRID["nx"], ny=DEFAULT_GRID["ny"], nz=None, dx=DEFAULT_GRID["dx"],
                   top=None, z_edge=None, cloud_fraction=None, mean_optical_depth=None,
                   cloud_top_variability=None, bands=None, surface_albedo=DEFAULT_SURFACE_ALBEDO,
                   surface_pressure=SEA_LEVEL_PRESSURE, gas_absorption=None, optics_set=None,
                   surface_pattern=None, surface_temperature=None,
                   surface_longwave_emissivity=DEFAULT_SURFACE_EMISSIVITY,
                   surface_relative_humidity=SURFACE_RELATIVE_HUMIDITY, validate=True):
    """Generate a synthetic 3D cloud scene of a regime.

    Parameters
    ----------
    regime : str or Regime
        A name of :data:`surrogate3d.scenes.regimes.REGIMES` or a custom
        :class:`~surrogate3d.scenes.regimes.Regime`.
    seed : int
        Non-negative seed; the same (regime, seed, parameters) give the same scene.
    nx, ny : int
        Number of columns in x and y, in [1, 4096] (default 64).
    nz : int, optional
        Number of layers of a uniform vertical grid, in [1, 1000] (default 40).
    dx : float
        Horizontal cell size [m] in x and y, in (0, 100000] (default 100).
    top : float, optional
        Domain top [m]; default the regime's (4 km, 12 km for deep convection).
    z_edge : array_like, optional
        Explicit, possibly non-uniform layer edges [m] from 0, instead of ``nz``/``top``.
    cloud_fraction : float, optional
        Overrides the main layer's cloud fraction [1], in [0, 1].
    mean_optical_depth : float, optional
        Overrides the main layer's mean cloudy-column optical depth [1], > 0.
    cloud_top_variability : float, optional
        Overrides the main layer's thickness coefficient of variation [1], in [0, 5].
    bands : sequence of str, optional
        Bands of :data:`surrogate3d.scenes.optics.BANDS`, not overlapping (default
        ``visible`` and ``near_infrared``).
    surface_albedo : float, sequence or dict
        Lambertian surface albedo [1] in [0, 1]: one value, one per band, or a mapping
        band -> value (default 0.06).  With ``surface_pattern``, the first surface.
    surface_pressure : float
        Surface pressure [Pa] (default 101325).
    gas_absorption : dict, optional
        Band -> column absorption optical depth [1] within the domain, or band ->
        ``{"column_optical_depth": tau, "scale_height": H [m]}`` (H default 2000 m).
    optics_set : str, optional
        A name of :data:`surrogate3d.scenes.optics_sets.OPTICS_SETS`, which sets
        ``bands`` and ``gas_absorption`` (then neither may be given); stored in the
        scene attribute ``optics_set``.
    surface_pattern : SurfacePattern or dict, optional
        How a second surface shares the domain with the first
        (:class:`surrogate3d.scenes.surface.SurfacePattern`: ``kind`` uniform, patches
        or coastline, ``contrast_albedo``, ``scale`` [m], ``fraction`` [1],
        ``contrast_emissivity``); drawn from the seed.  Default: ``surface_albedo``
        everywhere.
    surface_temperature : float, optional
        Radiative (skin) temperature of the surface [K], in [150, 350]; default the
        standard atmosphere's at the surface, 288.15 K.  The air temperature keeps the
        standard profile.
    surface_longwave_emissivity : float or str
        Broadband longwave emissivity of the (first) surface [1], in [0, 1], or a kind of
        surface of :data:`surrogate3d.scenes.surface.SURFACE_LONGWAVE_EMISSIVITY`
        (default ``"ocean"``, 0.99).
    surface_relative_humidity : float
        Relative humidity at the surface [1] of the Manabe and Wetherald (1967) profile,
        in [0, 1] (default 0.77).
    validate : bool
        Run the scene validator on the result.

    Returns
    -------
    xarray.Dataset
        A scene (:func:`surrogate3d.scenes.make_scene`) with ``liquid_water_content``,
        ``effective_radius`` (0 where there is no water), ``air_temperature`` (the
        standard profile in every column, clouds included), ``air_pressure``,
        ``specific_humidity`` (saturated in cloudy cells), ``surface_temperature`` and
        ``surface_longwave_emissivity``, and attributes ``regime``, ``seed``, ``title``,
        ``cloud_fraction``, ``mean_optical_depth``, ``cloud_top_variability`` (of the
        main layer), ``total_cloud_fraction`` (projected, all layers),
        ``optics_set`` (when one is given) and ``generator_parameters`` (JSON of every
        parameter and of the values drawn from the seed).

    Raises
    ------
    surrogate3d.errors.ParameterError
        A parameter outside its range, naming it and the allowed range.

    References
    ----------
    Martin, G. M., D. W. Johnson and A. Spice (1994), The measurement and
    parameterization of effective radius of droplets in warm stratocumulus clouds,
    J. Atmos. Sci. 51, 1823-1842.
    Brenguier, J.-L. et al. (2000), Radiative properties of boundary layer clouds:
    droplet effective radius versus number concentration, J. Atmos. Sci. 57, 803-821.
    Manabe, S. and R. T. Wetherald (1967), Thermal equilibrium of the atmosphere with a
    given distribution of relative humidity, J. Atmos. Sci. 24, 241-259.

    Examples
    --------
    >>> scene = generate_scene("broken_stratocumulus", 0, nx=16, ny=16, nz=20)
    >>> scene.attrs["regime"], dict(scene.sizes)["band"]
    ('broken_stratocumulus', 2)
    """
    seed = check_integer("seed", seed, 0, 2**63 - 1)
    reg = get_regime(regime).with_overrides(cloud_fraction, mean_optical_depth, cloud_top_variability)
    nx = check_integer("nx", nx, 1, 4096)
    ny = check_integer("ny", ny, 1, 4096)
    dx = check_number("dx", dx, 0.0, 1e5, low_open=True)
    if z_edge is None and top is None:
        top = reg.top
    edges = vertical_grid(nz, top, z_edge)
    surface_pressure = check_number("surface_pressure", surface_pressure, 10000.0, 120000.0)
    if surface_temperature is None:
        surface_temperature = float(standard_temperature(0.0))
    surface_temperature = check_number("surface_temperature", surface_temperature, *SURFACE_TEMPERATURE_RANGE)
    emissivity = longwave_emissivity(surface_longwave_emissivity)
    surface_relative_humidity = check_number("surface_relative_humidity", surface_relative_humidity, 0.0, 1.0)
    if optics_set is not None:
        if bands is not None or gas_absorption is not None:
            raise ParameterError(f"optics_set={optics_set!r} sets bands and gas_absorption; give either "
                                 "optics_set or bands/gas_absorption, not both")
        chosen = get_optics_set(optics_set).generator_options()
        bands, gas_absorption = chosen["bands"], chosen["gas_absorption"]
    band_list = optics.get_bands(DEFAULT_BANDS if bands is None else bands)
    band_names = [b.name for b in band_list]
    albedo = _per_band("surface_albedo", surface_albedo, band_names, 0.0, 1.0)
    pattern = None
    if surface_pattern is not None:
        pattern = surface_pattern_from_dict(surface_pattern)
        contrast = _per_band("surface_pattern contrast_albedo", pattern.contrast_albedo, band_names, 0.0, 1.0)
        contrast_emissivity = emissivity if pattern.contrast_emissivity is None else \
            longwave_emissivity(pattern.contrast_emissivity, "surface_pattern contrast_emissivity")
    gas_tau, gas_used = _gas_profiles(gas_absorption, band_names, edges)
    for i, layer in enumerate(reg.layers):
        if layer.cloud_fraction > 0 and layer.base_height >= edges[-1]:
            raise ParameterError(f"top={edges[-1]:g} m is at or below the cloud base ({layer.base_height:g} m) of "
                                 f"regime {reg.name!r} layer {i}; raise top")

    shape = (ny, nx)
    nzl = edges.size - 1
    lwc = np.zeros((nzl, ny, nx))
    inverse_radius_weight = np.zeros((nzl, ny, nx))
    projected = np.zeros(shape, dtype=bool)
    fractions = []
    order = sorted(range(len(reg.layers)), key=lambda i: reg.layers[i].base_height)
    key = _regime_key(reg.name)
    bases = {}
    draws = {}
    for rank in reversed(range(len(order))):
        i = order[rank]
        layer = reg.layers[i]
        upper = bases.get(order[rank + 1]) if rank + 1 < len(order) else None
        layer_lwc, layer_r, mask, fraction, bases[i], draws[i] = _layer_water(
            layer, edges, shape, dx, lambda stream, i=i: random_generator(seed, key, i, stream), upper)
        lwc += layer_lwc
        with np.errstate(divide="ignore", invalid="ignore"):
            inverse_radius_weight += np.where(layer_lwc > 0, layer_lwc / layer_r, 0.0)
        projected |= mask
        fractions.append((i, fraction))
    with np.errstate(divide="ignore", invalid="ignore"):
        # Where layers share a cell, this radius keeps the extinction of the sum equal to
        # the sum of the extinctions.
        r_eff = np.where(lwc > 0, lwc / inverse_radius_weight, 0.0)

    temperature, pressure = standard_profile(edges, surface_pressure)
    humidity = _humidity(edges, temperature, lwc > 0, surface_pressure, surface_relative_humidity)
    dz = np.diff(edges)
    cloud_ext = optics.cloud_extinction(lwc, np.where(lwc > 0, r_eff, 1.0))
    cloudy = lwc > 0
    nband = len(band_list)
    ext = np.empty((nband, nzl, ny, nx))
    ssa = np.empty_like(ext)
    asym = np.empty_like(ext)
    for b, band in enumerate(band_list):
        omega_c = np.ones(cloud_ext.shape)
        g_c = np.zeros(cloud_ext.shape)
        omega_c[cloudy], g_c[cloudy] = optics.cloud_single_scattering(band, r_eff[cloudy])
        rayleigh = (optics.rayleigh_layer_optical_depth(band, pressure) / dz)[:, None, None]
        gas = (gas_tau[b] / dz)[:, None, None]
        ext[b], ssa[b], asym[b] = optics.mix_optics(cloud_ext, omega_c, g_c, rayleigh, gas)

    surface = albedo
    surface_emissivity = emissivity
    surface_record = None
    if pattern is not None:
        # The emissivity rides along as one more band, so it shares the albedo's pattern.
        both, drawn_surface = albedo_map(np.append(albedo, emissivity), np.append(contrast, contrast_emissivity),
                                         pattern, shape, dx, random_generator(seed, key, _SURFACE_STREAM))
        surface, surface_emissivity = both[:-1], both[-1]
        surface_record = {"kind": pattern.kind, "contrast_albedo": contrast.tolist(), "scale": pattern.scale,
                          "fraction": pattern.fraction, "contrast_emissivity": contrast_emissivity, **drawn_surface}

    main = reg.layers[0] if reg.layers else None
    parameters = {
        "regime": reg.as_dict(), "seed": seed, "nx": nx, "ny": ny, "dx": dx, "z_edge": edges.tolist(),
        "bands": band_names, "surface_albedo": albedo.tolist(), "surface_pressure": surface_pressure,
        "gas_absorption": gas_used, "adiabatic_lwc_lapse_rate": ADIABATIC_LWC_LAPSE_RATE,
        "adiabatic_fraction": [f for _, f in sorted(fractions)],
        "drawn": [draws[i] for i in sorted(draws)], "optics_set": optics_set, "surface_pattern": surface_record,
        "surface_temperature": surface_temperature, "surface_longwave_emissivity": emissivity,
        "surface_relative_humidity": surface_relative_humidity,
    }
    attrs = {
        "regime": reg.name,
        "seed": seed,
        "title": f"{reg.name} seed {seed}",
        "cloud_fraction": float(main.cloud_fraction) if main else 0.0,
        "mean_optical_depth": float(main.mean_optical_depth) if main else 0.0,
        "cloud_top_variability": float(main.cloud_top_variability) if main else 0.0,
        "total_cloud_fraction": float(projected.mean()),
        "generator": "surrogate3d.scenes.generate_scene",
        "generator_parameters": json.dumps(parameters, sort_keys=True),
    }
    if optics_set is not None:
        attrs["optics_set"] = optics_set
    return make_scene(ext, ssa, asym, edges, dx, dx, surface_albedo=surface,
                      solar_weight=optics.solar_weights(band_names), band=band_names,
                      liquid_water_content=lwc, effective_radius=r_eff, air_temperature=temperature,
                      air_pressure=pressure, specific_humidity=humidity, surface_temperature=surface_temperature,
                      surface_longwave_emissivity=surface_emissivity, attrs=attrs, validate=validate)
