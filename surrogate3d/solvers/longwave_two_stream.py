"""A two-stream solver for thermal (longwave) radiation in plane-parallel columns.

Each homogeneous layer emits with a Planck source linear in optical depth between the
Planck radiances of its edges (or constant, for isothermal layers), absorbs and scatters.
The hemispheric fluxes obey the two-stream equations with the source term of Toon et
al. (1989) and the coefficients

    gamma1 = D (1 - omega (1 + g) / 2),   gamma2 = D omega (1 - g) / 2,

that is, Toon et al.'s hemispheric-mean coefficients with the mean inverse cosine
``D = 1/mu1`` set to the diffusivity factor 1.66 of Elsasser (1942) in place of 2. Without
scattering the solution is the usual diffusivity approximation, a layer transmitting
``exp(-1.66 tau)``; with scattering it is the hemispheric two-stream (backscattered
fraction ``(1 - g) / 2``). No delta scaling is applied. The layer reflectance,
transmittance and emission follow in closed form (``docs/methods/longwave.md``) and the
layers are combined with the surface by the adding method, as in
:mod:`surrogate3d.solvers.two_stream`.

Conventions: layer index 0 is the BOTTOM layer; edge profiles have ``nz + 1`` values with
index 0 at the surface; fluxes are positive magnitudes in W m-2 for the spectral band
given by its wavenumber limits [m-1]. Net absorption is absorbed minus emitted.
"""

import numpy as np

from ..core.validation import check_array, check_number
from ..errors import ParameterError
from ..scenes.planck import planck_band_radiance
from ._array_checks import as_float_array, broadcast_to_shape
from .heating import DRY_AIR_SPECIFIC_HEAT, SECONDS_PER_DAY, STANDARD_GRAVITY

#: Diffusivity factor, the mean inverse cosine of the two-stream equations [1]
#: (Elsasser 1942).
DIFFUSIVITY = 1.66


def _one_minus_exp_over(x):
    """``(1 - exp(-x)) / x`` for x >= 0, equal to its limit 1 at x = 0."""
    return np.divide(-np.expm1(-x), x, out=np.ones_like(x), where=x > 0.0)


def _layers(tau, ssa, g, diffusivity):
    """Reflectance, transmittance, emissivity and linear-source factor of layers.

    Returns R, T (isotropic incidence, the same from either side), ``1 - R - T`` and
    ``G - T``, where an isolated layer with Planck radiance B_top at its top and B_bot at
    its bottom emits ``pi (B_top (1 - R - T) + (B_bot - B_top) (G - T))`` upward from its
    top and the mirror image downward from its bottom. All forms stay finite and exact
    for tau -> 0 and for conservative scattering (k = 0).
    """
    gamma1 = diffusivity * (1.0 - 0.5 * ssa * (1.0 + g))
    gamma2 = 0.5 * diffusivity * ssa * (1.0 - g)
    # gamma1 - gamma2 = D (1 - omega) exactly, so that omega = 1 emits exactly nothing.
    absorption = diffusivity * (1.0 - ssa)
    k = np.sqrt(absorption * (gamma1 + gamma2))
    x = k * tau
    e = np.exp(-x)
    phi = _one_minus_exp_over(x)
    sigma_over_tau = _one_minus_exp_over(2.0 * x)          # (1 - e^2) / (2 k tau)
    sigma = tau * sigma_over_tau
    inv_delta = 1.0 / (0.5 * (1.0 + e * e) + gamma1 * sigma)
    reflectance = gamma2 * sigma * inv_delta
    transmittance = e * inv_delta
    emissivity = (0.5 * (x * phi) ** 2 + absorption * sigma) * inv_delta
    # The particular solution pi (B(t) +- B' / (gamma1 + gamma2)) makes the gradient term:
    # G = ((1 - e)^2 / (2 tau (gamma1 + gamma2)) + sigma / tau) / Delta.
    gradient = (0.5 * k * x * phi * phi / (gamma1 + gamma2) + sigma_over_tau - e) * inv_delta
    return reflectance, transmittance, emissivity, gradient


