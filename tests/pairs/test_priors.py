"""The direct-beam prior against outside facts: Beer-Lambert, cloud overlap, the gamma average, the Boolean model."""

import math

import numpy as np
import pytest
from scipy import integrate, stats

from surrogate3d.pairs import features as F
from surrogate3d.pairs.recipe import FeatureRecipe
from surrogate3d.core.slant_path import area_path_weights

PRIORS = ["direct_beam_prior", "direct_beam_prior_minus_independent_column", "direct_beam_prior_slant_minus_vertical"]


def host(cloud_fraction, cloud_tau, clear_tau, z_edge, zenith=0.0, azimuth=0.0, std=None, edge=None, dx=1000.0):
    """Host fields from per-layer arrays (nz, ny, nx) of cloud fraction, area-mean cloud and clear optical depth."""
    c = np.asarray(cloud_fraction, dtype=float)
    clear = np.broadcast_to(np.asarray(clear_tau, dtype=float), c.shape).copy()
    tau = clear + np.asarray(cloud_tau, dtype=float)
    shape = c.shape[1:]
    return {"layer_cloud_fraction": c, "layer_optical_depth": tau, "layer_clear_sky_optical_depth": clear,
            "z_edge": np.asarray(z_edge, dtype=float), "dx": dx, "dy": dx, "solar_zenith_angle": zenith,
            "solar_beam_azimuth": azimuth, "total_cloud_fraction": 1.0 - F.maximum_random_clear_fraction(c),
            "column_optical_depth_mean": tau.sum(axis=0),
            "column_optical_depth_std": np.zeros(shape) if std is None else np.asarray(std, dtype=float),
            "cloud_edge_length": np.zeros(shape) if edge is None else np.asarray(edge, dtype=float),
            "independent_column_surface_downward_direct_flux": np.full(shape, 0.5)}


def test_clear_sky_is_beer_lambert_along_the_slant_path():
    # Beer-Lambert: exp(-tau / mu0) for a horizontally uniform clear atmosphere at any sun.
    clear = np.array([0.05, 0.02, 0.01])[:, None, None] * np.ones((3, 4, 5))
    for zenith, azimuth in ((0.0, 0.0), (35.0, 20.0), (75.0, 250.0)):
        fields = host(np.zeros((3, 4, 5)), 0.0, clear, [0.0, 400.0, 1500.0, 4000.0], zenith, azimuth)
        expected = math.exp(-0.08 / math.cos(math.radians(zenith)))
        np.testing.assert_allclose(F.direct_beam_prior(fields), expected, rtol=1e-14)
        np.testing.assert_allclose(F.direct_beam_prior_slant_minus_vertical(fields), 0.0, atol=1e-15)


def test_homogeneous_overcast_is_beer_lambert_along_the_slant_path():
    # Beer-Lambert with the slant path exp(-(tau_cloud + tau_clear) / mu0) under a uniform overcast layer.
    c = np.zeros((3, 3, 3))
    c[1] = 1.0
    cloud = 7.0 * c
    for zenith in (0.0, 55.0, 75.0):
        fields = host(c, cloud, 0.03, [0.0, 500.0, 900.0, 3000.0], zenith, 30.0)
        expected = math.exp(-(7.0 + 0.09) / math.cos(math.radians(zenith)))
        # Round-off of an exponent of up to 27: a few 1e-11 relative.
        np.testing.assert_allclose(F.direct_beam_prior(fields), expected, rtol=1e-10)


@pytest.mark.parametrize("c, tau_c", [(0.3, 2.0), (0.75, 12.0), (1.0, 0.5)])
def test_one_layer_of_fraction_c_under_an_overhead_sun(c, tau_c):
    # Exact for a single layer with uniform in-cloud optical depth: (1 - c) + c exp(-tau_c)
    # (a share c of the lines of sight crosses the cloud). The host's sub-grid standard
    # deviation of such a column is tau_c sqrt(c (1 - c)) (two values, shares c and 1 - c).
    lcf = np.full((1, 2, 2), c)
    std = np.full((2, 2), tau_c * math.sqrt(c * (1.0 - c)))
    fields = host(lcf, c * tau_c, 0.0, [0.0, 800.0], 0.0, std=std, edge=np.full((2, 2), 1e-3))
    np.testing.assert_allclose(F.direct_beam_prior(fields), (1.0 - c) + c * math.exp(-tau_c), rtol=1e-12)


