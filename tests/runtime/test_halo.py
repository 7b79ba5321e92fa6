"""Features of host sub-domains with halos against the whole periodic domain, and the halo each feature needs."""

import numpy as np
import pytest

from surrogate3d.errors import ParameterError, ValidationError
from surrogate3d.pairs.features import FEATURES, compute_features
from surrogate3d.pairs.recipe import FeatureRecipe
from surrogate3d.runtime.halo import REACH, feature_reach, halo_width, subdomain_features

#: Every registered feature (the opt-in ones too), radii of 1 and 2.5 columns.
RECIPE = FeatureRecipe(list(FEATURES), {"neighbour_radii": [1000.0, 2500.0], "edge_distance_cap": 3000.0,
                                        "cloud_side_distance": 1500.0})


def periodic_fields(seed, ny=18, nx=20, nz=5):
    rng = np.random.default_rng(seed)
    cloud = rng.uniform(0.0, 1.0, (nz, ny, nx)) * (rng.uniform(size=(nz, ny, nx)) < 0.4)
    clear = np.linspace(0.05, 0.01, nz)[:, None, None] * np.ones((nz, ny, nx))
    tau = clear + 10.0 * cloud * rng.uniform(0.3, 1.5, cloud.shape)
    fields = {"layer_cloud_fraction": cloud, "layer_optical_depth": tau, "layer_clear_sky_optical_depth": clear,
              "z_edge": np.linspace(0.0, 3000.0, nz + 1), "dx": 1000.0, "dy": 1000.0,
              "surface_albedo": rng.uniform(0.05, 0.3, (ny, nx)), "total_cloud_fraction": cloud.max(axis=0),
              "column_optical_depth_mean": tau.sum(axis=0), "column_optical_depth_std": rng.uniform(0, 3, (ny, nx)),
              "cloud_edge_length": rng.uniform(0, 2e-3, (ny, nx))}
    for flux in ("surface_downward_flux", "surface_downward_direct_flux", "surface_downward_diffuse_flux",
                 "toa_upward_flux", "surface_upward_flux", "atmosphere_absorption"):
        fields[f"independent_column_{flux}"] = rng.uniform(0.05, 0.9, (ny, nx))
    return fields


def cut(fields, y0, y1, x0, x1, hx, hy):
    """The sub-domain rows y0:y1, columns x0:x1 with a halo taken from the periodic domain."""
    ny, nx = fields["surface_albedo"].shape
    rows, cols = np.arange(y0 - hy, y1 + hy) % ny, np.arange(x0 - hx, x1 + hx) % nx
    out = {}
    for key, value in fields.items():
        if np.ndim(value) == 2:
            out[key] = value[np.ix_(rows, cols)]
        elif np.ndim(value) == 3:
            out[key] = value[:, rows][:, :, cols]
        else:
            out[key] = value
    return out


def test_every_feature_has_a_reach():
    # A new feature that reads its neighbours must say how far (or it would be taken as 0).
    neighbours = {"cloud_fraction", "cos_solar_zenith"}
    assert neighbours.isdisjoint(REACH) and set(REACH) <= set(FEATURES)
    assert all(name in REACH for name in FEATURES if FEATURES[name].per_radius or "slant" in name
               or "neighbour" in name or "interception" in name or "gradient" in name or "upsun" in name
               or name.startswith("direct_beam_prior"))


@pytest.mark.parametrize("zenith, azimuth", [(0.0, 0.0), (35.0, 90.0), (60.0, 217.0), (80.0, 333.0)])
def test_split_domain_equals_the_periodic_domain(zenith, azimuth):
    # Four sub-domains with the halo the recipe needs give the features of the whole
    # periodic domain (the exactness the host needs, 1e-10; round-off of window sums).
    fields = dict(periodic_fields(int(zenith)), solar_zenith_angle=zenith, solar_beam_azimuth=azimuth)
    fields["z_edge"] = fields["z_edge"] * (0.6 if zenith >= 60.0 else 1.0)
    whole = compute_features(fields, RECIPE).reshape(18, 20, -1)
    hx, hy = halo_width(RECIPE, fields["z_edge"], 1000.0, 1000.0, zenith, azimuth)
    assert hx <= 20 and hy <= 18
    for y0, y1 in ((0, 9), (9, 18)):
        for x0, x1 in ((0, 7), (7, 20)):
            part = subdomain_features(cut(fields, y0, y1, x0, x1, hx, hy), RECIPE, (hx, hy))
            np.testing.assert_allclose(part.reshape(y1 - y0, x1 - x0, -1), whole[y0:y1, x0:x1], rtol=1e-10,
                                       atol=1e-12)


