"""The feature library against hand-computed values, symmetries and level independence."""

import math
import subprocess
import sys

import numpy as np
import pytest

from surrogate3d.errors import ValidationError
from surrogate3d.pairs import features as F
from surrogate3d.pairs.recipe import FeatureRecipe, default_recipe
from surrogate3d.core.slant_path import path_weights


def plane_fields(tau_column, z_edge=(0.0, 1000.0), dx=1000.0, zenith=45.0, azimuth=0.0):
    """Host fields with all the optical depth in the first layer."""
    tau_column = np.atleast_2d(np.asarray(tau_column, dtype=float))
    nz = len(z_edge) - 1
    tau = np.zeros((nz,) + tau_column.shape)
    tau[0] = tau_column
    return {"layer_optical_depth": tau, "layer_cloud_fraction": (tau > 0).astype(float), "z_edge": np.array(z_edge),
            "dx": dx, "dy": dx, "solar_zenith_angle": zenith, "solar_beam_azimuth": azimuth,
            "total_cloud_fraction": (tau_column > 0).astype(float), "surface_albedo": np.full(tau_column.shape, 0.1)}


def random_fields(ny=12, nx=16, nz=6, seed=0, zenith=50.0, azimuth=30.0):
    rng = np.random.default_rng(seed)
    lcf = np.where(rng.random((nz, ny, nx)) > 0.6, rng.random((nz, ny, nx)), 0.0)
    tau = lcf * 10.0 * rng.random((nz, ny, nx)) + 0.01
    fields = {"layer_cloud_fraction": lcf, "layer_optical_depth": tau,
              "z_edge": np.concatenate([[0.0], np.cumsum(rng.uniform(200.0, 900.0, nz))]),
              "dx": 1000.0, "dy": 1000.0, "solar_zenith_angle": zenith, "solar_beam_azimuth": azimuth,
              "surface_albedo": rng.uniform(0.05, 0.3, (ny, nx)), "total_cloud_fraction": lcf.max(axis=0),
              "column_optical_depth_mean": tau.sum(axis=0), "column_optical_depth_std": rng.random((ny, nx)),
              "cloud_edge_length": 1e-3 * rng.random((ny, nx))}
    for flux in F.INDEPENDENT_COLUMN_FLUXES[1:]:
        fields[f"independent_column_{flux}"] = rng.random((ny, nx))
    return fields


def test_column_features_by_hand():
    # Values worked out by hand from the definitions in docs/features.md.
    z_edge = [0.0, 1000.0, 2000.0, 3000.0, 4000.0]
    lcf = np.zeros((4, 1, 2))
    lcf[1:3, 0, 0] = [0.3, 0.5]
    tau = np.zeros((4, 1, 2))
    tau[:, 0, 0] = [0.0, 2.0, 1.0, 0.0]
    fields = {"layer_cloud_fraction": lcf, "layer_optical_depth": tau, "z_edge": np.array(z_edge),
              "dx": 500.0, "dy": 500.0, "solar_zenith_angle": 60.0, "solar_beam_azimuth": 0.0,
              "column_optical_depth_mean": np.array([[3.0, 0.0]]), "column_optical_depth_std": np.array([[1.5, 0.0]])}
    assert np.allclose(F.cos_solar_zenith(fields), 0.5)
    assert np.allclose(F.log_column_optical_depth(fields), [[math.log(4.0), 0.0]])
    assert np.array_equal(F.cloud_top_height(fields), [[3000.0, 0.0]])
    assert np.array_equal(F.cloud_base_height(fields), [[1000.0, 0.0]])
    assert np.array_equal(F.cloud_top_height(fields, layer_cloud_fraction_threshold=0.4), [[3000.0, 0.0]])
    assert np.array_equal(F.cloud_base_height(fields, layer_cloud_fraction_threshold=0.4), [[2000.0, 0.0]])
    # Shadow of a 3 km cloud top with the sun 60 deg from zenith: 3000 tan(60 deg) (geometry).
    assert np.allclose(F.cloud_top_shadow_length(fields), [[3000.0 * math.sqrt(3.0), 0.0]])
    assert np.allclose(F.column_optical_depth_relative_std(fields), [[0.5, 0.0]])


