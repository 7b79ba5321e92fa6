"""The delta-Eddington two-stream solver for plane-parallel columns, and its scene driver.

Each layer is delta-scaled (Joseph, Wiscombe and Weinman 1976), its reflectance and
transmittance for diffuse and for collimated (direct) incidence follow from the
Eddington coefficients of the general two-stream equations (Meador and Weaver 1980),
and the layers are combined with a Lambertian surface by the adding method. The
closed forms are written so that they stay finite and accurate for conservative
scattering (k -> 0), for layers of zero optical depth and at the resonance k mu0 = 1;
``docs/methods/delta-eddington.md`` derives them.

Conventions: layer index 0 is the BOTTOM layer (the scene's z order, z upward); edge
profiles have ``nz + 1`` values with index 0 at the surface. Fluxes are positive
magnitudes in fractions of the incident solar flux on the horizontal, ``S0 mu0 = 1``.
"Direct" means unscattered (``exp(-tau / mu0)`` of the true optical depth), as in the
Monte Carlo solvers: photons scattered into the truncated forward peak travel with the
delta-scaled beam inside the solver but are reported as diffuse.
"""

import sys
import time

import numpy as np
from tqdm import tqdm

from .. import __version__
from ..core.data_model import COLUMN_FLUXES
from ..core.run_result import make_run_result
from ..errors import ParameterError
from ..scenes import layer_thickness, validate_scene
from ..core.config import SOLAR_CONSTANT, TWO_STREAM_BLOCK_COLUMNS
from ..core.validation import check_array, check_number
from ._array_checks import as_float_array, broadcast_to_shape
from .heating import heating_rate
from .sun import check_sun

_LAYER_KEYS = ("diffuse_reflectance", "diffuse_transmittance", "direct_reflectance",
               "direct_diffuse_transmittance", "direct_transmittance")


def _one_minus_exp_over(x):
    """``(1 - exp(-x)) / x`` for x >= 0, equal to its limit 1 at x = 0 (no 0/0).

    ``expm1`` keeps full precision for every x > 0, down to the smallest subnormal.
    """
    return np.divide(-np.expm1(-x), x, out=np.ones_like(x), where=x > 0.0)


def _layers(tau, ssa, g, mu0):
    """Delta-Eddington layer reflectances and transmittances (arrays broadcast together).

    Returns R_dif, T_dif, R_dir, T_dir_dif, T_dir (delta-scaled direct beam) and the
    delta-scaled optical depth. See the module docs for the derivation.
    """
    # Joseph et al. (1976): forward-peak fraction f = g^2. A backscattering phase function
    # (g < 0) has no forward peak to truncate, so it is left unscaled.
    gpos = np.maximum(g, 0.0)
    f = gpos * gpos
    one_minus_ssa_f = 1.0 - ssa * f
    tau_s = one_minus_ssa_f * tau
    ssa_s = ssa * (1.0 - f) / one_minus_ssa_f
    # 1 - ssa_s from 1 - ssa directly, so that k is exactly 0 for conservative scattering.
    co_albedo_s = (1.0 - ssa) / one_minus_ssa_f
    g_s = g / (1.0 + gpos)

    # Eddington coefficients (Meador and Weaver 1980, Table 1).
    gamma1 = 0.25 * (7.0 - ssa_s * (4.0 + 3.0 * g_s))
    gamma2_eddington = -0.25 * (1.0 - ssa_s * (4.0 - 3.0 * g_s))
    # Guards against two Eddington defects: gamma2 < 0 (ssa_s (4 - 3 g_s) < 1) would make a
    # strongly absorbing layer reflect negatively, and gamma3 outside [0, 1] (only for
    # g mu0 < -2/3) would give negative source terms.
    gamma2 = np.maximum(gamma2_eddington, 0.0)
    gamma3 = np.clip(0.25 * (2.0 - 3.0 * g_s * mu0), 0.0, 1.0)
    gamma4 = 1.0 - gamma3
    # k^2 = gamma1^2 - gamma2^2 = 3 (1 - ssa_s)(1 - ssa_s g_s) for the Eddington coefficients.
    k = np.where(gamma2_eddington > 0.0, np.sqrt(3.0 * co_albedo_s * (1.0 - ssa_s * g_s)), gamma1)
    alpha1 = gamma1 * gamma4 + gamma2 * gamma3
    alpha2 = gamma1 * gamma3 + gamma2 * gamma4

    e = np.exp(-k * tau_s)
    e0 = np.exp(-tau_s / mu0)
    e2 = e * e
    sigma = tau_s * _one_minus_exp_over(2.0 * k * tau_s)          # (1 - e^2) / (2k)
    delta = 0.5 * (1.0 + e2) + gamma1 * sigma
    inv_delta = 1.0 / delta
    # (e - e0) / (1 - k mu0) as a divided difference: finite at the resonance k mu0 = 1.
    detune = np.abs(1.0 / mu0 - k) * tau_s
    q = np.maximum(e, e0) * tau_s * _one_minus_exp_over(detune) / mu0

    r_dif = gamma2 * sigma * inv_delta
    t_dif = e * inv_delta
    c = ssa_s / (1.0 + k * mu0) * inv_delta
    b3 = gamma3 - alpha2 * mu0
    a2k = alpha2 + k * gamma3
    r_dir = c * (a2k * sigma + b3 * e * q)
    t_dir_dif = c * (q * ((gamma4 + alpha1 * mu0) * delta + b3 * gamma2 * sigma)
                     - gamma2 * e * sigma * a2k / (gamma1 + k))
    return r_dif, t_dif, r_dir, t_dir_dif, e0, tau_s