def test_two_separated_layers_overlap_at_random():
    # Independent (random) positions of two cloud layers separated by clear air: the clear
    # shares and the transmittances multiply (probability of independent events).
    c = np.zeros((3, 1, 1))
    c[0], c[2] = 0.4, 0.3
    cloud = np.array([0.4 * 3.0, 0.0, 0.3 * 1.5])[:, None, None]
    fields = host(c, cloud, 0.0, [0.0, 500.0, 1000.0, 1500.0])
    expected = (0.6 + 0.4 * math.exp(-3.0)) * (0.7 + 0.3 * math.exp(-1.5))
    # Sub-grid standard deviation of the column optical depth of that model.
    values = np.array([0.0, 3.0, 1.5, 4.5])
    shares = np.array([0.6 * 0.7, 0.4 * 0.7, 0.6 * 0.3, 0.4 * 0.3])
    mean = (shares * values).sum()
    fields["column_optical_depth_std"] = np.full((1, 1), math.sqrt((shares * (values - mean) ** 2).sum()))
    np.testing.assert_allclose(F.direct_beam_prior(fields), expected, rtol=1e-12)


def test_layers_side_by_side_take_the_known_total_cover():
    # Cloud of two adjacent layers in different columns (cloud tilted by shear: no overlap),
    # each on 30 % of the host column, total cover 60 %, optical depth 4 in every cloudy
    # column: the mean direct transmittance under an overhead sun is 0.4 + 0.6 exp(-4)
    # (shares of the columns); maximum overlap alone would see 70 % clear sky.
    c = np.zeros((3, 1, 1))
    c[0:2] = 0.3
    fields = host(c, 0.3 * 4.0 * (c > 0), 0.0, [0.0, 300.0, 600.0, 2000.0])
    fields["total_cloud_fraction"] = np.full((1, 1), 0.6)
    fields["column_optical_depth_std"] = np.full((1, 1), 4.0 * math.sqrt(0.6 * 0.4))
    np.testing.assert_allclose(F.direct_beam_prior(fields), 0.4 + 0.6 * math.exp(-4.0), rtol=1e-12)
    gamma = F.overlap_exponent(0.6, 0.7)
    assert float((1.0 - 0.3) ** gamma) == pytest.approx(0.4, rel=1e-14)
    assert F.overlap_exponent([0.0, 1.0, 0.5], [1.0, 0.0, 0.5]).tolist() == [1.0, 1.0, 1.0]


def test_staircase_edge_length_of_a_disc():
    # The length of the cell faces along the edge of a digitized disc is the perimeter of its
    # bounding box, 8 r, and pi / 4 of it the disc's perimeter 2 pi r (Cauchy-Crofton:
    # a staircase is |cos a| + |sin a| times longer than the line it follows, 4 / pi on
    # average over the angle a).
    from surrogate3d.pairs.coarsen import edge_length_density

    r, dx = 60.0, 1.0
    y, x = np.mgrid[0:200, 0:200] + 0.5
    disc = (x - 100.0) ** 2 + (y - 100.0) ** 2 <= r * r
    staircase = edge_length_density(disc, dx, dx).sum() * dx * dx
    assert staircase == pytest.approx(8.0 * r, rel=0.01)
    assert F.STAIRCASE_TO_EUCLIDEAN * staircase == pytest.approx(2.0 * math.pi * r, rel=0.01)