def test_independent_column_total_is_direct_plus_diffuse():
    fields = {"independent_column_surface_downward_direct_flux": np.array([[0.3, 0.5]]),
              "independent_column_surface_downward_diffuse_flux": np.array([[0.2, 0.1]]),
              "dx": 1.0, "dy": 1.0, "solar_zenith_angle": 0.0, "solar_beam_azimuth": 0.0}
    x = F.compute_features(fields, FeatureRecipe(["independent_column_surface_downward_flux"]))
    assert np.allclose(x[:, 0], [0.5, 0.6])


def test_neighbour_mean_whole_and_partial_windows_wrap():
    # Box (moving-average) filter on a periodic grid, worked out by hand (common practice).
    a = np.zeros((5, 5))
    a[0, 0] = 1.0
    # radius = one column: the 3 x 3 block around each column, wrapping across the edges.
    m = F.neighbourhood_mean(a, 1000.0, 1000.0, 1000.0)
    assert m[0, 0] == pytest.approx(1 / 9) and m[4, 4] == pytest.approx(1 / 9) and m[1, 4] == pytest.approx(1 / 9)
    assert m[2, 2] == 0.0 and m.sum() == pytest.approx(1.0)
    # radius = half a column: weights (0.5, 1, 0.5) per axis over a window of 2 x 2 columns.
    m = F.neighbourhood_mean(a, 500.0, 1000.0, 1000.0)
    assert m[0, 0] == pytest.approx(0.25) and m[0, 4] == pytest.approx(0.125) and m[4, 1] == pytest.approx(0.0625)
    fields = {"total_cloud_fraction": a, "dx": 1000.0, "dy": 1000.0, "solar_zenith_angle": 0.0,
              "solar_beam_azimuth": 0.0}
    assert F.neighbour_contrast_cloud_fraction(fields, 1000.0)[0, 0] == pytest.approx(8 / 9)


def test_neighbour_excess_of_independent_column_fluxes_by_hand():
    # The 3 x 3 periodic box mean minus the column's own (common practice): a lone bright
    # column loses 8/9 of its excess, each neighbour gains 1/9; a uniform field has none.
    flux = np.zeros((5, 5))
    flux[0, 0] = 0.9
    fields = {"independent_column_toa_upward_flux": flux, "dx": 1000.0, "dy": 1000.0, "solar_zenith_angle": 0.0,
              "solar_beam_azimuth": 0.0}
    excess = F.FEATURES["neighbour_excess_independent_column_toa_upward_flux"].function(fields, radius=1000.0)
    assert excess[0, 0] == pytest.approx(-0.8) and excess[4, 4] == pytest.approx(0.1) and excess[2, 2] == 0.0
    assert excess.sum() == pytest.approx(0.0)
    fields["independent_column_toa_upward_flux"] = np.full((5, 5), 0.4)
    np.testing.assert_allclose(F.FEATURES["neighbour_excess_independent_column_toa_upward_flux"].function(
        fields, radius=3000.0), 0.0, atol=1e-15)