def _solve_block(tau, ssa, g, mu0, albedo):
    """Adding solution for a block of columns: inputs (nz, m), mu0 and albedo (m,)."""
    nz, m = tau.shape
    r_dif, t_dif, r_dir, t_dd, t_dir, tau_s = _layers(tau, ssa, g, mu0)

    # Upward sweep: reflectance of everything below each edge, for diffuse light and for
    # the (delta-scaled) direct beam; the Lambertian surface treats both alike.
    below_dif = np.empty((nz + 1, m))
    below_dir = np.empty((nz + 1, m))
    multiple = np.empty((nz, m))
    below_dif[0] = albedo
    below_dir[0] = albedo
    for i in range(nz):
        mi = 1.0 / (1.0 - r_dif[i] * below_dif[i])
        multiple[i] = mi
        below_dif[i + 1] = r_dif[i] + t_dif[i] * t_dif[i] * below_dif[i] * mi
        below_dir[i + 1] = r_dir[i] + t_dif[i] * mi * (t_dir[i] * below_dir[i] + t_dd[i] * below_dif[i])

    # Direct beam at the edges: delta-scaled (solver) and unscattered (reported).
    beam_s = np.empty((nz + 1, m))
    beam = np.empty((nz + 1, m))
    beam_s[nz] = 1.0
    beam[nz] = 1.0
    beam_s[:nz] = np.exp(-np.cumsum(tau_s[::-1], axis=0)[::-1] / mu0)
    beam[:nz] = np.exp(-np.cumsum(tau[::-1], axis=0)[::-1] / mu0)

    # Downward sweep: diffuse downward flux at each edge, multiple reflections included.
    down = np.empty((nz + 1, m))
    down[nz] = 0.0
    for i in range(nz - 1, -1, -1):
        down[i] = (beam_s[i + 1] * t_dd[i] + down[i + 1] * t_dif[i]
                   + r_dif[i] * beam_s[i] * below_dir[i]) * multiple[i]
    up = beam_s * below_dir + down * below_dif
    net = beam_s + down - up
    return {
        "upward_flux": up,
        "downward_direct_flux": beam,
        "downward_diffuse_flux": beam_s - beam + down,
        "layer_absorption": net[1:] - net[:-1],
    }


def _solve_columns(tau, ssa, g, mu0, albedo):
    """Solve columns given as (ncol, nz) arrays; returns profiles as (nz [+1], ncol).

    Each block is transposed to the layer-first layout that the sweeps need while it is
    small enough to sit in cache.
    """
    ncol, nz = tau.shape
    out = {"upward_flux": np.empty((nz + 1, ncol)), "downward_direct_flux": np.empty((nz + 1, ncol)),
           "downward_diffuse_flux": np.empty((nz + 1, ncol)), "layer_absorption": np.empty((nz, ncol))}
    for start in range(0, ncol, TWO_STREAM_BLOCK_COLUMNS):
        cols = slice(start, min(start + TWO_STREAM_BLOCK_COLUMNS, ncol))
        block = _solve_block(np.ascontiguousarray(tau[cols].T), np.ascontiguousarray(ssa[cols].T),
                             np.ascontiguousarray(g[cols].T), mu0[cols], albedo[cols])
        for name, value in block.items():
            out[name][:, cols] = value
    return out