def test_maximum_random_overlap_by_hand():
    # Geleyn and Hollingsworth (1979): adjacent cloudy layers overlap maximally, blocks
    # separated by a clear layer at random.
    assert F.maximum_random_clear_fraction([[0.2], [0.5], [0.0], [0.3]])[0] == pytest.approx(0.5 * 0.7)
    assert F.maximum_random_clear_fraction([[0.2], [0.5], [0.3]])[0] == pytest.approx(0.5)
    assert F.maximum_random_clear_fraction([[0.6], [1.0], [0.0], [0.2]])[0] == 0.0
    # The blocks' covers multiply to the same clear fraction on random stacks.
    rng = np.random.default_rng(3)
    c = np.where(rng.random((7, 50)) < 0.4, 0.0, rng.random((7, 50)))
    cover, _, _, _ = F.cloud_blocks(c, c)
    np.testing.assert_allclose(np.prod(1.0 - cover, axis=0), F.maximum_random_clear_fraction(c), rtol=1e-12)
    # The features' block scan gives the same in-cloud relative variance as the plain
    # functions, with the covers made consistent with the total cloud cover.
    fields = random_prior_fields()
    cover, depth, _, _ = F.cloud_blocks(fields["layer_cloud_fraction"], F._cloud_layers(F._Fields(fields)))
    gamma = F.overlap_exponent(fields["total_cloud_fraction"], np.prod(1.0 - cover, axis=0))
    cover = np.where(cover > 0.0, 1.0 - (1.0 - cover) ** gamma, 0.0)
    plain = F.in_cloud_relative_variance(fields["column_optical_depth_std"], cover, depth)
    np.testing.assert_allclose(F._vertical_blocks(F._Fields(fields))[2].reshape(plain.shape), plain, rtol=1e-12)


@pytest.mark.parametrize("mean, v, mu0", [(5.0, 0.5, 0.8), (20.0, 2.0, 0.3), (0.7, 0.05, 1.0), (12.0, 1e-9, 0.5)])
def test_gamma_average_against_quadrature(mean, v, mu0):
    # Barker (1996): the closed form (1 + theta / mu0)^-k is the mean of exp(-tau / mu0)
    # over the gamma density of shape k = 1 / v and scale theta = mean v; checked by
    # numerical quadrature of that density.
    density = stats.gamma(a=1.0 / v, scale=mean * v)
    lo, hi = density.ppf(1e-14), density.ppf(1.0 - 1e-14)
    value, _ = integrate.quad(lambda t: math.exp(-t / mu0) * density.pdf(t), lo, hi, limit=400, epsabs=1e-15)
    assert float(F.gamma_mean_transmittance(mean, v, mu0)) == pytest.approx(value, rel=1e-7)
    assert float(F.gamma_mean_transmittance(mean, 0.0, mu0)) == math.exp(-mean / mu0)


def test_in_cloud_relative_variance_is_the_law_of_total_variance():
    # Law of total variance (common practice): cells with cloud optical depths of relative
    # variance v on a share c, clear elsewhere, give back v exactly.
    rng = np.random.default_rng(5)
    n = 1000
    cloudy = rng.random(n) < 0.35
    tau = np.where(cloudy, rng.gamma(2.0, 3.0, n), 0.0)
    c = cloudy.mean()
    v_true = tau[cloudy].var() / tau[cloudy].mean() ** 2
    cover, depth = np.array([c]), np.array([tau.mean()])
    assert float(F.in_cloud_relative_variance(tau.std(), cover, depth)) == pytest.approx(v_true, rel=1e-10)


def boolean_clear_fraction(radius, count, shift, rng, size=20000.0, points=20000):
    """Sampled clear fraction of slanted lines through ``count`` cylinders placed uniformly (periodic square).

    A line from surface point p, displaced by ``shift`` along x over the cylinders'
    height, misses a cylinder of centre q when the distance from q to the segment
    [p, p + (shift, 0)] exceeds the radius.
    """
    centres = rng.random((count, 2)) * size
    start = rng.random((points, 2)) * size
    d = centres[None, :, :] - start[:, None, :]
    d -= size * np.round(d / size)                      # nearest periodic image (segment << size / 2)
    t = np.clip(d[..., 0] / shift, 0.0, 1.0)
    distance2 = (d[..., 0] - t * shift) ** 2 + d[..., 1] ** 2
    return (distance2 > radius ** 2).all(axis=1).mean()


