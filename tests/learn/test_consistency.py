"""apply_correction: direct + diffuse = total, non-negative fluxes, energy balance per domain."""

import numpy as np
import pytest

from surrogate3d.errors import ValidationError
from surrogate3d.learn.consistency import apply_correction, energy_residual
from surrogate3d.learn.models import BoostedCorrection, RidgeCorrection
from surrogate3d.core.data_model import TARGETS
from surrogate3d.learn.pairs_table import domain_groups, feature_matrix, target_matrix

RNG = np.random.default_rng(7)


def _domain_means(values, groups):
    return np.bincount(groups, weights=values) / np.bincount(groups)


def _inputs(pairs, scale=0.05):
    ica = target_matrix(pairs, TARGETS, "independent_column_flux")
    correction = scale * RNG.normal(size=ica.shape)
    return ica, correction, pairs["surface_albedo"].values, domain_groups(pairs)


def test_true_corrections_already_conserve_energy(synthetic_pairs):
    # 3D and independent-column solutions both conserve energy over a periodic domain
    # (the horizontal divergence integrates to zero, Gauss), so the true correction's
    # domain-mean residual is zero.
    truth = target_matrix(synthetic_pairs, TARGETS, "noise_free_target")
    groups = domain_groups(synthetic_pairs)
    residual = energy_residual(truth, synthetic_pairs["surface_albedo"].values)
    assert np.abs(_domain_means(residual, groups)).max() < 1e-14
    ica = target_matrix(synthetic_pairs, TARGETS, "independent_column_flux")
    out = apply_correction(ica, truth, synthetic_pairs["surface_albedo"].values, groups)
    assert np.abs(out.balance_shift).max() < 1e-14


def test_energy_balance_holds_to_round_off(synthetic_pairs):
    ica, correction, albedo, groups = _inputs(synthetic_pairs)
    out = apply_correction(ica, correction, albedo, groups)
    means = _domain_means(energy_residual(out.correction, albedo), groups)
    assert np.abs(means).max() < 1e-15
    assert out.unbalanced_domains == 0
    # The direct beam is kept; the scattered-light sinks are scaled by one factor per
    # domain, so their patterns keep their shape.
    before = apply_correction(ica, correction, albedo, groups, energy_balance=False).flux
    direct = TARGETS.index("surface_downward_direct_flux")
    np.testing.assert_array_equal(out.flux[:, direct], before[:, direct])
    for name in ("toa_upward_flux", "atmosphere_absorption", "surface_downward_diffuse_flux"):
        k = TARGETS.index(name)
        for g in np.unique(groups):
            member = (groups == g) & (before[:, k] > 0)
            ratio = out.flux[member, k] / before[member, k]
            assert np.ptp(ratio) < 1e-12, name


def test_components_add_up_and_fluxes_are_non_negative(synthetic_pairs):
    ica, correction, albedo, groups = _inputs(synthetic_pairs, scale=0.3)
    out = apply_correction(ica, correction, albedo, groups, energy_balance=False)
    total, direct, diffuse = (TARGETS.index(t) for t in TARGETS[:3])
    np.testing.assert_allclose(out.flux[:, total], out.flux[:, direct] + out.flux[:, diffuse], atol=1e-15)
    assert out.flux.min() >= 0.0
    negative = (ica + correction < 0)
    assert out.clipped["surface_downward_direct_flux"] == int(negative[:, direct].sum()) > 0
    assert out.clipped_fraction > 0


def test_balance_keeps_fluxes_non_negative_and_gives_no_absorption_to_a_clear_atmosphere():
    # A budget that needs a large cut: scaling the sinks never makes one negative.
    ica = np.array([[0.6, 0.4, 0.2, 0.2, 0.01], [0.6, 0.4, 0.2, 0.2, 0.30]])
    correction = np.array([[0.02, 0.01, 0.01, 0.05, 0.0], [0.02, 0.01, 0.01, 0.05, 0.0]])
    out = apply_correction(ica, correction, [0.1, 0.1], [0, 0])
    assert out.flux.min() >= 0.0 and out.unbalanced_domains == 0
    assert abs(energy_residual(out.correction, [0.1, 0.1]).mean()) < 1e-15
    # An atmosphere that absorbs nothing (a conservative atmosphere, single-scattering
    # albedo 1: its absorption is exactly zero in 3D as in the independent column) keeps
    # absorbing nothing whatever the other corrections' budget residual.
    ica = np.array([[0.7, 0.5, 0.2, 0.27, 0.0], [0.5, 0.3, 0.2, 0.45, 0.0]])
    correction = np.array([[-0.1, -0.12, 0.02, 0.03, 0.0], [0.05, 0.03, 0.02, -0.02, 0.0]])
    out = apply_correction(ica, correction, [0.1, 0.1], [0, 0])
    np.testing.assert_array_equal(out.flux[:, 4], 0.0)
    assert abs(energy_residual(out.correction, [0.1, 0.1]).mean()) < 1e-15


