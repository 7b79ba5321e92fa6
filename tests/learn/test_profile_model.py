"""The profile (heating-rate) correction: energy conservation, no absorber no correction, errors."""

import numpy as np
import pytest

from surrogate3d.errors import ParameterError, ValidationError
from surrogate3d.learn.profile_model import ProfileCorrection
from surrogate3d.runtime.profile import match_column_integral


def fields(n=80, seed=0, split=1):
    rng = np.random.default_rng(seed)
    edges = np.linspace(0.0, 3000.0, 6 * split + 1)
    tau = np.repeat(rng.uniform(0.0, 4.0, (n, 6)), split, axis=1) / split
    cloud = np.repeat(rng.uniform(0.0, 1.0, (n, 6)) * (rng.uniform(size=(n, 6)) > 0.5), split, axis=1)
    absorbed = np.repeat(rng.uniform(0.0, 0.01, (n, 6)), split, axis=1) / split
    return {"bottom": np.tile(edges[:-1], (n, 1)), "top": np.tile(edges[1:], (n, 1)), "optical_depth": tau,
            "cloud_fraction": cloud, "independent_column_absorption": absorbed,
            "cos_solar_zenith": rng.uniform(0.2, 1.0, n), "slant_optical_depth_above": np.zeros((n, 6 * split))}


def test_profiles_sum_to_the_column_correction():
    # Energy conservation: the layers' corrections add up to the column's (issue requirement,
    # to round-off), whatever the profile, padding or absorption.
    rng = np.random.default_rng(1)
    profile = rng.normal(size=(5, 4)) * 1e-3
    profile[1, 3] = np.nan
    absorbed = rng.uniform(size=(5, 4)) * 1e-2
    absorbed[2] = 0.0
    column = rng.normal(size=5) * 1e-2
    matched = match_column_integral(profile, column, absorbed)
    np.testing.assert_allclose(np.nansum(matched, axis=1), column, rtol=0, atol=1e-17)
    assert np.isnan(matched[1, 3])


def test_learns_a_density_and_keeps_it_on_another_grid():
    # The target is a function of the layer's absorption density and a column feature: a
    # model fitted on 6 layers predicts the same densities on the grid split into 12.
    train = fields(400, 2)
    X = np.random.default_rng(3).uniform(size=(400, 1))

    def truth(f, x):
        return 0.2 * f["independent_column_absorption"] * (x - 0.5)

    model = ProfileCorrection(max_iter=150, min_samples_leaf=5, learning_rate=0.2).fit(X, ["x"], train, truth(train, X))
    coarse, fine = fields(100, 4), fields(100, 4, split=2)
    x = np.random.default_rng(5).uniform(size=(100, 1))
    on_coarse = model.predict(x, coarse)
    on_fine = model.predict(x, fine)
    np.testing.assert_allclose(on_fine[:, ::2] + on_fine[:, 1::2], on_coarse, atol=2e-5)
    error = np.sqrt(np.mean((on_coarse - truth(coarse, x)) ** 2)) / np.sqrt(np.mean(truth(coarse, x) ** 2))
    assert error < 0.3


def test_no_absorber_no_correction_and_errors():
    f = fields(60, 6)
    X = np.random.default_rng(7).uniform(size=(60, 1))
    model = ProfileCorrection(max_iter=10, min_samples_leaf=5).fit(X, ["x"], f, f["independent_column_absorption"])
    transparent = dict(f, independent_column_absorption=np.zeros_like(f["independent_column_absorption"]))
    assert np.all(model.predict(X, transparent) == 0.0)
    with pytest.raises(ParameterError, match="X must have shape"):
        model.predict(np.zeros((60, 2)), f)
    with pytest.raises(ValidationError, match="not fitted"):
        ProfileCorrection().predict(X, f)
    with pytest.raises(ParameterError, match="scale_floor"):
        ProfileCorrection(scale_floor=0.0).fit(X, ["x"], f, f["independent_column_absorption"])
