"""Host fields of one scene at one sun geometry and host resolution: scene, sun and host fluxes.

The host's independent-column fluxes come either from the benchmark's Monte Carlo
independent-column result, block-averaged (``host_fluxes = "monte_carlo"``), or from a
delta-Eddington solve of the host's own columns (``"two_stream_host"``,
:func:`host_two_stream_fluxes`), the fluxes a host radiation scheme computes itself.
"""

import math

import numpy as np

from ..core.slant_path import check_solar_zenith_angle
from ..core.validation import check_option
from ..scenes.model import cloud_mask, layer_thickness
from ..solvers.two_stream import delta_eddington
from .coarsen import HOST_FLUXES, block_mean, coarsen_result, host_factors, scene_host_fields
from .recipe import HOST_FLUX_KINDS


def _sub_column_optics(quantity, clear, projected, fy, fx):
    """Layer sums of ``quantity`` of the clear and the cloudy sub-column of each host column.

    ``quantity`` (nz, ny, nx) is additive (optical depth, scattering optical depth, ...);
    ``clear`` (nz, ny, nx) marks clear cells, ``projected`` (ny, nx) cells with cloud in
    some layer.  Returns the clear sub-column's value (the mean over the clear cells of
    the block's layer; the block mean where the layer has none, which happens only in a
    host column whose cloud cover is 1, where the clear sub-column has no weight) and
    the cloudy sub-column's value (what keeps the block mean:
    ``(mean - (1 - c) clear) / c``, >= 0; the block mean where ``c = 0``).
    """
    mean = block_mean(quantity, fy, fx)
    clear_share = block_mean(clear, fy, fx)
    clear_value = np.divide(block_mean(np.where(clear, quantity, 0.0), fy, fx), clear_share,
                            out=mean.copy(), where=clear_share > 0.0)
    cover = block_mean(projected, fy, fx)
    cloudy_value = np.divide(mean - (1.0 - cover) * clear_value, cover, out=mean.copy(), where=cover > 0.0)
    return clear_value, np.maximum(cloudy_value, 0.0), cover


