"""apply_correction: direct + diffuse = total, non-negative fluxes, energy balance per domain."""

import numpy as np
import pytest

from surrogate3d.errors import ValidationError
from surrogate3d.learn.consistency import apply_correction, energy_residual
from surrogate3d.learn.models import BoostedCorrection, RidgeCorrection
from surrogate3d.learn.pairs_table import TARGETS, domain_groups, target_matrix

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
    # Only the absorption's domain mean moved (unless rescaled): its pattern is kept.
    k = TARGETS.index("atmosphere_absorption")
    if out.rescaled_domains == 0:
        shift = correction[:, k] - out.correction[:, k]
        clipped = ica[:, k] + correction[:, k] < 0
        for g in np.unique(groups):
            member = (groups == g) & ~clipped
            assert np.ptp(shift[member]) < 1e-14


def test_components_add_up_and_fluxes_are_non_negative(synthetic_pairs):
    ica, correction, albedo, groups = _inputs(synthetic_pairs, scale=0.3)
    out = apply_correction(ica, correction, albedo, groups, energy_balance=False)
    total, direct, diffuse = (TARGETS.index(t) for t in TARGETS[:3])
    np.testing.assert_allclose(out.flux[:, total], out.flux[:, direct] + out.flux[:, diffuse], atol=1e-15)
    assert out.flux.min() >= 0.0
    negative = (ica + correction < 0)
    assert out.clipped["surface_downward_direct_flux"] == int(negative[:, direct].sum()) > 0
    assert out.clipped_fraction > 0


def test_balance_never_makes_absorption_negative():
    # One domain whose budget needs a large absorption cut: a uniform shift would go
    # below zero, so the cut becomes proportional to the absorption (same domain mean).
    ica = np.array([[0.6, 0.4, 0.2, 0.2, 0.01], [0.6, 0.4, 0.2, 0.2, 0.30]])
    correction = np.array([[0.02, 0.01, 0.01, 0.05, 0.0], [0.02, 0.01, 0.01, 0.05, 0.0]])
    out = apply_correction(ica, correction, [0.1, 0.1], [0, 0])
    assert out.rescaled_domains == 1
    assert out.flux[:, 4].min() >= 0.0
    assert abs(energy_residual(out.correction, [0.1, 0.1]).mean()) < 1e-15


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


RIDGE_MISSES_CLEAR_SKY = pytest.mark.xfail(strict=True, reason=(
    "known limitation: a global quadratic ridge fit cannot vanish on the few clear columns far from cloud "
    "(about 3 % of the synthetic samples); it predicts about a quarter of the typical diffuse and TOA "
    "correction there"))


@pytest.mark.parametrize("model", [pytest.param(RidgeCorrection(alpha=1.0, interactions=True),
                                                marks=RIDGE_MISSES_CLEAR_SKY, id="ridge"),
                                   pytest.param(BoostedCorrection(max_iter=60, min_samples_leaf=10), id="boosted")])
def test_clear_columns_far_from_cloud_get_almost_no_correction(synthetic_pairs, model):
    # Far from any cloud, 3D and independent-column fluxes agree (no shadow or cloud-side
    # light reaches the column; common practice), and the synthetic relation is 0 there.
    model.fit_pairs(synthetic_pairs)
    names = list(synthetic_pairs["feature"].values)
    X = synthetic_pairs["features"].values
    far = (X[:, names.index("cloud_fraction")] == 0) & (X[:, names.index("upsun_cloud_fraction")] == 0) \
        & (X[:, names.index("cloud_edge_distance")] >= 2000.0)
    assert far.sum() > 50
    clear = synthetic_pairs.isel(sample=np.flatnonzero(far))
    assert np.abs(target_matrix(clear, TARGETS, "noise_free_target")).max() < 1.5e-3
    out = apply_correction(target_matrix(clear, TARGETS, "independent_column_flux"), model.predict_pairs(clear),
                           clear["surface_albedo"].values, domain_groups(clear), energy_balance=False)
    typical = np.sqrt(np.mean(target_matrix(synthetic_pairs, TARGETS) ** 2, axis=0))
    surface_and_toa = [TARGETS.index(t) for t in TARGETS[:4]]
    rms = np.sqrt(np.mean(out.correction[:, surface_and_toa] ** 2, axis=0))
    assert np.all(rms < 0.1 * typical[surface_and_toa])