def test_slanted_cover_matches_a_boolean_field_of_cylinders():
    # Boolean model (Matheron 1975; Serra 1982): Poisson-placed discs of radius r, intensity
    # lambda: cover c = 1 - exp(-lambda pi r^2), edge length per area (1 - c) lambda 2 pi r;
    # a cylinder of height H seen at zenith angle theta hides its disc swept over
    # d = H tan(theta), of area pi r^2 + 2 r d, so the clear fraction is
    # exp(-lambda (pi r^2 + 2 r d)).
    r, lam, size = 300.0, 1.0 / (800.0 * 800.0), 20000.0
    c = 1.0 - math.exp(-lam * math.pi * r * r)
    edge = (1.0 - c) * lam * 2.0 * math.pi * r
    rho = float(F.cloud_width_per_area(c, edge))
    assert rho == pytest.approx(2.0 / (math.pi * r), rel=1e-12)
    rng = np.random.default_rng(11)
    for height, zenith in ((500.0, 40.0), (1500.0, 60.0)):
        d = height * math.tan(math.radians(zenith))
        slanted = float(F.slanted_cover(c, height, math.tan(math.radians(zenith)), rho))
        assert 1.0 - slanted == pytest.approx(math.exp(-lam * (math.pi * r * r + 2.0 * r * d)), rel=1e-12)
        # The law against a sampled field of n = lambda S cylinders, whose clear fraction
        # is (1 - (pi r^2 + 2 r d) / S)^n (n independent uniform placements), close to the
        # Poisson law's exp(-lambda (pi r^2 + 2 r d)); 4 binomial standard errors.
        n = round(lam * size * size)
        exact = (1.0 - (math.pi * r * r + 2.0 * r * d) / size ** 2) ** n
        assert exact == pytest.approx(1.0 - slanted, rel=1e-2)     # n (a / S)^2 / 2 < 1e-2 apart
        estimate = boolean_clear_fraction(r, n, d, rng, size)
        assert abs(estimate - exact) < 4.0 * math.sqrt(exact * (1.0 - exact) / 20000)


def test_area_path_weights_are_the_mean_over_the_column_surface():
    # Definition: the share of the paths from uniformly spread surface points of a column,
    # at uniformly spread heights in the layer, lying in each column (sampled densely).
    z_edge = [0.0, 300.0, 1700.0, 2000.0]
    dx, dy = 1000.0, 700.0
    u = (np.arange(40) + 0.5) / 40
    for zenith, azimuth in ((50.0, 30.0), (70.0, 200.0), (20.0, 90.0)):
        weights = area_path_weights(z_edge, dx, dy, zenith, azimuth, max_step=0.01)
        tan0, phi = math.tan(math.radians(zenith)), math.radians(azimuth)
        for k, (oy, ox, w) in enumerate(weights):
            assert w.sum() == pytest.approx(1.0, rel=1e-12)
            px, py, h = np.meshgrid(u - 0.5, u - 0.5, z_edge[k] + u * (z_edge[k + 1] - z_edge[k]), indexing="ij")
            x = px - h * tan0 * math.cos(phi) / dx
            y = py - h * tan0 * math.sin(phi) / dy
            cells, counts = np.unique(np.stack([np.floor(y + 0.5), np.floor(x + 0.5)], -1).reshape(-1, 2),
                                      axis=0, return_counts=True)
            sampled = {(int(a), int(b)): n / x.size for (a, b), n in zip(cells, counts)}
            got = {(int(a), int(b)): float(v) for a, b, v in zip(oy, ox, w)}
            for key in set(sampled) | set(got):
                assert got.get(key, 0.0) == pytest.approx(sampled.get(key, 0.0), abs=0.03), (zenith, k, key)


