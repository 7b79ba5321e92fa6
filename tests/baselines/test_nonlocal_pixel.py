"""The non-local independent pixel approximation: the published smoothing scale, conservation."""

import math

import numpy as np
import pytest

from surrogate3d.baselines import NonlocalIndependentPixel, radiative_smoothing_scale
from surrogate3d.baselines.nonlocal_pixel import gaussian_kernel_spectrum, smooth
from surrogate3d.core.data_model import TARGETS
from surrogate3d.errors import ParameterError
from surrogate3d.scenes import make_scene


def slab(cover=slice(None)):
    ext = np.zeros((2, 16, 16))
    lwc = np.zeros((2, 16, 16))
    ext[1, :, cover] = 0.02
    lwc[1, :, cover] = 1e-4
    return make_scene(ext, 1.0, 0.85, [0.0, 500.0, 1000.0], 100.0, 100.0, liquid_water_content=lwc)


def test_smoothing_scale_is_the_published_formula():
    # Davis et al. (1997): eta = sqrt(l_t H), l_t = 1 / ((1 - g) beta).
    l_t = 1.0 / ((1.0 - 0.85) * 0.02)
    assert radiative_smoothing_scale(slab()) == pytest.approx(math.sqrt(l_t * 500.0))
    assert radiative_smoothing_scale(slab(slice(0, 0))) == 0.0


def test_domain_mean_is_conserved_and_the_direct_beam_untouched():
    rng = np.random.default_rng(2)
    scene = slab(slice(3, 9))
    ica = {name: rng.random((16, 16)) for name in ("toa_upward_flux", "surface_downward_diffuse_flux",
                                                   "atmosphere_absorption")}
    corrections = NonlocalIndependentPixel().corrections(scene, 40.0, 0.0, ica)
    # A convolution with a kernel of unit sum keeps the domain mean (common practice).
    for name in TARGETS:
        assert corrections[name].mean() == pytest.approx(0.0, abs=1e-14), name
    assert np.all(corrections["surface_downward_direct_flux"] == 0.0)
    assert np.abs(corrections["toa_upward_flux"]).max() > 0.01
    assert np.array_equal(corrections["surface_downward_flux"], corrections["surface_downward_diffuse_flux"])


def test_gaussian_kernel_has_the_requested_width():
    # Variance of a Gaussian kernel along each axis equals width^2 (definition).
    spectrum = gaussian_kernel_spectrum(64, 64, 100.0, 100.0, 400.0)
    delta = np.zeros((64, 64))
    delta[32, 32] = 1.0
    k = smooth(delta, spectrum)
    x = (np.arange(64) - 32) * 100.0
    assert k.sum() == pytest.approx(1.0)
    assert (k.sum(axis=0) * x ** 2).sum() == pytest.approx(400.0 ** 2, rel=1e-6)
    assert np.allclose(smooth(delta, gaussian_kernel_spectrum(64, 64, 100.0, 100.0, 0.0)), delta)


def test_smoothing_scale_is_checked():
    with pytest.raises(ParameterError, match="smoothing_scale"):
        NonlocalIndependentPixel(smoothing_scale=-1.0)