def test_cloud_edge_distance_by_hand_with_wrap_and_cap():
    # Euclidean distances between cell centres on a periodic grid, by hand (geometry).
    row = np.array([[1.0, 1.0, 1.0, 0.0, 0.0, 0.0, 0.0, 0.0]])
    fields = {"total_cloud_fraction": np.repeat(row, 3, axis=0), "dx": 1000.0, "dy": 1000.0,
              "solar_zenith_angle": 0.0, "solar_beam_azimuth": 0.0}
    d = F.cloud_edge_distance(fields)
    # Column 0 touches the clear column 7 across the periodic boundary: half a column inside.
    assert np.allclose(d[1], [500.0, 1500.0, 500.0, -500.0, -1500.0, -2500.0, -1500.0, -500.0])
    d = F.cloud_edge_distance(fields, edge_distance_cap=1000.0)
    assert np.allclose(d[0], [500.0, 1000.0, 500.0, -500.0, -1000.0, -1000.0, -1000.0, -500.0])
    single = np.zeros((5, 5))
    single[2, 2] = 1.0
    d = F.cloud_edge_distance({**fields, "total_cloud_fraction": single})
    assert d[2, 2] == 500.0 and d[2, 3] == -500.0
    assert d[1, 1] == pytest.approx(-(math.sqrt(2.0) * 1000.0 - 500.0))      # diagonal neighbour
    assert d[0, 0] == pytest.approx(-(math.sqrt(8.0) * 1000.0 - 500.0))
    d = F.cloud_edge_distance({**fields, "total_cloud_fraction": np.zeros((4, 4))}, edge_distance_cap=3000.0)
    assert np.all(d == -3000.0)


def test_gradient_along_and_across_the_beam():
    # Centred finite differences and the directional derivative grad L . b (calculus, common practice).
    tau = np.expm1(np.array([[0.0, 1.0, 2.0, 3.0]]))          # ln(1 + tau) = 0, 1, 2, 3
    fields = {**plane_fields(np.repeat(tau, 3, axis=0)), "dx": 1000.0, "dy": 1000.0}
    along = F.log_optical_depth_gradient_along_beam({**fields, "solar_beam_azimuth": 0.0})
    assert np.allclose(along[0], [-1e-3, 1e-3, 1e-3, -1e-3])  # centred differences, wrapping at the ends
    assert np.allclose(F.log_optical_depth_gradient_along_beam({**fields, "solar_beam_azimuth": 180.0}), -along)
    assert np.allclose(F.log_optical_depth_gradient_along_beam({**fields, "solar_beam_azimuth": 90.0}), 0.0)
    across = F.log_optical_depth_gradient_across_beam({**fields, "solar_beam_azimuth": 90.0})
    assert np.allclose(across, np.abs(along))


def test_slant_path_by_hand_with_wrap():
    # Beer-Lambert along a straight slant path: optical depth = sum of tau_k x path fraction / mu0.
    # Sun 45 deg from zenith, beam toward +x: the path from the surface goes toward -x and,
    # across a 1 km layer, spends half its length in the column and half in its -x neighbour.
    fields = plane_fields([[1.0, 2.0, 3.0, 4.0]])
    slant = F.slant_optical_depth(fields)
    assert np.allclose(slant[0], math.sqrt(2.0) * np.array([2.5, 1.5, 2.5, 3.5]))
    difference = F.slant_minus_vertical_optical_depth(fields)[0]
    assert np.allclose(difference, math.sqrt(2.0) * np.array([1.5, -0.5, -0.5, -0.5]))
    assert np.allclose(F.slant_optical_depth({**fields, "solar_zenith_angle": 0.0}), [[1.0, 2.0, 3.0, 4.0]])


def test_path_weights_two_layers():
    # Horizontal displacement dz tan(theta0) per layer (geometry), beam toward +y so the path goes to -y.
    (oy0, ox0, w0), (oy1, ox1, w1) = path_weights([0.0, 1000.0, 2000.0], 1000.0, 1000.0, 45.0, 90.0)
    assert oy0.tolist() == [-1, 0] and ox0.tolist() == [0, 0] and np.allclose(w0, [0.5, 0.5])
    assert oy1.tolist() == [-2, -1] and np.allclose(w1, [0.5, 0.5])


