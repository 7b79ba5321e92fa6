"""The tilted independent column approximation (tilted ICA).

Columns are traced along the direction of the direct beam through the benchmark grid
(periodic), each tilted column is solved as a plane-parallel column by the
delta-Eddington solver, and its fluxes are returned to the cells it belongs to
(Varnai and Davies 1999; Wapler and Mayer 2008 for the surface fluxes):

* surface fluxes go to the column where the tilted column meets the surface (each
  tilted column is labelled by that column: it is the path from the surface cell
  centre toward the sun);
* the reflected flux at the top goes to the column where the tilted column leaves the
  top of the domain;
* the absorption of each layer is shared among the cells the path crosses in that
  layer, in proportion to the path length in each.

The correction is the tilted minus the vertical (ordinary independent-column)
two-stream flux of the same solver, so solver biases common to both cancel.
"""

import numpy as np

from ..core.slant_path import gather_layers, path_weights, scatter_layers, top_offset
from ..core.data_model import TARGETS
from ..scenes.model import layer_thickness, spacing
from .base import Baseline

_SOLVER_FLUXES = ("toa_upward_flux", "surface_downward_direct_flux", "surface_downward_diffuse_flux",
                  "surface_upward_flux")


def _solve(tau, ssa, g, mu0, albedo):
    """Delta-Eddington fluxes of columns given as (nz, ny, nx) layer arrays (layer 0 at the bottom)."""
    from ..solvers.two_stream import delta_eddington

    out = delta_eddington(np.moveaxis(tau, 0, -1), np.moveaxis(ssa, 0, -1), np.moveaxis(g, 0, -1), mu0, albedo)
    fluxes = {name: np.asarray(out[name], dtype=np.float64) for name in _SOLVER_FLUXES}
    fluxes["layer_absorption"] = np.moveaxis(np.asarray(out["layer_absorption"], dtype=np.float64), -1, 0)
    return fluxes


def _band_optics(scene, band):
    dz = layer_thickness(scene)
    tau = scene["extinction"].values[band] * dz[:, None, None]
    return tau, scene["single_scattering_albedo"].values[band], scene["asymmetry_parameter"].values[band]


def _tilt(tau, ssa, g, weights):
    """Layer optics of the tilted columns: optical depth, and ssa and g weighted by what they act on."""
    tau_t = gather_layers(tau, weights)
    scat_t = gather_layers(tau * ssa, weights)
    asym_t = gather_layers(tau * ssa * g, weights)
    ssa_t = np.divide(scat_t, tau_t, out=np.ones_like(tau_t), where=tau_t > 0.0)
    g_t = np.divide(asym_t, scat_t, out=np.zeros_like(tau_t), where=scat_t > 0.0)
    return tau_t, np.clip(ssa_t, 0.0, 1.0), g_t


def _broadband(per_band, weights):
    return {name: sum(w * f[name] for w, f in zip(weights, per_band)) for name in per_band[0]}


