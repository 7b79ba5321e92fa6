"""The effective cloud fraction of broken clouds in the longwave: a simple published correction.

A plane-parallel longwave scheme treats a partly cloudy column as a flat black plate of
cover ``N`` over clear sky.  Real clouds have sides: seen from the clear ground at a
zenith angle, a field of clouds hides more of the sky than its vertical projection, so
the surface receives more of the clouds' emission.  Killen and Ellingson (1994) and Han
and Ellingson (1999) express this as an effective cloud fraction ``N_e >= N`` that
depends on the cover and the clouds' aspect ratio (depth over width): the downward
flux at the surface is ``F_clear + N_e (F_cloudy - F_clear)`` instead of
``F_clear + N (F_cloudy - F_clear)``.

This module derives ``N_e`` for the simplest cloud field with that property, randomly
placed vertical cylinders of one diameter ``D`` and depth ``H`` (a Boolean model,
Stoyan et al. 1995): a line of sight at zenith angle ``theta`` from the ground is clear
with probability ``(1 - N) ** (1 + (4 / pi) (H / D) tan(theta))``, and for an isotropic
(black-body) cloud emission ``N_e = 1 - 2 * integral_0^1 P(mu) mu dmu``.  The diameter
comes from what a host knows, the cover and the cloud-edge length per unit area ``L``:
for the Boolean model ``L = (1 - N) (-ln(1 - N)) 4 / D`` (Stoyan et al. 1995); the edge
length of a pixelated mask counts staircase steps, 4/pi times the length of an
isotropic boundary on average (Cauchy-Crofton), so ``L`` is divided by 4/pi first.  The
correction of the surface downward flux is ``(N_e - N) (F_cloudy - F_clear)``, with
``F_cloudy`` and ``F_clear`` the independent-column fluxes of the cloudy and the clear
benchmark columns of the host column; the surface upward flux changes by the reflected
share ``(1 - emissivity)`` of it and the surface net absorption by ``emissivity`` times
it; the top-of-domain and atmospheric fields are left uncorrected.  These formulas are
ours, built on the published idea; they are a baseline, not a tuned model.

References
----------
Killen, R. M., and R. G. Ellingson, 1994: The effect of shape and spatial distribution of
cumulus clouds on longwave irradiance. J. Atmos. Sci., 51, 2123-2136.

Han, D., and R. G. Ellingson, 1999: Cumulus cloud formulations for longwave radiation
calculations. J. Atmos. Sci., 56, 837-851.

Stoyan, D., W. S. Kendall and J. Mecke, 1995: Stochastic Geometry and its Applications,
2nd ed., Wiley (Boolean model: coverage, boundary length density; Cauchy-Crofton formula).
"""

import numpy as np

#: Gauss-Legendre nodes of the hemispheric integral over mu = cos(theta).
_NODES, _WEIGHTS = np.polynomial.legendre.leggauss(32)
_MU = 0.5 * (_NODES + 1.0)
_MU_WEIGHTS = 0.5 * _WEIGHTS

#: Mean staircase length of a pixelated isotropic boundary over its true length.
STAIRCASE_FACTOR = 4.0 / np.pi


def effective_cloud_fraction(cloud_fraction, aspect_ratio):
    """Hemispheric effective cloud fraction of randomly placed cylinders [1].

    Parameters
    ----------
    cloud_fraction : array_like
        Vertically projected cover ``N`` [1], in [0, 1].
    aspect_ratio : array_like
        Cloud depth over cloud diameter ``H / D`` [1], >= 0.

    Returns
    -------
    ndarray
        ``N_e = 1 - 2 int_0^1 (1 - N)^(1 + (4/pi) (H/D) tan(theta)) mu dmu``; equal to
        ``N`` for flat clouds, 0 and 1 at no and full cover.

    References
    ----------
    Killen and Ellingson (1994); Stoyan et al. (1995); see the module docstring.

    Examples
    --------
    >>> round(float(effective_cloud_fraction(0.3, 0.0)), 12)
    0.3
    >>> 0.3 < float(effective_cloud_fraction(0.3, 1.0)) < 1.0
    True
    """
    n = np.clip(np.asarray(cloud_fraction, dtype=np.float64), 0.0, 1.0)
    beta = np.maximum(np.asarray(aspect_ratio, dtype=np.float64), 0.0)
    n, beta = np.broadcast_arrays(n, beta)
    tan = np.sqrt(1.0 - _MU**2) / _MU
    exponent = 1.0 + (4.0 / np.pi) * beta[..., None] * tan
    with np.errstate(divide="ignore"):
        log_clear = np.log1p(-n)[..., None]
    gap = np.where(n[..., None] < 1.0, np.exp(exponent * np.where(n[..., None] < 1.0, log_clear, 0.0)), 0.0)
    # Flat clouds (no depth): N exactly, not N plus the quadrature's rounding, so that a
    # prior of flat clouds is exactly 0 wherever it is evaluated.
    return np.where(beta > 0.0, 1.0 - 2.0 * np.sum(gap * _MU * _MU_WEIGHTS, axis=-1), n)