def test_cloud_top_upsun_minus_downsun_marks_shaded_and_sunlit_sides():
    lcf = np.zeros((2, 1, 5))
    lcf[:, 0, 2] = 1.0
    fields = {"layer_cloud_fraction": lcf, "z_edge": np.array([0.0, 1000.0, 2000.0]), "dx": 1000.0, "dy": 1000.0,
              "solar_zenith_angle": 30.0, "solar_beam_azimuth": 0.0}
    diff = F.cloud_top_height_upsun_minus_downsun(fields, cloud_side_distance=1000.0)
    # Beam toward +x: column 3 lies in the cloud's shade, column 1 faces its sunlit side.
    assert np.allclose(diff[0], [0.0, -2000.0, 0.0, 2000.0, 0.0])
    half = F.cloud_top_height_upsun_minus_downsun(fields, cloud_side_distance=500.0)
    assert np.allclose(half[0], [0.0, -1000.0, 0.0, 1000.0, 0.0])


def test_rotating_the_grid_with_the_sun_leaves_features_unchanged():
    # Rotate by +90 deg counterclockwise in (x, y): with x the last axis, that is
    # np.rot90(..., axes=(-1, -2)); the beam azimuth turns by +90 deg too (geometry).
    fields = random_fields(ny=12, nx=16)
    rotated = {k: (np.rot90(v, k=1, axes=(-1, -2)).copy() if np.ndim(v) >= 2 else v) for k, v in fields.items()}
    rotated["solar_beam_azimuth"] = fields["solar_beam_azimuth"] + 90.0
    recipe = default_recipe()
    x = F.compute_features(fields, recipe).reshape(12, 16, -1)
    xr_ = F.compute_features(rotated, recipe).reshape(16, 12, -1)
    expected = np.rot90(x, k=1, axes=(1, 0))
    for j, name in enumerate(recipe.column_names()):
        assert np.allclose(xr_[..., j], expected[..., j], rtol=1e-10, atol=1e-9), name


def test_splitting_a_layer_into_two_identical_halves_changes_nothing():
    # Optical depth is additive along a path (Beer-Lambert), so column integrals and slant
    # paths cannot change when a layer is split into two identical halves.
    fields = random_fields(nz=5)
    k = 2
    split = dict(fields)
    z = fields["z_edge"]
    split["z_edge"] = np.insert(z, k + 1, 0.5 * (z[k] + z[k + 1]))
    tau, lcf = fields["layer_optical_depth"], fields["layer_cloud_fraction"]
    split["layer_optical_depth"] = np.concatenate([tau[:k], tau[k:k + 1] / 2, tau[k:k + 1] / 2, tau[k + 1:]])
    split["layer_cloud_fraction"] = np.concatenate([lcf[:k], lcf[k:k + 1], lcf[k:k + 1], lcf[k + 1:]])
    recipe = default_recipe()
    assert np.allclose(F.compute_features(fields, recipe), F.compute_features(split, recipe), rtol=1e-12, atol=1e-12)


def test_compute_features_shape_order_and_units():
    # Row-major (iy, ix) rows as documented in docs/pairs-format.md.
    fields = random_fields()
    recipe = default_recipe()
    x = F.compute_features(fields, recipe)
    assert x.shape == (12 * 16, len(recipe.column_names())) and np.isfinite(x).all()
    assert len(recipe.column_units()) == x.shape[1]
    j = recipe.column_names().index("cloud_fraction")
    assert np.array_equal(x[:, j], fields["total_cloud_fraction"].reshape(-1))    # row-major (iy, ix)


@pytest.mark.parametrize("change, message", [
    (lambda f: f.pop("total_cloud_fraction"), "total_cloud_fraction"),
    (lambda f: f.update(surface_albedo=np.zeros((3, 3))), "surface_albedo"),
    (lambda f: f["layer_optical_depth"].__setitem__((0, 0, 0), np.nan), "layer_optical_depth"),
    (lambda f: f.update(solar_zenith_angle=90.0), "solar_zenith_angle"),
    (lambda f: f.update(z_edge=f["z_edge"][::-1]), "z_edge"),
    (lambda f: f.update(dx=0.0), "dx"),
])
def test_bad_host_fields_are_named(change, message):
    fields = random_fields()
    change(fields)
    with pytest.raises(ValidationError, match=message):
        F.compute_features(fields, default_recipe())