def _adding(tau, ssa, g, b_top, b_bottom, b_surface, emissivity_surface, top_flux, diffusivity):
    """Adding solution for columns given layer first, (nz, m); surface and top terms are (m,)."""
    nz, m = tau.shape
    r, t, emissivity, gradient = _layers(tau, ssa, g, diffusivity)
    slope = b_bottom - b_top
    source_up = np.pi * (b_top * emissivity + slope * gradient)
    source_down = np.pi * (b_bottom * emissivity - slope * gradient)

    # Upward sweep: reflectance of everything below each edge and the upward flux it
    # sends when nothing comes down from above.
    below_r = np.empty((nz + 1, m))
    below_up = np.empty((nz + 1, m))
    multiple = np.empty((nz, m))
    below_r[0] = 1.0 - emissivity_surface
    below_up[0] = emissivity_surface * np.pi * b_surface
    for i in range(nz):
        mi = 1.0 / (1.0 - r[i] * below_r[i])
        multiple[i] = mi
        below_r[i + 1] = r[i] + t[i] * t[i] * below_r[i] * mi
        below_up[i + 1] = source_up[i] + t[i] * mi * (below_up[i] + below_r[i] * source_down[i])

    # Downward sweep from the top, multiple reflections included.
    down = np.empty((nz + 1, m))
    down[nz] = top_flux
    for i in range(nz - 1, -1, -1):
        down[i] = (t[i] * down[i + 1] + source_down[i] + r[i] * below_up[i]) * multiple[i]
    up = below_up + below_r * down
    return up, down


def _checked_temperature(temperature, lead, nz):
    """Level (nz + 1) or layer (nz) temperatures broadcast to the columns."""
    t = as_float_array("temperature", temperature)
    check_array("temperature", t, 0.0, None, low_open=True)
    if t.ndim < 1 or t.shape[-1] not in (nz, nz + 1):
        raise ParameterError(f"temperature must have shape (..., {nz + 1}) at the layer edges or (..., {nz}) "
                             f"per isothermal layer; got shape {t.shape}")
    return broadcast_to_shape("temperature", t, lead + t.shape[-1:], "the columns' shape")


def _checked_pressure(air_pressure_edges, lead, nz):
    p = as_float_array("air_pressure_edges", air_pressure_edges)
    check_array("air_pressure_edges", p, 0.0, None, low_open=True)
    if p.ndim < 1 or p.shape[-1] != nz + 1:
        raise ParameterError(f"air_pressure_edges must have shape (..., {nz + 1}); got shape {p.shape}")
    p = broadcast_to_shape("air_pressure_edges", p, lead + (nz + 1,), "the columns' shape")
    dp = p[..., :-1] - p[..., 1:]
    if np.any(dp <= 0.0):
        index = tuple(int(i) for i in np.unravel_index(int(np.argmax(dp <= 0.0)), dp.shape))
        above = index[:-1] + (index[-1] + 1,)
        where = above[0] if len(above) == 1 else above
        raise ParameterError(f"air_pressure_edges must decrease strictly upward; at index {where} it is "
                             f"{p[above].item()!r} after {p[index].item()!r}")
    return dp