def host_two_stream_fluxes(scene, host_resolution, solar_zenith_angle, layers=False):
    """Independent-column fluxes of the host's own columns: delta-Eddington with a clear and a cloudy sub-column.

    What a host radiation scheme with a sub-grid cloud fraction computes from its own
    grid-box fields.  Each host column is split into a cloudy sub-column covering its
    total (vertically projected) cloud cover ``c`` and a clear one covering ``1 - c``
    (maximum overlap of all its cloudy layers, as in the clear/cloudy partition of
    Geleyn and Hollingsworth 1979 and the overlap schemes compared by Morcrette and
    Fouquart 1986).  In each band and layer the clear sub-column has the mean optics of
    the block's clear cells; the cloudy one the optics that keep the block means, i.e.
    the layer's cloudy cells and the rest of its clear air spread over the cloudy
    sub-column: optical depth ``tau``, scattering optical depth ``tau omega`` and
    ``tau omega g`` are conserved (single-scattering albedo and asymmetry parameter
    their ratios).  Each sub-column is solved with
    :func:`surrogate3d.solvers.two_stream.delta_eddington` over the block-mean surface
    albedo of the band; fluxes are ``(1 - c) F_clear + c F_cloudy``, combined over bands
    with the scene's solar weights, as the ``two_stream`` result of the benchmark grid.

    Parameters
    ----------
    scene : xarray.Dataset
        A scene; cloudy cells follow :func:`surrogate3d.scenes.cloud_mask`.
    host_resolution : float
        Host column size [m].
    solar_zenith_angle : float
        [degree], in [0, 90).
    layers : bool
        Also return ``layer_absorption`` (nz, Ny, Nx) [1], the absorption of every layer
        (what the heating-rate model needs from the host).

    Returns
    -------
    dict of str -> ndarray (Ny, Nx)
        Every flux of :data:`surrogate3d.pairs.coarsen.HOST_FLUXES` [1], fractions of the
        incident flux on the horizontal (total surface downward flux = direct + diffuse).

    Notes
    -----
    Exact (equal to the block mean of the benchmark grid's delta-Eddington fluxes) for
    a horizontally homogeneous host column and for a host column whose cloudy cells
    are all alike and whose clear cells are all alike (``tests/pairs/test_host_fluxes.py``).

    References
    ----------
    Geleyn, J.-F. and A. Hollingsworth, 1979: An economical analytical method for the
    computation of the interaction between scattering and line absorption of radiation.
    Contrib. Atmos. Phys., 52, 1-16.

    Morcrette, J.-J. and Y. Fouquart, 1986: The overlapping of cloud layers in
    shortwave radiation parameterizations. J. Atmos. Sci., 43, 321-328.

    Joseph, J. H., W. J. Wiscombe and J. A. Weinman, 1976: The delta-Eddington
    approximation for radiative flux transfer. J. Atmos. Sci., 33, 2452-2459.
    """
    zenith = check_solar_zenith_angle(solar_zenith_angle)
    fy, fx = host_factors(scene, host_resolution)
    mu0 = math.cos(math.radians(zenith))
    cloudy = cloud_mask(scene)
    clear = ~cloudy
    projected = cloudy.any(axis=0)
    dz = layer_thickness(scene)[:, None, None]
    weights = np.asarray(scene["solar_weight"].values, dtype=np.float64)
    extinction, ssa, asymmetry, albedo = (np.asarray(scene[name].values, dtype=np.float64) for name in (
        "extinction", "single_scattering_albedo", "asymmetry_parameter", "surface_albedo"))
    out = None
    names = HOST_FLUXES[1:] + (("layer_absorption",) if layers else ())
    for b, weight in enumerate(weights):
        tau = extinction[b] * dz
        scattering = tau * ssa[b]
        clear_tau, cloudy_tau, cover = _sub_column_optics(tau, clear, projected, fy, fx)
        clear_sca, cloudy_sca, _ = _sub_column_optics(scattering, clear, projected, fy, fx)
        clear_asy, cloudy_asy, _ = _sub_column_optics(scattering * asymmetry[b], clear, projected, fy, fx)
        band_albedo = block_mean(albedo[b], fy, fx)
        band = {}
        for share, t, s, a in ((1.0 - cover, clear_tau, clear_sca, clear_asy),
                               (cover, cloudy_tau, cloudy_sca, cloudy_asy)):
            omega = np.clip(np.divide(s, t, out=np.ones_like(t), where=t > 0.0), 0.0, 1.0)
            g = np.clip(np.divide(a, s, out=np.zeros_like(s), where=s > 0.0), -0.999999, 0.999999)
            # Layers last for the solver: (Ny, Nx, nz).
            solved = delta_eddington(np.moveaxis(t, 0, -1), np.moveaxis(omega, 0, -1), np.moveaxis(g, 0, -1),
                                     mu0, band_albedo)
            for flux in names:
                # Layer absorption has the layers last: the cover broadcasts over them.
                cover_share = share[..., None] if solved[flux].ndim > np.ndim(share) else share
                band[flux] = band.get(flux, 0.0) + cover_share * solved[flux]
        if out is None:
            out = {flux: weight * band[flux] for flux in names}
        else:
            for flux in names:
                out[flux] += weight * band[flux]
    out["surface_downward_flux"] = out["surface_downward_direct_flux"] + out["surface_downward_diffuse_flux"]
    if layers:
        out["layer_absorption"] = np.moveaxis(out["layer_absorption"], -1, 0)
    return {flux: out[flux] for flux in ("surface_downward_flux",) + names}


def _check_host_fluxes(host_fluxes):
    check_option("host_fluxes", host_fluxes, HOST_FLUX_KINDS)


def assemble_host_fields(scene, independent_column, host_resolution, host_fluxes="monte_carlo"):
    """Everything the feature library reads, for one scene, sun geometry and host resolution.

    Parameters
    ----------
    scene : xarray.Dataset
        A scene.
    independent_column : xarray.Dataset
        Its independent-column run result at the sun geometry of interest
        (:func:`surrogate3d.archive.select_result`); the sun angles come from its
        attributes.
    host_resolution : float
        Host column size [m].
    host_fluxes : {"monte_carlo", "two_stream_host"}
        Where ``independent_column_<flux>`` comes from: host-column means of the
        ``independent_column`` result, or :func:`host_two_stream_fluxes` of the host's
        own columns.

    Returns
    -------
    dict
        The host fields of :mod:`surrogate3d.pairs.features`, including the sun angles
        [degree] and ``independent_column_<flux>`` for every flux of
        :data:`surrogate3d.pairs.coarsen.HOST_FLUXES`.
    """
    _check_host_fluxes(host_fluxes)
    fy, fx = host_factors(scene, host_resolution)
    fields = scene_host_fields(scene, host_resolution)
    fields["solar_zenith_angle"] = float(independent_column.attrs["solar_zenith_angle"])
    fields["solar_beam_azimuth"] = float(independent_column.attrs["solar_beam_azimuth"])
    if host_fluxes == "monte_carlo":
        fluxes = coarsen_result(independent_column, fy, fx)
    else:
        fluxes = host_two_stream_fluxes(scene, host_resolution, fields["solar_zenith_angle"])
    for flux in HOST_FLUXES:
        fields[f"independent_column_{flux}"] = fluxes[flux]
    return fields