def test_feature_modules_import_only_numpy_and_the_standard_library():
    code = ("import sys, surrogate3d.pairs.features, surrogate3d.pairs.recipe, surrogate3d.core.slant_path\n"
            "heavy = [m for m in sys.modules if m.split('.')[0] in ('xarray', 'pandas', 'scipy', 'numba', 'tqdm',"
            " 'sklearn', 'matplotlib', 'h5netcdf', 'h5py', 'dask')]\n"
            "print(heavy)\nsys.exit(1 if heavy else 0)")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert done.returncode == 0, done.stdout + done.stderr


# --- the fast helpers against plain definitions ------------------------------------------

@pytest.mark.parametrize("shape", [(5, 7), (1, 4), (6, 1)])
def test_periodic_shift_and_box_sum_are_roll_and_direct_sums(shape):
    # Definitions: a periodic shift is np.roll; a box sum adds the 2 m + 1 rolled copies
    # (windows wider than the domain wrap more than once).
    a = np.random.default_rng(1).normal(size=shape)
    for oy, ox in [(0, 0), (2, -3), (-7, 9), (13, 1)]:
        np.testing.assert_array_equal(F._periodic_shift(a, oy, ox), np.roll(a, (oy, ox), axis=(0, 1)))
        out = np.ones(shape)
        F._periodic_shift(a, oy, ox, out=out, add=True)
        np.testing.assert_array_equal(out, 1.0 + np.roll(a, (oy, ox), axis=(0, 1)))
    for axis in (0, 1):
        for m in (0, 1, 2, 4, 9, 30):
            # The terms added in order from the lowest offset (the generated Fortran adds them
            # so): bit for bit, also when the window wraps the domain more than once (m = 30).
            direct = np.zeros_like(a)
            for k in range(-m, m + 1):
                direct += np.roll(a, -k, axis=axis)
            np.testing.assert_array_equal(F._box_sum(a, m, axis), direct)


@pytest.mark.parametrize("block_cells", [12, 50, 1 << 14])
def test_distance_transform_matches_brute_force(monkeypatch, block_cells):
    # Definition: the periodic Euclidean distance between cell centres, nearest target,
    # infinity beyond the reach (in blocks of one, four or all rows).
    monkeypatch.setattr(F, "CELL_BLOCK", block_cells)
    rng = np.random.default_rng(4)
    ny, nx, dx, dy = 9, 12, 1000.0, 700.0
    targets = rng.random((ny, nx)) < 0.15
    iy, ix = np.nonzero(targets)
    for reach in (1500.0, 4000.0, 1e5):
        got = F._distance_to(targets, dx, dy, reach)
        for y in range(ny):
            for x in range(nx):
                ddy = np.minimum(np.abs(iy - y), ny - np.abs(iy - y)) * dy
                ddx = np.minimum(np.abs(ix - x), nx - np.abs(ix - x)) * dx
                d = np.sqrt(ddx ** 2 + ddy ** 2).min()
                assert got[y, x] == (d if d <= reach else np.inf)


def test_cloud_extent_of_every_layer_pattern():
    # Top and base by definition: the highest and lowest layer whose cloud fraction exceeds
    # the threshold, every one of the 2**4 patterns of four layers.
    patterns = np.array([[(p >> k) & 1 for k in range(4)] for p in range(16)], dtype=float).T[:, None, :]
    fields = {"layer_cloud_fraction": 0.5 * patterns, "z_edge": np.array([0.0, 100.0, 300.0, 600.0, 1000.0]),
              "dx": 1000.0, "dy": 1000.0, "solar_zenith_angle": 0.0, "solar_beam_azimuth": 0.0}
    top, base = F.cloud_top_height(fields, 0.2)[0], F.cloud_base_height(fields, 0.2)[0]
    for p in range(16):
        layers = [k for k in range(4) if (p >> k) & 1]
        assert top[p] == (fields["z_edge"][max(layers) + 1] if layers else 0.0)
        assert base[p] == (fields["z_edge"][min(layers)] if layers else 0.0)