def cylinder_diameter(cloud_fraction, edge_length):
    """Diameter [m] of the random cylinders with this cover and cloud-edge length per area.

    Parameters
    ----------
    cloud_fraction : array_like
        Cover ``N`` [1], in (0, 1).
    edge_length : array_like
        Edge length per unit area of a pixelated cloud mask [m-1], > 0.

    Returns
    -------
    ndarray
        ``D = 4 (1 - N) (-ln(1 - N)) / (L / (4 / pi))``; NaN where ``N`` is 0 or 1 or
        ``L`` is 0.

    Examples
    --------
    >>> staircase = 4.0 / np.pi * 0.99 * -np.log(0.99) * 4.0 / 1000.0  # cylinders of 1 km, N = 0.01
    >>> round(float(cylinder_diameter(0.01, staircase)))
    1000
    """
    n = np.asarray(cloud_fraction, dtype=np.float64)
    edge = np.asarray(edge_length, dtype=np.float64) / STAIRCASE_FACTOR
    valid = (n > 0.0) & (n < 1.0) & (edge > 0.0)
    safe_n = np.where(valid, n, 0.5)
    return np.where(valid, 4.0 * (1.0 - safe_n) * -np.log1p(-safe_n) / np.where(valid, edge, 1.0), np.nan)


def effective_cloud_fraction_corrections(cloud_fraction, cloudy_down, clear_down, edge_length, cloud_depth,
                                         emissivity):
    """The baseline's corrections of the five longwave targets per host column [W m-2].

    Parameters
    ----------
    cloud_fraction : ndarray (Ny, Nx)
        Vertically projected cloud cover of the host columns [1].
    cloudy_down, clear_down : ndarray (Ny, Nx)
        Independent-column surface downward longwave flux [W m-2], mean over the cloudy and
        over the clear benchmark columns of each host column (any value where there are none).
    edge_length : ndarray (Ny, Nx)
        Cloud-edge length per unit area of the pixelated cloud mask [m-1].
    cloud_depth : ndarray (Ny, Nx)
        Cloud top minus cloud base height of the host columns [m].
    emissivity : ndarray (Ny, Nx)
        Surface longwave emissivity of the host columns [1].

    Returns
    -------
    dict of str -> ndarray (Ny, Nx)
        Keys ``longwave_surface_downward_flux``, ``longwave_surface_upward_flux``,
        ``longwave_toa_upward_flux``, ``longwave_atmosphere_net_absorption``,
        ``longwave_surface_net_absorption``; zero where the host column is clear or
        overcast, and for the top-of-domain and atmospheric fields.

    Examples
    --------
    >>> one = np.ones((1, 1))
    >>> out = effective_cloud_fraction_corrections(0.3 * one, 380.0 * one, 330.0 * one, 1e-3 * one, 1000.0 * one,
    ...                                            0.98 * one)
    >>> bool(out["longwave_surface_downward_flux"][0, 0] > 0.0), float(out["longwave_toa_upward_flux"][0, 0])
    (True, 0.0)
    """
    n = np.asarray(cloud_fraction, dtype=np.float64)
    broken = (n > 0.0) & (n < 1.0)
    diameter = cylinder_diameter(n, edge_length)
    usable = broken & np.isfinite(diameter)
    aspect = np.where(usable, np.asarray(cloud_depth, dtype=np.float64) / np.where(usable, diameter, 1.0), 0.0)
    contrast = np.where(usable, np.asarray(cloudy_down, dtype=np.float64) - np.asarray(clear_down, dtype=np.float64),
                        0.0)
    change = np.where(usable, (effective_cloud_fraction(n, aspect) - n) * contrast, 0.0)
    emissivity = np.asarray(emissivity, dtype=np.float64)
    return {"longwave_surface_downward_flux": change, "longwave_surface_upward_flux": (1.0 - emissivity) * change,
            "longwave_toa_upward_flux": np.zeros_like(change),
            "longwave_atmosphere_net_absorption": np.zeros_like(change),
            "longwave_surface_net_absorption": emissivity * change}
