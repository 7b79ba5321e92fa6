"""Learned corrections as the report scores them: the clear-sky gate survives the consistency step."""

import numpy as np

from surrogate3d.evaluation.predictions import DIRECT_BEAM_PRIOR, corrects, model_correction, reference_predictions
from surrogate3d.evaluation.scored_model import ScoredModel
from surrogate3d.learn.consistency import energy_residual
from surrogate3d.learn.models import RidgeCorrection
from surrogate3d.core.data_model import TARGETS
from surrogate3d.learn.pairs_table import domain_groups, feature_matrix


def test_gated_columns_stay_zero_after_the_consistency_step(synthetic_pairs):
    # No cloud in or next to the column, no 3D effect (common practice): the energy balance
    # of the domain (divergence theorem) is closed on the cloudy columns instead.
    gate = ["cloud_fraction", "upsun_cloud_fraction", "neighbour_cloud_fraction"]
    model = RidgeCorrection(interactions=True, clear_sky_features=gate).fit_pairs(synthetic_pairs)
    clear = model.clear_sky_mask(feature_matrix(synthetic_pairs, model.feature_names_))
    assert clear.any()
    correction, outcome = model_correction(ScoredModel.from_estimator("ridge", "ridge", model), synthetic_pairs, TARGETS)
    assert np.all(correction[clear] == 0.0) and outcome is not None
    groups = domain_groups(synthetic_pairs)
    residual = energy_residual(correction, synthetic_pairs["surface_albedo"].values)
    assert np.abs(np.bincount(groups, weights=residual) / np.bincount(groups)).max() < 1e-15


def test_the_direct_beam_prior_corrects_the_direct_and_total_flux_alone(synthetic_pairs):
    # A host using the prior alone replaces its direct flux by the prior's and keeps its
    # diffuse flux (direct + diffuse = total, common practice), so the prior's row moves the
    # direct and the total surface flux by the same amount and nothing else.
    assert DIRECT_BEAM_PRIOR not in reference_predictions(synthetic_pairs, TARGETS)
    n = synthetic_pairs.sizes["sample"]
    prior = np.linspace(-0.3, 0.2, n)
    features = np.column_stack([synthetic_pairs["features"].values, prior])
    names = [*synthetic_pairs["feature"].values, "direct_beam_prior_slant_minus_vertical"]
    pairs = synthetic_pairs.drop_vars(["features", "feature"]).assign(
        features=(("sample", "feature"), features)).assign_coords(feature=names)
    row = reference_predictions(pairs, TARGETS)[DIRECT_BEAM_PRIOR]
    assert row.shape == (n, len(TARGETS))
    for k, target in enumerate(TARGETS):
        expected = prior if target in ("surface_downward_flux", "surface_downward_direct_flux") else 0.0
        assert np.array_equal(row[:, k], np.broadcast_to(expected, n)), target


def test_only_the_direct_beam_prior_skips_the_targets_it_leaves_alone():
    assert corrects(DIRECT_BEAM_PRIOR, "surface_downward_direct_flux")
    assert corrects(DIRECT_BEAM_PRIOR, "surface_downward_flux")
    assert not corrects(DIRECT_BEAM_PRIOR, "toa_upward_flux")
    assert all(corrects("tilted independent column", t) for t in TARGETS)