def test_reach_grows_with_the_sun_and_a_short_halo_is_named():
    recipe = FeatureRecipe(["slant_optical_depth", "neighbour_mean_cloud_fraction"], {"neighbour_radii": [2000.0]})
    z_edge = [0.0, 1000.0, 2000.0, 4000.0]
    # The path leaves the 4 km top 4 km tan(theta0) away, 0, 2.3 and 22.7 km at 0, 30 and 80 degrees
    # (geometry), in the column whose centre is nearest.
    assert [feature_reach(recipe, z_edge, 1000.0, 1000.0, z, 0.0)["slant_optical_depth"][0] for z in (0, 30, 80)] \
        == [0, 2, 23]
    assert halo_width(recipe, z_edge, 1000.0, 1000.0, 30.0, 90.0) == (2, 2)
    fields = cut(dict(periodic_fields(3), solar_zenith_angle=30.0, solar_beam_azimuth=0.0,
                      z_edge=[0.0, 500.0, 1000.0, 2000.0, 3000.0, 4000.0]), 0, 6, 0, 6, 1, 1)
    with pytest.raises(ValidationError, match="feature slant_optical_depth reads 2 columns along x and 0 along y; "
                                              "the halo has 1 and 1"):
        subdomain_features(fields, recipe, 1)


def test_runtime_corrections_of_sub_domains(built):
    # The exported model on four sub-domains with halos gives the corrections of the whole domain.
    from surrogate3d.runtime import load_coefficients
    from surrogate3d.runtime.halo import halo_width as width

    model = load_coefficients(built["export_dir"] / "boosted.coefficients.json")
    fields = dict(periodic_fields(7), solar_zenith_angle=50.0, solar_beam_azimuth=120.0)
    whole = model.predict_host(fields, check_envelope=False).reshape(18, 20, -1)
    hx, hy = width(model.recipe, fields["z_edge"], 1000.0, 1000.0, 50.0, 120.0)
    for y0, y1 in ((0, 10), (10, 18)):
        for x0, x1 in ((0, 11), (11, 20)):
            part = model.predict_host(cut(fields, y0, y1, x0, x1, hx, hy), check_envelope=False, halo=(hx, hy))
            np.testing.assert_allclose(part.reshape(y1 - y0, x1 - x0, -1), whole[y0:y1, x0:x1], rtol=1e-10,
                                       atol=1e-12)


def test_malformed_sub_domain_fields_are_named():
    fields = cut(dict(periodic_fields(4), solar_zenith_angle=20.0, solar_beam_azimuth=0.0), 0, 6, 0, 6, 3, 3)
    with pytest.raises(ValidationError, match="host fields lack \\['solar_beam_azimuth'\\]"):
        subdomain_features({k: v for k, v in fields.items() if k != "solar_beam_azimuth"}, RECIPE, 3)
    with pytest.raises(ParameterError, match="halo must be an integer >= 0"):
        subdomain_features(fields, RECIPE, -1)
    with pytest.raises(ParameterError, match="leaves no own column"):
        subdomain_features(fields, RECIPE, 6)