def random_prior_fields(ny=6, nx=7, nz=5, zenith=50.0, azimuth=30.0, seed=0):
    rng = np.random.default_rng(seed)
    c = np.where(rng.random((nz, ny, nx)) < 0.5, 0.0, rng.random((nz, ny, nx)))
    fields = host(c, c * 10.0 * rng.random((nz, ny, nx)), 0.01 * rng.random((nz, 1, 1)),
                  np.concatenate([[0.0], np.cumsum(rng.uniform(200.0, 900.0, nz))]), zenith, azimuth,
                  std=5.0 * rng.random((ny, nx)), edge=2e-3 * rng.random((ny, nx)))
    fields["total_cloud_fraction"] = np.minimum(1.0, c.max(axis=0) * 1.2)
    return fields


def test_prior_features_rotate_with_the_grid_and_stay_in_range():
    # A 90-degree rotation of the fields with the beam azimuth rotates the maps (geometry).
    fields = random_prior_fields()
    rotated = {k: (np.rot90(v, k=1, axes=(-1, -2)).copy() if np.ndim(v) >= 2 else v) for k, v in fields.items()}
    rotated["solar_beam_azimuth"] = fields["solar_beam_azimuth"] + 90.0
    recipe = FeatureRecipe(PRIORS)
    x = F.compute_features(fields, recipe).reshape(6, 7, -1)
    xr_ = F.compute_features(rotated, recipe).reshape(7, 6, -1)
    np.testing.assert_allclose(xr_, np.rot90(x, k=1, axes=(1, 0)), rtol=1e-10, atol=1e-12)
    assert np.all((x[..., 0] >= 0.0) & (x[..., 0] <= 1.0))
    # Overhead sun: the slant path is the vertical one.
    overhead = random_prior_fields(zenith=0.0)
    np.testing.assert_allclose(F.direct_beam_prior_slant_minus_vertical(overhead), 0.0, atol=1e-15)
    np.testing.assert_allclose(F.direct_beam_prior_minus_independent_column(overhead),
                               F.direct_beam_prior(overhead) - 0.5, rtol=1e-15)


def test_the_vertical_prior_of_blocks_of_cells_is_close_to_their_mean_transmittance():
    # Sanity check against the definition of the host column's direct transmittance (mean
    # of exp(-tau / mu0) over its cells) for sub-grid columns drawn from the model the
    # prior assumes: one cloud layer, gamma-distributed optical depth on a share c.
    rng = np.random.default_rng(8)
    n, c, mu0 = 200000, 0.6, 0.7
    cloudy = rng.random(n) < c
    tau = np.where(cloudy, rng.gamma(1.5, 4.0, n), 0.0)
    fields = host(np.full((1, 1, 1), cloudy.mean()), np.full((1, 1, 1), tau.mean()), 0.0, [0.0, 1000.0],
                  math.degrees(math.acos(mu0)), std=np.full((1, 1), tau.std()))
    vertical = F._direct_prior(F._Fields(fields), slanted=False)
    assert float(vertical[0, 0]) == pytest.approx(np.exp(-tau / mu0).mean(), rel=2e-3)


def test_priors_need_the_clear_sky_optical_depth():
    fields = random_prior_fields()
    fields.pop("layer_clear_sky_optical_depth")
    with pytest.raises(F.ValidationError, match="layer_clear_sky_optical_depth"):
        F.compute_features(fields, FeatureRecipe(["direct_beam_prior"]))


def test_the_documented_recipe_with_the_priors():
    # docs/features.md, "Physical priors": the TOML example is a valid recipe of 35 columns.
    import tomllib
    from pathlib import Path

    text = (Path(__file__).resolve().parents[2] / "docs" / "features.md").read_text(encoding="utf-8")
    block = text.split('```toml\n[feature_recipe]\nname = "default-with-direct-prior"')[1].split("```")[0]
    recipe = FeatureRecipe.from_dict(tomllib.loads('[feature_recipe]\nname = "x"' + block)["feature_recipe"])
    assert len(recipe.column_names()) == 35 and recipe.features[-3:] == tuple(PRIORS)