def longwave_two_stream(tau, ssa, g, temperature, surface_temperature, surface_emissivity,
                        wavenumber_low, wavenumber_high, air_pressure_edges=None, top_downward_flux=0.0,
                        diffusivity=DIFFUSIVITY):
    """Longwave fluxes, net absorption and heating of plane-parallel columns in one band.

    Parameters
    ----------
    tau : array_like, shape (..., nz)
        Layer optical depth [1], >= 0; layer 0 is the BOTTOM layer.
    ssa : array_like, broadcastable to tau
        Single-scattering albedo [1], in [0, 1].
    g : array_like, broadcastable to tau
        Asymmetry parameter [1], in (-1, 1).
    temperature : array_like, shape (..., nz + 1) or (..., nz)
        Air temperature [K], > 0: at the layer edges (index 0 at the surface; the Planck
        source is linear in optical depth within each layer) or per layer (isothermal
        layers). Leading axes broadcast to those of ``tau``.
    surface_temperature : float or array_like, broadcastable to (...)
        [K], > 0.
    surface_emissivity : float or array_like, broadcastable to (...)
        [1], in [0, 1]; the surface reflects ``1 - emissivity`` like a Lambertian surface.
    wavenumber_low, wavenumber_high : float or array_like, broadcastable to (...)
        Band limits [m-1] (1 cm-1 = 100 m-1), ``0 <= low < high``; a leading band axis of
        ``tau`` takes arrays of the band limits (for instance shape (nband, 1) for
        ``tau`` of shape (nband, ncol, nz)).
    air_pressure_edges : array_like, shape (..., nz + 1) or (nz + 1,), optional
        Pressure at the layer edges [Pa], > 0 and strictly decreasing upward; when given,
        the heating rate is returned.
    top_downward_flux : float or array_like, broadcastable to (...)
        Isotropic (diffuse) flux entering at the top [W m-2], >= 0; default 0 (no
        longwave radiation from space).
    diffusivity : float
        Mean inverse cosine D of the two-stream equations, in [1, 2]; default 1.66
        (Elsasser 1942); 2 gives the hemispheric-mean coefficients of Toon et al. (1989).

    Returns
    -------
    dict of str -> ndarray
        Fluxes [W m-2], positive magnitudes. Shape (..., nz + 1), index 0 at the surface:
        ``upward_flux``, ``downward_flux``. Shape (...): ``toa_upward_flux``,
        ``surface_downward_flux``, ``surface_upward_flux``, ``surface_net_absorption``
        (absorbed minus emitted by the surface), ``atmosphere_net_absorption``. Shape
        (..., nz): ``layer_net_absorption`` (absorbed minus emitted, the net flux
        convergence), and ``heating_rate`` [K day-1] if ``air_pressure_edges`` is given.

    Raises
    ------
    surrogate3d.errors.ParameterError
        An argument is NaN, out of range or of a shape that does not broadcast; the
        message names it, the index and the value.

    Notes
    -----
    Energy is conserved to round-off: ``sum(layer_net_absorption) +
    surface_net_absorption + toa_upward_flux = top_downward_flux``. An isothermal
    atmosphere over a black surface at its temperature, lit from the top by ``pi B``,
    has zero net flux everywhere (Kirchhoff), with or without scattering. Without
    scattering a layer's emissivity is ``1 - exp(-D tau)``; against the exact
    ``1 - 2 E3(tau)`` it errs by -17 % as tau -> 0 (the ratio D/2), by -8.6 % at
    tau = 0.1, +3.8 % at most (tau = 1.12) and less than 0.43 % beyond tau = 4 (measured
    in the tests). The heating rate is ``g / c_p * net / dp * 86400`` with g = 9.80665 m s-2 and
    c_p = 1004.64 J kg-1 K-1 (:mod:`surrogate3d.solvers.heating`).

    References
    ----------
    Toon, O. B., C. P. McKay, T. P. Ackerman and K. Santhanam, 1989: Rapid calculation of
    radiative heating rates and photodissociation rates in inhomogeneous multiple scattering
    atmospheres. J. Geophys. Res., 94, 16287-16301.

    Elsasser, W. M., 1942: Heat Transfer by Infrared Radiation in the Atmosphere. Harvard
    Meteorological Studies 6, Harvard University Press.

    Meador, W. E. and W. R. Weaver, 1980: Two-stream approximations to radiative transfer in
    planetary atmospheres: a unified description of existing methods and a new
    improvement. J. Atmos. Sci., 37, 630-643.

    Examples
    --------
    An opaque black layer at 250 K over a surface at 300 K in the 800-1250 cm-1 window:
    the top sees the layer, the surface sees the layer.

    >>> from surrogate3d.scenes.planck import planck_band_radiance
    >>> out = longwave_two_stream([50.0], 0.0, 0.0, [250.0], 300.0, 1.0, 80000.0, 125000.0)
    >>> bool(np.isclose(out["toa_upward_flux"], np.pi * planck_band_radiance(250.0, 80000.0, 125000.0)))
    True
    >>> total = out["layer_net_absorption"].sum() + out["surface_net_absorption"] + out["toa_upward_flux"]
    >>> round(float(total), 9)
    0.0
    """
    tau = as_float_array("tau", tau)
    ssa = as_float_array("ssa", ssa)
    g = as_float_array("g", g)
    check_array("tau", tau, 0.0, None)
    check_array("ssa", ssa, 0.0, 1.0)
    check_array("g", g, -1.0, 1.0, low_open=True, high_open=True)
    if tau.ndim < 1 or tau.shape[-1] < 1:
        raise ParameterError(f"tau must have shape (..., nz) with at least one layer; got shape {tau.shape}")
    shape = tau.shape
    lead, nz = shape[:-1], shape[-1]
    ssa = broadcast_to_shape("ssa", ssa, shape, "tau's shape")
    g = broadcast_to_shape("g", g, shape, "tau's shape")
    t_air = _checked_temperature(temperature, lead, nz)
    columns = {}
    for name, value, low, high, low_open in (("surface_temperature", surface_temperature, 0.0, None, True),
                                             ("surface_emissivity", surface_emissivity, 0.0, 1.0, False),
                                             ("top_downward_flux", top_downward_flux, 0.0, None, False)):
        array = as_float_array(name, value)
        check_array(name, array, low, high, low_open=low_open)
        columns[name] = broadcast_to_shape(name, array, lead, "the columns' shape")
    diffusivity = check_number("diffusivity", diffusivity, 1.0, 2.0)
    low = as_float_array("wavenumber_low", wavenumber_low)
    high = as_float_array("wavenumber_high", wavenumber_high)
    check_array("wavenumber_low", low, 0.0, None)
    # The upper limit may be +inf (the whole spectrum above wavenumber_low).
    check_array("wavenumber_high", np.where(np.isposinf(high), 1.0, high), 0.0, None)
    low = broadcast_to_shape("wavenumber_low", low, lead, "the columns' shape")
    high = broadcast_to_shape("wavenumber_high", high, lead, "the columns' shape")
    dp = None if air_pressure_edges is None else _checked_pressure(air_pressure_edges, lead, nz)

    planck_air = planck_band_radiance(t_air, low[..., None], high[..., None])
    b_bottom, b_top = (planck_air[..., :-1], planck_air[..., 1:]) if planck_air.shape[-1] == nz + 1 \
        else (planck_air, planck_air)
    b_surface = planck_band_radiance(columns["surface_temperature"], low, high)

    def layer_first(a, width):
        return np.ascontiguousarray(np.broadcast_to(a, lead + (width,)).reshape(-1, width).T)

    up, down = _adding(layer_first(tau, nz), layer_first(ssa, nz), layer_first(g, nz),
                            layer_first(b_top, nz), layer_first(b_bottom, nz), b_surface.ravel(),
                            columns["surface_emissivity"].ravel(), columns["top_downward_flux"].ravel(),
                            diffusivity)
    up = up.T.reshape(lead + (nz + 1,))
    down = down.T.reshape(lead + (nz + 1,))
    net = down - up
    layer_net = net[..., 1:] - net[..., :-1]
    out = {
        "upward_flux": up,
        "downward_flux": down,
        "toa_upward_flux": up[..., -1],
        "surface_downward_flux": down[..., 0],
        "surface_upward_flux": up[..., 0],
        "surface_net_absorption": net[..., 0],
        "atmosphere_net_absorption": layer_net.sum(axis=-1),
        "layer_net_absorption": layer_net,
    }
    if dp is not None:
        out["heating_rate"] = STANDARD_GRAVITY / DRY_AIR_SPECIFIC_HEAT * layer_net / dp * SECONDS_PER_DAY
    return out