def test_a_budget_the_direct_beam_alone_exceeds_is_counted_unbalanced():
    ica = np.array([[0.7, 0.5, 0.2, 0.25, 0.05]])
    out = apply_correction(ica, np.array([[0.0, 0.6, 0.0, 0.0, 0.0]]), [0.0], [0])
    assert out.unbalanced_domains == 1 and out.flux.min() >= 0.0


def test_remove_domain_mean(synthetic_pairs):
    ica, correction, albedo, groups = _inputs(synthetic_pairs, scale=0.01)
    out = apply_correction(ica, correction + 0.02, albedo, groups, clip_nonnegative=False, energy_balance=False,
                           remove_domain_mean=True)
    for k in range(1, 5):
        assert np.abs(_domain_means(out.correction[:, k], groups)).max() < 1e-15


def test_bad_input_is_named():
    with pytest.raises(ValidationError, match="surface_albedo must be in"):
        apply_correction(np.ones((1, 5)), np.zeros((1, 5)), [1.5], [0])
    with pytest.raises(ValidationError, match="correction has shape"):
        apply_correction(np.ones((2, 5)), np.zeros((1, 5)), [0.1, 0.1], [0, 0])
    with pytest.raises(ValidationError, match="energy balance needs targets"):
        apply_correction(np.ones((1, 2)), np.zeros((1, 2)), [0.1], [0], targets=TARGETS[:2])


#: Synthetic features that are all zero only for a clear column whose 3 x 3 neighbourhood and
#: up-sun neighbour are clear: the nearest cloud is at least two host columns away.
CLEAR_SKY_GATE = ["cloud_fraction", "upsun_cloud_fraction", "neighbour_cloud_fraction"]


@pytest.mark.parametrize("model", [RidgeCorrection(alpha=1.0, interactions=True, clear_sky_features=CLEAR_SKY_GATE),
                                   BoostedCorrection(max_iter=60, min_samples_leaf=10,
                                                     clear_sky_features=CLEAR_SKY_GATE)],
                         ids=["ridge", "boosted"])
def test_clear_columns_far_from_cloud_get_no_correction(synthetic_pairs, model):
    # Physical rule: far from any cloud, 3D and independent-column fluxes agree, as no
    # shadow or cloud-side light reaches the column (common practice: no cloud nearby, no
    # 3D effect); the synthetic relation is 0 there up to exp(-2 km / 500 m).  The gate
    # makes the correction exactly 0 there, also after the consistency step, whose
    # energy-balance shift then falls on the cloudy columns of the domain.
    model.fit_pairs(synthetic_pairs)
    X = feature_matrix(synthetic_pairs, model.feature_names_)
    far = model.clear_sky_mask(X)
    assert far.sum() > 30
    truth = target_matrix(synthetic_pairs, TARGETS, "noise_free_target")
    assert np.abs(truth[far]).max() < 1.5e-3
    ica, albedo, groups = (target_matrix(synthetic_pairs, TARGETS, "independent_column_flux"),
                           synthetic_pairs["surface_albedo"].values, domain_groups(synthetic_pairs))
    predicted = model.predict_pairs(synthetic_pairs)
    assert np.all(predicted[far] == 0.0)
    out = apply_correction(ica, predicted, albedo, groups, clear_sky=far)
    assert np.all(out.correction[far] == 0.0)
    assert np.abs(_domain_means(energy_residual(out.correction, albedo), groups)).max() < 1e-15
    # Elsewhere the gate changes nothing: the cloudy columns keep their skill.
    typical = np.sqrt(np.mean(truth[~far] ** 2, axis=0))
    rms = np.sqrt(np.mean((predicted[~far] - truth[~far]) ** 2, axis=0))
    assert np.all(rms[:4] < 0.5 * typical[:4])


def test_clear_sky_samples_keep_zero_through_every_step(synthetic_pairs):
    ica, correction, albedo, groups = _inputs(synthetic_pairs, scale=0.05)
    clear = RNG.uniform(size=groups.size) < 0.2
    correction[clear] = 0.0
    out = apply_correction(ica, correction + 0.01 * ~clear[:, None], albedo, groups, remove_domain_mean=True,
                           clear_sky=clear)
    assert np.all(out.correction[clear] == 0.0)
    assert np.abs(_domain_means(energy_residual(out.correction, albedo), groups)).max() < 1e-15
    unmarked = apply_correction(ica, correction, albedo, groups)
    marked = apply_correction(ica, correction, albedo, groups, clear_sky=np.zeros(groups.size, dtype=bool))
    np.testing.assert_array_equal(marked.correction, unmarked.correction)
    with pytest.raises(ValidationError, match="correction must be 0 at the clear_sky samples"):
        apply_correction(ica, correction + 0.01, albedo, groups, clear_sky=clear)
    with pytest.raises(ValidationError, match="clear_sky must have"):
        apply_correction(ica, correction, albedo, groups, clear_sky=clear[:-1])