def test_capped_slant_path_bounds_the_halo_and_splits_exactly():
    # With the host's cap on the slant paths' horizontal travel the halo stops growing as
    # the sun sinks, and four sub-domains still give the periodic domain's features.
    fields = dict(periodic_fields(11), solar_zenith_angle=80.0, solar_beam_azimuth=200.0, slant_path_reach=2500.0)
    uncapped = halo_width(RECIPE, fields["z_edge"], 1000.0, 1000.0, 80.0, 200.0)
    hx, hy = halo_width(RECIPE, fields["z_edge"], 1000.0, 1000.0, 80.0, 200.0, slant_path_reach=2500.0)
    # Toward the sun (20 degrees from -x): 2.5 km of travel is 2.35 columns along x and 0.86
    # along y, so the swept area reads 3 and 1 columns (bilinear neighbours), the
    # interception twice that (out and back): 6 along x; along y the 3 km edge-distance cap
    # and the 2.5 km windows read 3. Uncapped, the path travels 17 km from the 3 km top
    # (3000 tan 80 degrees, geometry).
    assert (hx, hy) == (6, 3) and uncapped[0] > 30
    whole = compute_features(fields, RECIPE).reshape(18, 20, -1)
    for y0, y1 in ((0, 9), (9, 18)):
        for x0, x1 in ((0, 10), (10, 20)):
            part = subdomain_features(cut(fields, y0, y1, x0, x1, hx, hy), RECIPE, (hx, hy))
            np.testing.assert_allclose(part.reshape(y1 - y0, x1 - x0, -1), whole[y0:y1, x0:x1], rtol=1e-10,
                                       atol=1e-12)


def test_capped_path_is_exact_under_a_horizontally_uniform_sky():
    # Beer-Lambert: under horizontally uniform layers every path toward the sun has the
    # optical depth tau / cos(theta0), capped or not; a cap of 0 is the vertical column.
    from surrogate3d.core.slant_path import area_path_weights, path_weights

    fields = dict(periodic_fields(5), solar_zenith_angle=70.0, solar_beam_azimuth=37.0)
    uniform = np.linspace(0.3, 0.05, 5)[:, None, None] * np.ones((5, 18, 20))
    fields["layer_optical_depth"] = uniform
    mu0 = np.cos(np.radians(70.0))
    for reach in (0.0, 1200.0, 4000.0):
        capped = dict(fields, slant_path_reach=reach)
        slant = compute_features(capped, FeatureRecipe(["slant_optical_depth"]))[:, 0]
        np.testing.assert_allclose(slant, uniform.sum(axis=0).reshape(-1) / mu0, rtol=1e-12)
    for weights_of in (path_weights, area_path_weights):
        vertical = weights_of(fields["z_edge"], 1000.0, 1000.0, 70.0, 37.0, reach=0.0)
        assert all(oy.tolist() == [0] and ox.tolist() == [0] and w.tolist() == [1.0] for oy, ox, w in vertical)
        far = weights_of(fields["z_edge"], 1000.0, 1000.0, 70.0, 37.0, reach=1e7)
        plain = weights_of(fields["z_edge"], 1000.0, 1000.0, 70.0, 37.0)
        assert all(np.array_equal(a[2], b[2]) and np.array_equal(a[1], b[1]) for a, b in zip(far, plain))
    with pytest.raises(ParameterError, match="slant_path_reach"):
        path_weights(fields["z_edge"], 1000.0, 1000.0, 70.0, 37.0, reach=-1.0)
    with pytest.raises(ValidationError, match="slant_path_reach"):
        compute_features(dict(fields, slant_path_reach=float("nan")), FeatureRecipe(["slant_optical_depth"]))


def test_capped_path_above_the_cap_is_the_column_reached():
    # Beyond the cap the path rises through the column it reached after travelling the cap
    # (2.5 km toward the sun, -x: the column 2 to the west, whose centre is nearest), not
    # its own: geometry, for every sun (a zero-thickness slab there once rounded to "vertical").
    from surrogate3d.core.slant_path import path_weights

    for zenith in (60.0, 75.0, 85.0, 89.0):
        weights = path_weights([0.0, 500.0, 1000.0, 2000.0, 4000.0], 1000.0, 1000.0, zenith, 0.0, reach=2500.0)
        assert [(oy.tolist(), ox.tolist()) for oy, ox, _ in weights[-1:]] == [([0], [-2])]