def _path_weights_by_layer(z_edge, dx, dy, zenith, azimuth):
    """Reference: each layer's straight path split at the faces it crosses, one layer at a time (geometry)."""
    tan0 = math.tan(math.radians(zenith))
    ux, uy = -math.cos(math.radians(azimuth)), -math.sin(math.radians(azimuth))
    out = []
    for s0, s1 in zip(np.asarray(z_edge[:-1]) * tan0, np.asarray(z_edge[1:]) * tan0):
        cuts = {s0, s1}
        for u, h in ((ux, dx), (uy, dy)):
            if abs(u) > 1e-12:
                a, b = sorted((s0 * u / h, s1 * u / h))
                cuts |= {(n + 0.5) * h / u for n in range(math.ceil(a - 0.5), math.floor(b - 0.5) + 1)}
        cuts = sorted(min(max(c, s0), s1) for c in cuts)
        share = {}
        for c0, c1 in zip(cuts[:-1], cuts[1:]):
            if c1 > c0:
                mid = 0.5 * (c0 + c1)
                cell = (math.floor(mid * (uy if abs(uy) > 1e-12 else 0.0) / dy + 0.5),
                        math.floor(mid * (ux if abs(ux) > 1e-12 else 0.0) / dx + 0.5))
                share[cell] = share.get(cell, 0.0) + (c1 - c0) / (s1 - s0)
        out.append(share if s1 > s0 else {(0, 0): 1.0})
    return out


@pytest.mark.parametrize("zenith, azimuth, dy", [(45.0, 0.0, 1000.0), (60.0, 30.0, 700.0), (80.0, 225.0, 1300.0),
                                                 (0.0, 90.0, 1000.0), (30.0, 90.0, 1000.0)])
def test_path_weights_match_a_layer_by_layer_reference(zenith, azimuth, dy):
    z_edge = np.array([0.0, 150.0, 400.0, 1000.0, 1800.0, 3000.0, 6000.0])
    got = path_weights(z_edge, 1000.0, dy, zenith, azimuth)
    for (oy, ox, w), expected in zip(got, _path_weights_by_layer(z_edge, 1000.0, dy, zenith, azimuth)):
        assert list(zip(oy.tolist(), ox.tolist())) == sorted(expected)     # (oy, ox) in ascending order
        np.testing.assert_allclose(w, [expected[c] for c in sorted(expected)], rtol=1e-12)
        assert math.isclose(w.sum(), 1.0, rel_tol=1e-12)


@pytest.mark.parametrize("block_cells", [7, 40, 1 << 14])
def test_slant_sum_in_row_blocks_is_the_sum_of_rolled_planes(monkeypatch, block_cells):
    # Definition: the slant sum adds, for every column offset, the weighted layers rolled
    # into place; blocks of rows (some wrapping around the grid) change nothing.
    from surrogate3d.core import slant_path

    monkeypatch.setattr(slant_path, "CELL_BLOCK", block_cells)
    rng = np.random.default_rng(7)
    layers = rng.random((5, 9, 6))
    weights = path_weights(np.linspace(0.0, 4000.0, 6), 1000.0, 800.0, 60.0, 120.0)
    expected = np.zeros((9, 6))
    for (oy, ox), terms in slant_path.gather_offsets(weights).items():
        plane = np.zeros((9, 6))
        for k, w in terms:
            plane += w * layers[k]
        expected += np.roll(plane, (-oy, -ox), axis=(0, 1))
    np.testing.assert_array_equal(slant_path.slant_sum(layers, weights), expected)