def _column_summary(profiles, axis):
    """Column fluxes (the archive's COLUMN_FLUXES) from edge profiles with layers on ``axis``."""
    up = profiles["upward_flux"]
    return {
        "toa_upward_flux": np.take(up, -1, axis=axis),
        "surface_downward_direct_flux": np.take(profiles["downward_direct_flux"], 0, axis=axis),
        "surface_downward_diffuse_flux": np.take(profiles["downward_diffuse_flux"], 0, axis=axis),
        "surface_upward_flux": np.take(up, 0, axis=axis),
        "atmosphere_absorption": profiles["layer_absorption"].sum(axis=axis),
    }


def _checked_optics(tau, ssa, g, mu0):
    """The optical arguments as float arrays, each checked against its allowed range."""
    tau = as_float_array("tau", tau)
    ssa = as_float_array("ssa", ssa)
    g = as_float_array("g", g)
    mu0 = as_float_array("mu0", mu0)
    check_array("tau", tau, 0.0, None)
    check_array("ssa", ssa, 0.0, 1.0)
    check_array("g", g, -1.0, 1.0, low_open=True, high_open=True)
    check_array("mu0", mu0, 0.0, 1.0, low_open=True)
    return tau, ssa, g, mu0


def layer_reflectance_transmittance(tau, ssa, g, mu0):
    """Delta-Eddington reflectance and transmittance of single homogeneous layers.

    Parameters
    ----------
    tau : array_like
        Layer optical depth [1], >= 0.
    ssa : array_like
        Single-scattering albedo [1], in [0, 1].
    g : array_like
        Asymmetry parameter of the phase function [1], in (-1, 1).
    mu0 : array_like
        Cosine of the solar zenith angle [1], in (0, 1].

    All four broadcast together.

    Returns
    -------
    dict of str -> ndarray
        ``diffuse_reflectance`` and ``diffuse_transmittance`` (isotropic diffuse
        incidence; the layer is the same seen from either side), ``direct_reflectance``
        and ``direct_diffuse_transmittance`` (scattered light leaving the top and the
        bottom for a unit incident flux on the horizontal), and ``direct_transmittance``
        (the delta-scaled direct beam ``exp(-tau' / mu0)``, which includes light
        scattered into the truncated forward peak). Over a black surface the layer's
        total transmittance is ``direct_diffuse_transmittance + direct_transmittance``.

    References
    ----------
    Joseph, J. H., W. J. Wiscombe and J. A. Weinman, 1976: The delta-Eddington
    approximation for radiative flux transfer. J. Atmos. Sci., 33, 2452-2459.

    Meador, W. E. and W. R. Weaver, 1980: Two-stream approximations to radiative
    transfer in planetary atmospheres: a unified description of existing methods and a
    new improvement. J. Atmos. Sci., 37, 630-643.

    Examples
    --------
    >>> out = layer_reflectance_transmittance(10.0, 1.0, 0.85, 0.5)
    >>> round(float(out["direct_reflectance"] + out["direct_diffuse_transmittance"]
    ...             + out["direct_transmittance"]), 12)
    1.0
    """
    tau, ssa, g, mu0 = _checked_optics(tau, ssa, g, mu0)
    try:
        shape = np.broadcast_shapes(tau.shape, ssa.shape, g.shape, mu0.shape)
    except ValueError:
        raise ParameterError(f"tau {tau.shape}, ssa {ssa.shape}, g {g.shape} and mu0 {mu0.shape} "
                             f"do not broadcast together") from None
    values = _layers(*(np.broadcast_to(a, shape) for a in (tau, ssa, g, mu0)))[:5]
    return dict(zip(_LAYER_KEYS, values))