INTERCEPTION = ["direct_beam_interception_tilted", "direct_beam_interception_tilted_minus_vertical",
                "direct_beam_interception_relative_change"]


def test_interception_of_a_uniform_atmosphere_is_beer_lambert_at_any_sun():
    # Beer-Lambert: the layers of a horizontally uniform atmosphere remove 1 - exp(-tau / mu0)
    # of the beam together, whatever the path; tilted and vertical columns then agree.
    tau = np.array([0.3, 2.0, 0.05])[:, None, None] * np.ones((3, 4, 5))
    for zenith, azimuth in ((0.0, 0.0), (40.0, 75.0), (75.0, 200.0)):
        fields = host(np.zeros((3, 4, 5)), 0.0, tau, [0.0, 600.0, 1400.0, 5000.0], zenith, azimuth)
        mu0 = math.cos(math.radians(zenith))
        np.testing.assert_allclose(F.direct_beam_interception_tilted(fields), -math.expm1(-2.35 / mu0), rtol=1e-13)
        np.testing.assert_allclose(F.direct_beam_interception_tilted_minus_vertical(fields), 0.0, atol=1e-14)
        np.testing.assert_allclose(F.direct_beam_interception_relative_change(fields), 0.0, atol=1e-13)


def test_interception_keeps_the_domain_total_of_the_tilted_columns():
    # The returned shares are the tilted columns' own, redistributed over the cells their
    # paths cross (a conservative remapping, as in the tilted independent pixel
    # approximation, Varnai and Davies 1999): domain sums agree.
    fields = random_prior_fields(zenith=60.0, azimuth=130.0)
    mu0 = 0.5
    weights = area_path_weights(fields["z_edge"], 1000.0, 1000.0, 60.0, 130.0)
    from surrogate3d.core.slant_path import gather_layers

    tilted_tau = gather_layers(fields["layer_optical_depth"], weights)
    above = np.cumsum(tilted_tau[::-1], axis=0)[::-1] - tilted_tau
    own = (np.exp(-above / mu0) * -np.expm1(-tilted_tau / mu0)).sum()
    assert F.direct_beam_interception_tilted(fields).sum() == pytest.approx(own, rel=1e-12)
    # Under an overhead sun the tilted column is the vertical one.
    overhead = random_prior_fields(zenith=0.0)
    np.testing.assert_allclose(F.direct_beam_interception_tilted_minus_vertical(overhead), 0.0, atol=1e-15)


def test_a_sunlit_cloud_side_intercepts_more_and_its_shade_less():
    # Geometry (common practice): one opaque 1 km wide, 1 km deep cloud column under a sun
    # at 45 degrees, the beam travelling toward +x.  The cloud removes the beam falling on
    # its top and, in 3D, on its sunlit side too (up to twice its own column's share); the
    # column toward the sun is not affected; the column down-sun loses, in its shade, the
    # little its haze would have removed.
    tau = np.full((2, 1, 8), 0.01)
    tau[1, 0, 3] = 50.0
    fields = host(np.zeros((2, 1, 8)), 0.0, tau, [0.0, 1000.0, 2000.0], 45.0, 0.0)
    change = F.direct_beam_interception_tilted_minus_vertical(fields)[0]
    # (Paths grazing the cloud and the clear air beside it lose their whole beam to the
    # cloud: the haze beside it gives up to its own ~0.01 share.)
    assert 0.3 < change[3] <= 1.0 + 0.01
    assert change[4] < -0.003 and change[2] == pytest.approx(0.0, abs=0.01)
    np.testing.assert_allclose(F.direct_beam_interception_tilted(fields)[0, 3], 1.0 + change[3], atol=1e-9)
    # The recipe machinery knows the three features.
    x = F.compute_features(random_prior_fields(), FeatureRecipe(INTERCEPTION))
    assert x.shape == (42, 3) and np.all(np.isfinite(x))
