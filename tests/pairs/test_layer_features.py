"""Layer features of the profile correction: Beer-Lambert, independence of the layer count, padding."""

import math

import numpy as np
import pytest

from surrogate3d.errors import ParameterError
from surrogate3d.pairs.layer_features import LAYER_FEATURES, layer_features

NAMES = list(LAYER_FEATURES)


def features(bottom, top, tau, cloud, absorbed, mu0, slant=None):
    """Layer features; by default under a horizontally uniform sky, where the slant path toward
    the sun crosses the optical depth above divided by cos(theta0) (Beer-Lambert law)."""
    above = np.cumsum(tau[:, ::-1], axis=1)[:, ::-1] - 0.5 * tau
    mu0 = np.asarray(mu0, dtype=float)
    return layer_features(bottom, top, tau, cloud, absorbed, mu0, above / mu0[:, None] if slant is None else slant)


def column(split=1):
    """A 2 km column of four 500 m layers (cloud in the second and third), each split in ``split``."""
    edges = np.linspace(0.0, 2000.0, 4 * split + 1)
    tau = np.repeat([0.1, 4.0, 6.0, 0.05], split) / split
    cloud = np.repeat([0.0, 0.6, 0.8, 0.0], split)
    absorbed = np.repeat([0.004, 0.02, 0.03, 0.002], split) / split
    return edges[None, :-1], edges[None, 1:], tau[None], cloud[None], absorbed[None]


def test_direct_beam_and_heights_follow_the_column():
    f = features(*column(), [0.5])
    j = NAMES.index
    # Beer-Lambert law: the direct beam at a layer's middle has crossed the optical depth above it
    # along a path 1 / cos(theta0) longer than the vertical (Bouguer 1729; Lambert 1760).
    above = np.array([0.05 + 6.0 + 4.0 + 0.05, 0.05 + 6.0 + 2.0, 0.05 + 3.0, 0.025])
    np.testing.assert_allclose(f[0, :, j("layer_direct_beam_transmittance")], np.exp(-above / 0.5), rtol=1e-12)
    np.testing.assert_allclose(f[0, :, j("layer_slant_direct_beam_transmittance")], np.exp(-above / 0.5), rtol=1e-12)
    np.testing.assert_allclose(f[0, :, j("layer_slant_minus_vertical_transmittance")], 0.0, atol=1e-15)
    np.testing.assert_allclose(f[0, :, j("layer_height_above_cloud_top")], [-1250.0, -750.0, -250.0, 250.0])
    np.testing.assert_allclose(f[0, :, j("layer_height_above_cloud_base")], [-250.0, 250.0, 750.0, 1250.0])
    np.testing.assert_allclose(f[0, :, j("independent_column_column_absorption")], 0.056)
    np.testing.assert_allclose(f[0, 1, j("layer_log_extinction")], math.log(4.0 / 0.5))


def test_densities_do_not_depend_on_the_layer_count():
    coarse = features(*column(1), [0.7])
    fine = features(*column(2), [0.7])
    for name in ("layer_log_extinction", "independent_column_layer_absorption_density", "layer_cloud_fraction",
                 "independent_column_column_absorption"):
        j = NAMES.index(name)
        np.testing.assert_allclose(fine[0, ::2, j], coarse[0, :, j], rtol=1e-12)
        np.testing.assert_allclose(fine[0, 1::2, j], coarse[0, :, j], rtol=1e-12)


def test_clear_columns_padding_and_bad_shapes():
    bottom, top, tau, cloud, absorbed = column()
    clear = features(bottom, top, tau, np.zeros_like(cloud), absorbed, [1.0])
    np.testing.assert_allclose(clear[0, :, 0], 0.5 * (bottom + top)[0])  # no cloud: heights above the surface
    def pad(a):
        return np.pad(a, ((0, 0), (0, 1)), constant_values=np.nan)

    padded = layer_features(pad(bottom), pad(top), pad(tau), pad(cloud), pad(absorbed), [1.0], pad(tau))
    assert np.all(np.isnan(padded[0, -1]))
    np.testing.assert_allclose(padded[0, :-1], layer_features(bottom, top, tau, cloud, absorbed, [1.0], tau)[0])
    with pytest.raises(ParameterError, match="cloud_fraction must have shape"):
        layer_features(bottom, top, tau, cloud[:, :2], absorbed, [1.0], tau)
    with pytest.raises(ParameterError, match="cos_solar_zenith must lie in"):
        layer_features(bottom, top, tau, cloud, absorbed, [0.0], tau)