def delta_eddington(tau, ssa, g, mu0, surface_albedo):
    """Delta-Eddington fluxes of plane-parallel columns over a Lambertian surface.

    Parameters
    ----------
    tau : array_like, shape (..., nz)
        Layer optical depth [1], >= 0; layer 0 is the BOTTOM layer.
    ssa : array_like, broadcastable to tau
        Single-scattering albedo [1], in [0, 1]; 1 (conservative scattering) is exact.
    g : array_like, broadcastable to tau
        Asymmetry parameter [1], in (-1, 1).
    mu0 : float or array_like, broadcastable to (...)
        Cosine of the solar zenith angle [1], in (0, 1].
    surface_albedo : float or array_like, broadcastable to (...)
        Lambertian surface albedo [1], in [0, 1], for direct and diffuse light alike.

    Returns
    -------
    dict of str -> ndarray
        Fractions of the incident flux on the horizontal (``S0 mu0 = 1``), positive
        magnitudes. Shape (...): ``toa_upward_flux``, ``surface_downward_direct_flux``
        (unscattered, ``exp(-sum(tau) / mu0)``), ``surface_downward_diffuse_flux``,
        ``surface_upward_flux``, ``atmosphere_absorption``. Shape (..., nz):
        ``layer_absorption``. Shape (..., nz + 1), index 0 at the surface:
        ``upward_flux``, ``downward_diffuse_flux``, ``downward_direct_flux``.

    Raises
    ------
    surrogate3d.errors.ParameterError
        An argument is NaN, out of range or of a shape that does not broadcast; the
        message names it, the index and the value.

    Notes
    -----
    Energy is conserved to round-off: ``toa_upward_flux + atmosphere_absorption +
    (1 - surface_albedo) * (surface_downward_direct_flux +
    surface_downward_diffuse_flux) = 1``. Accuracy is that of the delta-Eddington
    method: a few percent for optically thick layers with the sun high, larger for thin
    layers and low sun (Joseph et al. 1976; King and Harshvardhan 1986).

    References
    ----------
    Joseph, J. H., W. J. Wiscombe and J. A. Weinman, 1976: The delta-Eddington
    approximation for radiative flux transfer. J. Atmos. Sci., 33, 2452-2459.

    Meador, W. E. and W. R. Weaver, 1980: Two-stream approximations to radiative
    transfer in planetary atmospheres: a unified description of existing methods and a
    new improvement. J. Atmos. Sci., 37, 630-643.

    Lacis, A. A. and J. E. Hansen, 1974: A parameterization for the absorption of solar
    radiation in the earth's atmosphere. J. Atmos. Sci., 31, 118-133 (adding of layers).

    King, M. D. and Harshvardhan, 1986: Comparative accuracy of selected multiple
    scattering approximations. J. Atmos. Sci., 43, 784-801.

    Examples
    --------
    >>> import numpy as np
    >>> out = delta_eddington(np.array([0.0, 8.0, 0.1]), [1.0, 0.999, 1.0], [0.0, 0.85, 0.0],
    ...                       mu0=0.5, surface_albedo=0.2)
    >>> out["upward_flux"].shape
    (4,)
    >>> total = (out["toa_upward_flux"] + out["atmosphere_absorption"]
    ...          + 0.8 * (out["surface_downward_direct_flux"] + out["surface_downward_diffuse_flux"]))
    >>> round(float(total), 12)
    1.0
    """
    tau, ssa, g, mu0 = _checked_optics(tau, ssa, g, mu0)
    if tau.ndim < 1 or tau.shape[-1] < 1:
        raise ParameterError(f"tau must have shape (..., nz) with at least one layer; got shape {tau.shape}")
    shape = tau.shape
    lead, nz = shape[:-1], shape[-1]
    ssa = broadcast_to_shape("ssa", ssa, shape, "tau's shape")
    g = broadcast_to_shape("g", g, shape, "tau's shape")
    mu0 = broadcast_to_shape("mu0", mu0, lead, "the leading (column) shape of tau")
    albedo = as_float_array("surface_albedo", surface_albedo)
    check_array("surface_albedo", albedo, 0.0, 1.0)
    albedo = broadcast_to_shape("surface_albedo", albedo, lead, "the leading (column) shape of tau")

    ncol = int(np.prod(lead, dtype=np.int64))
    profiles = _solve_columns(tau.reshape(ncol, nz), ssa.reshape(ncol, nz), g.reshape(ncol, nz),
                              mu0.reshape(ncol), albedo.reshape(ncol))
    summary = {name: value.reshape(lead) for name, value in _column_summary(profiles, axis=0).items()}
    # Transposed views, not copies: a full transpose would cost as much as a quarter of the solve.
    return {**summary, **{name: value.T.reshape(lead + (value.shape[0],)) for name, value in profiles.items()}}


