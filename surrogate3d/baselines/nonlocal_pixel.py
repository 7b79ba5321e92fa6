"""The non-local independent pixel approximation (NIPA).

Horizontal photon transport smooths the independent-column (independent pixel) fields
over the *radiative smoothing scale*; NIPA imitates it by convolving the
independent-column fluxes with a kernel of that width (Marshak et al. 1995).  Diffusion
theory and Monte Carlo experiments put the scale at about ``sqrt(l_t H)``, with
``l_t = 1 / ((1 - g) beta)`` the transport mean free path and ``H`` the geometrical
cloud thickness (Davis et al. 1997).

Here the kernel is an isotropic Gaussian whose standard deviation along x and y is
that scale, applied by periodic FFT convolution; its weights sum to 1, so domain means
are kept exactly.  The direct beam is left unsmoothed: unscattered photons travel in
straight lines and are not spread horizontally by multiple scattering, so the
smoothing argument does not apply to them (their 3D effect, the displaced shadow, is
what the tilted independent column addresses).  The diffuse surface flux, the
reflected flux and the absorption are smoothed.
"""

import numpy as np

from ..core.data_model import TARGETS
from ..core.validation import check_number
from ..scenes.model import cloud_mask, layer_thickness, spacing
from .base import Baseline

_SMOOTHED = ("surface_downward_diffuse_flux", "toa_upward_flux", "atmosphere_absorption")


def radiative_smoothing_scale(scene):
    """Radiative smoothing scale ``sqrt(l_t H)`` [m] of a scene's clouds.

    ``beta`` is the solar-weighted mean extinction [m-1] of the cloudy cells
    (:func:`surrogate3d.scenes.cloud_mask`); ``g`` their mean asymmetry parameter,
    weighted by scattering extinction; ``H`` [m] the mean, over columns holding cloud,
    of the summed thickness of their cloudy layers.

    Parameters
    ----------
    scene : xarray.Dataset

    Returns
    -------
    float
        0 when the scene has no cloud.

    References
    ----------
    Davis, A., A. Marshak, R. Cahalan, and W. Wiscombe, 1997: The Landsat scale break in
    stratocumulus as a three-dimensional radiative transfer effect: implications for
    cloud remote sensing. J. Atmos. Sci., 54, 241-260.

    Marshak, A., A. Davis, R. F. Cahalan, and W. J. Wiscombe, 1995: Nonlocal independent
    pixel approximation: direct and inverse problems. Remote Sens. Environ., 52, 71-78.
    """
    mask = cloud_mask(scene)
    if not mask.any():
        return 0.0
    weight = scene["solar_weight"].values
    ext = np.einsum("b,bzyx->zyx", weight, scene["extinction"].values)
    scat = np.einsum("b,bzyx->zyx", weight, scene["extinction"].values * scene["single_scattering_albedo"].values)
    asym = np.einsum("b,bzyx->zyx", weight, scene["extinction"].values * scene["single_scattering_albedo"].values
                     * scene["asymmetry_parameter"].values)
    beta = ext[mask].mean()
    g = asym[mask].sum() / scat[mask].sum() if scat[mask].sum() > 0 else 0.0
    thickness = (mask * layer_thickness(scene)[:, None, None]).sum(axis=0)
    cloud_thickness = thickness[mask.any(axis=0)].mean()
    transport_mean_free_path = 1.0 / ((1.0 - g) * beta)
    return float(np.sqrt(transport_mean_free_path * cloud_thickness))


def gaussian_kernel_spectrum(ny, nx, dx, dy, width):
    """Real FFT of a periodic, normalized isotropic Gaussian kernel on the grid.

    Parameters
    ----------
    ny, nx : int
        Grid size.
    dx, dy : float
        Cell size [m].
    width : float
        Standard deviation along x and y [m]; 0 gives the identity.

    Returns
    -------
    ndarray (ny, nx // 2 + 1), complex
        Multiply ``numpy.fft.rfft2`` of a field by it to convolve.
    """
    if width <= 0.0:
        return np.ones((ny, nx // 2 + 1), dtype=complex)
    # Minimum-image distances of each cell from cell (0, 0) on the periodic grid.
    x = np.minimum(np.arange(nx), nx - np.arange(nx)) * dx
    y = np.minimum(np.arange(ny), ny - np.arange(ny)) * dy
    kernel = np.exp(-0.5 * (y[:, None] ** 2 + x[None, :] ** 2) / width ** 2)
    kernel /= kernel.sum()
    return np.fft.rfft2(kernel)


def smooth(field, spectrum):
    """Periodic convolution of a (ny, nx) field with a kernel given by its spectrum."""
    field = np.asarray(field, dtype=np.float64)
    return np.fft.irfft2(np.fft.rfft2(field) * spectrum, s=field.shape)


class NonlocalIndependentPixel(Baseline):
    """Non-local independent pixel approximation: smoothed minus unsmoothed independent-column fluxes.

    Parameters
    ----------
    smoothing_scale : float, optional
        Kernel standard deviation [m], >= 0; by default the scene's
        :func:`radiative_smoothing_scale`.

    References
    ----------
    Marshak, A., A. Davis, R. F. Cahalan, and W. J. Wiscombe, 1995: Nonlocal independent
    pixel approximation: direct and inverse problems. Remote Sens. Environ., 52, 71-78.

    Davis, A., A. Marshak, R. Cahalan, and W. Wiscombe, 1997: J. Atmos. Sci., 54, 241-260.
    """

    name = "nonlocal_independent_pixel"

    def __init__(self, smoothing_scale=None):
        if smoothing_scale is not None:
            check_number("smoothing_scale", smoothing_scale, 0.0, None)
        self.smoothing_scale = smoothing_scale

    def __repr__(self):
        return f"NonlocalIndependentPixel(smoothing_scale={self.smoothing_scale!r})"

    def corrections(self, scene, solar_zenith_angle, solar_beam_azimuth, independent_column):
        """Smoothed-minus-unsmoothed corrections on the benchmark grid.

        Parameters
        ----------
        scene : xarray.Dataset
        solar_zenith_angle, solar_beam_azimuth : float
            [degree]; unused (the kernel is isotropic), accepted for the common interface.
        independent_column : xarray.Dataset or dict
            The independent-column fluxes to smooth (a run result, or a dict of (ny, nx)
            arrays), fractions of the incident flux on the horizontal.

        Returns
        -------
        dict of str -> ndarray (ny, nx)
            One array per target; the direct-beam correction is zero.
        """
        width = radiative_smoothing_scale(scene) if self.smoothing_scale is None else float(self.smoothing_scale)
        dx, dy = spacing(scene)
        spectrum = gaussian_kernel_spectrum(scene.sizes["y"], scene.sizes["x"], dx, dy, width)
        out = {t: np.zeros((scene.sizes["y"], scene.sizes["x"])) for t in TARGETS}
        for name in _SMOOTHED:
            field = np.asarray(independent_column[name], dtype=np.float64)
            out[name] = smooth(field, spectrum) - field
        out["surface_downward_flux"] = out["surface_downward_diffuse_flux"].copy()
        return out