def two_stream_fluxes(scene, solar_zenith_angle, solar_beam_azimuth, tilted):
    """Broadband delta-Eddington column fluxes of a scene, vertical or tilted toward the sun.

    Parameters
    ----------
    scene : xarray.Dataset
        A scene; bands are combined with their ``solar_weight``.
    solar_zenith_angle : float
        [degree], in [0, 90).
    solar_beam_azimuth : float
        Direction of travel of the beam [degree], counterclockwise from +x.
    tilted : bool
        Trace the columns along the sun direction (tilted ICA) or keep them vertical (ICA).

    Returns
    -------
    dict of str -> ndarray (ny, nx)
        ``toa_upward_flux``, ``surface_downward_direct_flux``,
        ``surface_downward_diffuse_flux``, ``surface_upward_flux``,
        ``atmosphere_absorption``, fractions of the incident flux on the horizontal,
        mapped back to benchmark columns as described in the module docstring.

    References
    ----------
    Varnai, T., and R. Davies, 1999: Effects of cloud heterogeneities on shortwave
    radiation: comparison of cloud-top variability and internal heterogeneity.
    J. Atmos. Sci., 56, 1206-1219.

    Wapler, K., and B. Mayer, 2008: A fast three-dimensional approximation for the
    calculation of surface irradiance in large-eddy simulation models. J. Appl.
    Meteor. Climatol., 47, 3061-3071.
    """
    mu0 = np.cos(np.radians(float(solar_zenith_angle)))
    dx, dy = spacing(scene)
    z_edge = scene["z_edge"].values
    weights = path_weights(z_edge, dx, dy, solar_zenith_angle, solar_beam_azimuth) if tilted else None
    top = top_offset(z_edge[-1], dx, dy, solar_zenith_angle, solar_beam_azimuth) if tilted else (0, 0)
    per_band = []
    for b in range(scene.sizes["band"]):
        tau, ssa, g = _band_optics(scene, b)
        if tilted:
            tau, ssa, g = _tilt(tau, ssa, g, weights)
        out = _solve(tau, ssa, g, mu0, scene["surface_albedo"].values[b])
        absorbed = scatter_layers(out.pop("layer_absorption"), weights) if tilted else out.pop("layer_absorption")
        out["atmosphere_absorption"] = absorbed.sum(axis=0)
        out["toa_upward_flux"] = np.roll(out["toa_upward_flux"], top, axis=(0, 1))
        per_band.append(out)
    return _broadband(per_band, scene["solar_weight"].values)


class TiltedIndependentColumn(Baseline):
    """Tilted independent column approximation: tilted minus vertical delta-Eddington fluxes.

    References
    ----------
    Varnai, T., and R. Davies, 1999: J. Atmos. Sci., 56, 1206-1219.

    Wapler, K., and B. Mayer, 2008: J. Appl. Meteor. Climatol., 47, 3061-3071.

    Examples
    --------
    >>> import numpy as np
    >>> from surrogate3d.scenes import make_scene
    >>> extinction = np.zeros((1, 4, 4, 4))
    >>> extinction[0, 1:3, 1, 1] = 0.02          # one cloudy cell column, 500 m deep
    >>> scene = make_scene(extinction, 1.0, 0.85, [0, 250, 500, 750, 1000], 100, 100)
    >>> corr = TiltedIndependentColumn().corrections(scene, 60.0, 0.0)
    >>> sorted(corr)
    ['atmosphere_absorption', 'surface_downward_diffuse_flux', 'surface_downward_direct_flux', ...]
    >>> corr["surface_downward_direct_flux"][1].round(2)   # the shadow falls beside the cloud
    array([-0.99,  0.01, -1.  , -0.99])
    """

    name = "tilted_independent_column"

    def corrections(self, scene, solar_zenith_angle, solar_beam_azimuth, independent_column=None):
        """Tilted-minus-vertical corrections on the benchmark grid.

        Parameters
        ----------
        scene : xarray.Dataset
        solar_zenith_angle, solar_beam_azimuth : float
            [degree].
        independent_column : ignored
            Accepted for the common interface; the tilted ICA uses its own two-stream
            solutions, not the Monte Carlo ones.

        Returns
        -------
        dict of str -> ndarray (ny, nx)
            One array per target of :data:`surrogate3d.core.data_model.TARGETS`.
        """
        tilted = two_stream_fluxes(scene, solar_zenith_angle, solar_beam_azimuth, tilted=True)
        vertical = two_stream_fluxes(scene, solar_zenith_angle, solar_beam_azimuth, tilted=False)
        for fluxes in (tilted, vertical):
            fluxes["surface_downward_flux"] = (fluxes["surface_downward_direct_flux"]
                                               + fluxes["surface_downward_diffuse_flux"])
        return {t: tilted[t] - vertical[t] for t in TARGETS}