def _solve_scene_bands(scene, mu0, quiet):
    """Column fluxes per band (nband, ny, nx) and solar-weighted absorption (nz, ny, nx).

    Works band by band and block by block on the scene's own (z, y*x) layout, so that
    memory stays near the size of the scene whatever its size.
    """
    nband, nz, ny, nx = scene["extinction"].shape
    ncol = ny * nx
    dz = layer_thickness(scene)[:, np.newaxis]
    weights = np.asarray(scene["solar_weight"].values, dtype=np.float64)
    band_fluxes = {name: np.empty((nband, ny, nx)) for name in COLUMN_FLUXES}
    flat = {name: value.reshape(nband, ncol) for name, value in band_fluxes.items()}
    absorption = np.zeros((nz, ncol))
    total = nband * ncol
    bar = tqdm(total=total, desc="two-stream columns", unit="col", leave=False, file=sys.stderr,
               disable=True if quiet or total <= TWO_STREAM_BLOCK_COLUMNS else None)
    extinction, ssa_all, g_all, albedo_all = (np.asarray(scene[name].values, dtype=np.float64) for name in (
        "extinction", "single_scattering_albedo", "asymmetry_parameter", "surface_albedo"))
    with bar:
        for b in range(nband):
            tau = extinction[b].reshape(nz, ncol) * dz
            ssa = ssa_all[b].reshape(nz, ncol)
            g = g_all[b].reshape(nz, ncol)
            albedo = albedo_all[b].reshape(ncol)
            for start in range(0, ncol, TWO_STREAM_BLOCK_COLUMNS):
                cols = slice(start, min(start + TWO_STREAM_BLOCK_COLUMNS, ncol))
                profiles = _solve_block(tau[:, cols], ssa[:, cols], g[:, cols], mu0, albedo[cols])
                for name, value in _column_summary(profiles, axis=0).items():
                    flat[name][b, cols] = value
                absorption[:, cols] += weights[b] * profiles["layer_absorption"]
                bar.update(cols.stop - cols.start)
    return band_fluxes, absorption.reshape(nz, ny, nx)


def solve_scene(scene, solar_zenith_angle, solar_beam_azimuth=0.0, solar_constant=SOLAR_CONSTANT,
                per_band=False, quiet=False):
    """Run the delta-Eddington solver on every column of a scene (independent columns).

    Parameters
    ----------
    scene : xarray.Dataset
        A scene (see :func:`surrogate3d.scenes.make_scene`); the layer optical depth is
        ``extinction`` [m-1] times the layer thickness [m].
    solar_zenith_angle : float
        [degree], in [0, 90).
    solar_beam_azimuth : float
        Direction of travel of the direct beam [degree], counterclockwise from +x. It
        does not change independent-column fluxes and is recorded with the result.
    solar_constant : float
        Solar flux at normal incidence at the top of the domain [W m-2], > 0; default
        1361 W m-2 (Kopp and Lean 2011). Used for the heating rate and recorded.
    per_band : bool
        Also return the column fluxes of every band (``<flux>_per_band``).
    quiet : bool
        Hide the progress bar (shown for large scenes on a terminal).

    Returns
    -------
    xarray.Dataset
        A run result (:func:`surrogate3d.archive.make_run_result`, solver
        ``"two_stream"``): band-weighted column fluxes (solar weights) as fractions of
        ``S0 cos(theta0)``, zero standard errors, absorption per cell (z, y, x), and
        ``heating_rate`` [K day-1] when the scene has ``air_pressure``.

    References
    ----------
    Kopp, G. and J. L. Lean, 2011: A new, lower value of total solar irradiance:
    Evidence and climate significance. Geophys. Res. Lett., 38, L01706.

    Examples
    --------
    >>> import numpy as np
    >>> from surrogate3d.scenes import make_scene
    >>> scene = make_scene(np.full((1, 2, 3, 4), 0.01), 0.999, 0.85, [0.0, 500.0, 1000.0],
    ...                    100.0, 100.0, surface_albedo=0.1)
    >>> result = solve_scene(scene, 30.0)
    >>> result["toa_upward_flux"].dims
    ('y', 'x')
    """
    started = time.perf_counter()
    validate_scene(scene)
    zenith, azimuth = check_sun(solar_zenith_angle, solar_beam_azimuth)
    s0 = check_number("solar_constant", solar_constant, 0.0, None, low_open=True)
    mu0 = np.cos(np.radians(zenith))

    band_fluxes, absorption = _solve_scene_bands(scene, mu0, quiet)
    weights = np.asarray(scene["solar_weight"].values, dtype=np.float64)
    fluxes = {name: np.tensordot(weights, value, axes=1) for name, value in band_fluxes.items()}
    heating = None
    if "air_pressure" in scene:
        heating = heating_rate(absorption, s0 * mu0, scene["air_pressure"].values)
    zeros = np.zeros(absorption.shape[1:])
    metadata = {"run_photons": 0, "run_seed": 0, "run_scattering_events": 0,
                "run_wall_time": time.perf_counter() - started, "run_solar_constant": s0,
                "run_package_version": __version__}
    return make_run_result(fluxes, {name: zeros for name in COLUMN_FLUXES}, absorption,
                           solver="two_stream", solar_zenith_angle=zenith, solar_beam_azimuth=azimuth,
                           metadata=metadata, per_band=band_fluxes if per_band else None,
                           heating_rate=heating, band=[str(b) for b in scene["band"].values])
