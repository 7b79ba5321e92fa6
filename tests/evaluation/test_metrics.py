"""Metrics against their definitions: perfect and null predictors, noise floor, W m-2 scaling."""

import numpy as np
import pytest

from surrogate3d.evaluation.breakdown import group_labels, metric_table
from surrogate3d.evaluation.metrics import error_metrics
from surrogate3d.evaluation.predictions import reference_predictions
from surrogate3d.core.data_model import TARGETS
from surrogate3d.learn.pairs_table import target_matrix
from synthetic_pairs import make_synthetic_pairs

RNG = np.random.default_rng(3)


def test_perfect_predictor_on_noise_free_targets():
    true = RNG.normal(size=500)
    m = error_metrics(true, true)
    assert m["skill"] == 1.0 and m["rmse"] == 0.0 and m["r2"] == 1.0 and m["noise_floor_skill"] == 1.0


def test_no_correction_has_zero_skill():
    # The reference forecast of a skill score scores 0 (Wilks 2011, ch. 8).
    true = RNG.normal(size=500)
    m = error_metrics(np.zeros_like(true), true)
    assert m["skill"] == 0.0
    assert m["rmse"] == pytest.approx(np.sqrt(np.mean(true**2)))
    assert m["bias"] == pytest.approx(-true.mean())


def test_perfect_predictor_on_noisy_targets_reaches_the_noise_floor():
    # A perfect model scored against targets with Monte Carlo noise of standard error s
    # has RMSE -> sqrt(mean(s^2)), so its skill -> 1 - sqrt(mean(s^2)) / RMSE_ica
    # (law of large numbers; formula in docs/methods/models-and-metrics.md).
    n = 400_000
    truth = 0.05 * RNG.normal(size=n)
    se = RNG.uniform(0.005, 0.03, size=n)
    noisy = truth + se * RNG.normal(size=n)
    perfect = error_metrics(truth, noisy, se)
    assert perfect["skill"] == pytest.approx(perfect["noise_floor_skill"], abs=2e-3)
    assert perfect["noise_corrected_rmse"] < 0.1 * perfect["noise_rmse"]
    half = error_metrics(0.5 * truth, noisy, se)
    assert half["noise_corrected_rmse"] == pytest.approx(0.5 * 0.05, rel=0.02)
    assert half["noise_corrected_skill"] == pytest.approx(0.5, abs=0.01)


def test_skill_is_undefined_where_the_benchmarks_resolve_no_3d_effect():
    # Targets that are benchmark noise only (an atmosphere that hardly absorbs): a
    # relative score needs a signal at least as large as the noise (common practice), so
    # every skill is undefined while the errors in W m-2 are still reported.
    se = np.full(1000, 0.01)
    noise_only = se * RNG.normal(size=1000)
    m = error_metrics(0.03 + 0.0 * noise_only, noise_only, se)
    assert np.isnan(m["skill"]) and np.isnan(m["noise_floor_skill"]) and np.isnan(m["noise_corrected_skill"])
    assert m["rmse"] == pytest.approx(np.sqrt(np.mean((0.03 - noise_only) ** 2)))
    assert m["rmse_no_correction"] == pytest.approx(np.sqrt(np.mean(noise_only**2)))
    # A resolved effect (RMS 5 times the noise) is scored as usual.
    effect = 0.05 * RNG.normal(size=1000) + noise_only
    assert error_metrics(np.zeros(1000), effect, se)["skill"] == 0.0


def test_watt_metrics_are_normalized_times_incident_flux():
    predicted, true, se = RNG.normal(size=(3, 300))
    se = 0.3 * np.abs(se)
    flux = 1361.0 * np.cos(np.radians(40.0))
    a, b = error_metrics(predicted, true, se), error_metrics(predicted, true, se, scale=flux)
    for key in ("rmse", "mae", "bias", "rmse_no_correction", "noise_rmse", "noise_corrected_rmse"):
        assert b[key] == pytest.approx(a[key] * flux, rel=1e-12)
    for key in ("skill", "r2", "noise_floor_skill"):
        assert b[key] == pytest.approx(a[key], rel=1e-12)
    varying = RNG.uniform(200.0, 1300.0, size=300)
    c = error_metrics(predicted, true, se, scale=varying)
    assert c["rmse"] == pytest.approx(np.sqrt(np.mean(((predicted - true) * varying) ** 2)), rel=1e-12)
    assert c["mae"] == pytest.approx(np.mean(np.abs(predicted - true) * varying), rel=1e-12)


def test_r2_is_the_coefficient_of_determination():
    true = RNG.normal(size=200) + 3.0
    predicted = true + 0.3 * RNG.normal(size=200)
    expected = 1 - np.sum((predicted - true) ** 2) / np.sum((true - true.mean()) ** 2)
    assert error_metrics(predicted, true)["r2"] == pytest.approx(expected, rel=1e-12)


def test_baselines_score_their_known_skill_on_noise_free_targets():
    # The synthetic baselines are 0.5 and 0.8 times the truth: skill 0.5 and 0.8 exactly.
    pairs = make_synthetic_pairs(seeds_per_regime=2, noise=0.0)
    table = metric_table(pairs, reference_predictions(pairs, TARGETS), TARGETS, "all scenes", ("all",))
    skill = table[table["units"] == "1"].set_index(["predictor", "target"])["skill"]
    assert np.allclose(skill.loc["tilted independent column"], 0.5, atol=1e-12)
    assert np.allclose(skill.loc["non-local independent pixel"], 0.8, atol=1e-12)
    assert np.allclose(skill.loc["no correction"], 0.0)
    assert np.allclose(table["noise_floor_skill"], 1.0)


def test_breakdown_groups_cover_every_sample_once(synthetic_pairs):
    predictions = {"no correction": np.zeros((synthetic_pairs.sizes["sample"], 5))}
    table = metric_table(synthetic_pairs, predictions, TARGETS, "all")
    one = table[(table["target"] == TARGETS[0]) & (table["units"] == "1")]
    for breakdown, rows in one.groupby("breakdown"):
        assert rows["n"].sum() == synthetic_pairs.sizes["sample"], breakdown
    labels, _ = group_labels(synthetic_pairs.assign(cloud_fraction=("sample", np.r_[1.0, 0.0, np.full(
        synthetic_pairs.sizes["sample"] - 2, 0.5)])), "cloud_fraction")
    assert labels[0] == "0.99-1" and labels[1] == "0-0.01" and labels[2] == "0.5-0.75"
    zenith = group_labels(synthetic_pairs, "solar_zenith")[0]
    assert set(zenith) == {"0-30 deg", "45-60 deg", "60-75 deg"}
    watts = table[(table["breakdown"] == "all") & (table["units"] == "W m-2") & (table["target"] == TARGETS[0])]
    true = target_matrix(synthetic_pairs, [TARGETS[0]])[:, 0] * synthetic_pairs["incident_flux"].values
    assert watts["rmse"].iloc[0] == pytest.approx(np.sqrt(np.mean(true**2)), rel=1e-12)
