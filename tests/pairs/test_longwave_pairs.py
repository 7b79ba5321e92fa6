"""pairs --spectrum longwave: targets are 3D minus independent column per host column (W m-2),
host-computable longwave features checked by hand, scenes without longwave results skipped and
reported, shortwave pairs unchanged, bad options refused."""

import json

import numpy as np
import pytest

from surrogate3d.archive import read_scene, select_longwave_result, write_scene
from surrogate3d.archive.simulate import simulate_archive
from surrogate3d.cli import main
from surrogate3d.core.netcdf import open_dataset
from surrogate3d.errors import FormatError, ParameterError
from surrogate3d.pairs import features as library
from surrogate3d.pairs.build import build_pairs
from surrogate3d.pairs.longwave_pairs import (LONGWAVE_FEATURES, LONGWAVE_TARGETS, build_longwave_pairs,
                                              longwave_host_features, longwave_host_fields)
from surrogate3d.scenes.generator import generate_scene

#: 100 cm-1 intervals: tiny, the code path is the same as with 10 cm-1.
RUN = {"photons": 2000, "seed": 7, "quiet": True, "longwave_resolution": 10000.0}
HOST = 400.0  # 4 x 4 cells of 100 m: a 2 x 2 host grid


def scene(seed):
    return generate_scene("scattered_cumulus", seed, nx=8, ny=8, nz=6)


@pytest.fixture(scope="module")
def archive(tmp_path_factory):
    """s_00001: longwave 3D and ICA only (two-stream computed by pairs); s_00002: all three longwave
    kinds and shortwave 3D + ICA at 30 deg; s_00003: only the two-stream longwave result."""
    directory = tmp_path_factory.mktemp("archive")
    write_scene(scene(1), directory / "s_00001.nc")
    simulate_archive(directory, solvers=["full_3d", "independent_column"], spectrum="longwave", **RUN)
    write_scene(scene(2), directory / "s_00002.nc")
    simulate_archive(directory, [30.0], [0.0], solvers=["full_3d", "independent_column"], spectrum="both", **RUN)
    simulate_archive(directory, solvers=["two_stream"], spectrum="longwave", **RUN)
    write_scene(scene(3), directory / "s_00003.nc")
    simulate_archive(directory, solvers=["two_stream"], spectrum="longwave", **RUN)
    return directory


@pytest.fixture(scope="module")
def pairs(archive):
    return build_longwave_pairs(archive, [HOST], quiet=True)


def test_targets_are_3d_minus_independent_column_block_means_by_hand(archive, pairs):
    assert pairs.sizes == {"sample": 8, "feature": len(LONGWAVE_FEATURES), "target": 5, "host_layer": 6}
    assert list(pairs["target"].values) == list(LONGWAVE_TARGETS)
    stored = read_scene(archive / "s_00002.nc")
    full = select_longwave_result(stored, "longwave_full_3d")
    ica = select_longwave_result(stored, "longwave_independent_column")
    two_stream = select_longwave_result(stored, "longwave_two_stream")
    # Host column (iy=1, ix=0) of s_00002: cells y 4..7, x 0..3.
    row = int(np.flatnonzero((pairs["scene"].values == "s_00002") & (pairs["host_iy"].values == 1)
                             & (pairs["host_ix"].values == 0))[0])
    for k, name in enumerate(LONGWAVE_TARGETS):
        f3d = full[name].values[4:8, 0:4]
        fica = ica[name].values[4:8, 0:4]
        se3d = full[name + "_standard_error"].values[4:8, 0:4]
        seica = ica[name + "_standard_error"].values[4:8, 0:4]
        by_hand = sum(f3d.ravel()) / 16 - sum(fica.ravel()) / 16
        np.testing.assert_allclose(pairs["target_value"].values[row, k], by_hand, rtol=1e-12, atol=1e-9)
        np.testing.assert_allclose(pairs["independent_column_flux"].values[row, k], fica.mean(), rtol=1e-12)
        np.testing.assert_allclose(pairs["full_3d_flux"].values[row, k], f3d.mean(), rtol=1e-12)
        # Standard error of a mean of 16 independent values: sqrt(sum se^2) / 16.
        se_ica = np.sqrt(np.sum(seica ** 2)) / 16
        np.testing.assert_allclose(pairs["independent_column_flux_standard_error"].values[row, k], se_ica, rtol=1e-12)
        np.testing.assert_allclose(pairs["target_standard_error"].values[row, k],
                                   np.hypot(np.sqrt(np.sum(se3d ** 2)) / 16, se_ica), rtol=1e-12)
        column = list(pairs["feature"].values).index(f"host_{name}")
        np.testing.assert_allclose(pairs["features"].values[row, column], two_stream[name].values[4:8, 0:4].mean(),
                                   rtol=1e-12)
    assert pairs["target_value"].attrs["units"] == "W m-2"
    assert float(np.max(pairs["target_standard_error"].values)) > 0.0
    # sigma T^4 at 288.15 K with sigma = 5.670374419e-8 W m-2 K-4 (CODATA 2018): 390.08 W m-2.
    np.testing.assert_allclose(pairs["reference_flux"].values, 5.670374419e-8 * 288.15 ** 4, rtol=1e-9)


def test_host_fluxes_computed_when_the_two_stream_result_is_not_stored(pairs):
    # s_00001 holds no longwave_two_stream result: the table solves it; a column's
    # outgoing flux then lies between cold cloud-top and warm surface emission.
    rows = pairs["scene"].values == "s_00001"
    column = list(pairs["feature"].values).index("host_longwave_toa_upward_flux")
    values = pairs["features"].values[rows, column]
    assert np.all(np.isfinite(values)) and np.all((values > 150.0) & (values < 400.0))


def test_scene_without_longwave_results_is_skipped_and_reported(archive, pairs, capsys):
    assert set(pairs["scene"].values) == {"s_00001", "s_00002"}
    skipped = json.loads(pairs.attrs["skipped"])
    assert skipped == ["s_00003.nc: lacks longwave_full_3d and longwave_independent_column result(s)"]
    out = archive.parent / "lw.nc"
    assert main(["pairs", str(archive), "--out", str(out), "--spectrum", "longwave", "--host-resolution", "400"]) == 0
    captured = capsys.readouterr()
    assert "skipped s_00003.nc" in captured.err
    assert "wrote 8 longwave samples" in captured.out and "skipped 1 scene(s)" in captured.out
    written = open_dataset(out, what="pair table")
    assert written.attrs["spectrum"] == "longwave"
    np.testing.assert_array_equal(written["target_value"].values, pairs["target_value"].values)
    np.testing.assert_array_equal(written["features"].values, pairs["features"].values)


def test_features_of_a_single_cloud_layer_by_hand():
    constructed = scene(1)
    lwc = np.zeros(constructed["liquid_water_content"].shape)
    lwc[2, 1:3, 1:3] = 0.3e-3  # kg m-3: a 200 m x 200 m cloud in layer 2 (1333-2000 m) of host column (0, 0)
    constructed["liquid_water_content"].values[...] = lwc
    fields = longwave_host_fields(constructed, HOST)
    zero = np.zeros((2, 2))
    fields["longwave_clear_sky_surface_downward_flux"] = np.full((2, 2), 290.0)
    fields["longwave_clear_sky_toa_upward_flux"] = np.full((2, 2), 260.0)
    host = dict.fromkeys(LONGWAVE_TARGETS, zero)
    host["longwave_surface_downward_flux"] = np.array([[300.0, 290.0], [290.0, 290.0]])
    values = longwave_host_features(fields, host)
    assert list(values) == list(LONGWAVE_FEATURES)
    base, top = 4000.0 / 6 * 2, 4000.0 / 6 * 3

    def standard_atmosphere(z):
        # U.S. Standard Atmosphere 1976 below 11 km: 288.15 K - 6.5 K km-1 of geopotential
        # height r0 z / (r0 + z), r0 = 6356766 m (NOAA/NASA/USAF 1976).
        return 288.15 - 6.5e-3 * 6356766.0 * z / (6356766.0 + z)

    np.testing.assert_allclose(values["cloud_fraction"], [[0.25, 0.0], [0.0, 0.0]])
    np.testing.assert_allclose(values["cloud_base_height"], [[base, 0.0], [0.0, 0.0]])
    np.testing.assert_allclose(values["cloud_top_height"], [[top, 0.0], [0.0, 0.0]])
    np.testing.assert_allclose(values["cloud_base_air_temperature"][0, 0], standard_atmosphere(base), atol=1e-3)
    np.testing.assert_allclose(values["cloud_top_air_temperature"][0, 0], standard_atmosphere(top), atol=1e-3)
    # Clear columns: cloud base and top at the surface, the air temperature there.
    np.testing.assert_allclose(values["cloud_base_air_temperature"][1, 1], 288.15, atol=1e-3)
    # Sides of a 200 m x 200 m x 666.7 m box inside one 400 m x 400 m column: perimeter 800 m
    # times the depth, per 160 000 m2 (geometry).
    np.testing.assert_allclose(values["cloud_side_area_per_area"], [[800.0 * (top - base) / 400.0 ** 2, 0.0],
                                                                   [0.0, 0.0]], rtol=1e-12, atol=1e-15)
    # Liquid water path: 0.3 g m-3 over 666.7 m on a quarter of the column.
    np.testing.assert_allclose(values["liquid_water_path"], [[0.3 * (top - base) / 4, 0.0], [0.0, 0.0]],
                               rtol=1e-12)
    # The effective-cloud-fraction prior: cover 1/4, one 200 m square (edge 800 m per 160 000 m2,
    # no staircase: D = 4 (1 - N)(-ln(1 - N)) / (L / (4/pi))), depth 666.7 m, cloudy minus clear
    # (300 - 290) / N; N_e by quadrature of the cosine-weighted gap probability of random
    # cylinders (Killen and Ellingson 1994; Stoyan et al. 1995).
    from scipy.integrate import quad

    n, edge = 0.25, 800.0 / 400.0 ** 2
    aspect = (top - base) / (4.0 * (1 - n) * -np.log(1 - n) / (edge * np.pi / 4.0))
    gap = quad(lambda mu: (1 - n) ** (1 + 4 / np.pi * aspect * np.sqrt(1 - mu**2) / mu) * mu, 0.0, 1.0)[0]
    # (32-point Gauss-Legendre in the package: 1e-4 relative)
    np.testing.assert_allclose(values["effective_cloud_fraction_prior"][0, 0], (1 - 2 * gap - n) * 10.0 / n,
                               rtol=1e-4)
    np.testing.assert_array_equal(values["effective_cloud_fraction_prior"].ravel()[1:], 0.0)
    np.testing.assert_allclose(values["surface_temperature"], 288.15)
    np.testing.assert_allclose(values["surface_longwave_emissivity"], 0.99)
    # The neighbour cloud fraction is the shortwave window feature; it conserves the
    # domain mean (a moving average over a periodic grid).
    for radius in (1000.0, 3000.0, 10000.0):
        name = library.column_name("neighbour_mean_cloud_fraction", radius)
        np.testing.assert_array_equal(values[name], library.neighbour_mean_cloud_fraction(fields, radius))
        np.testing.assert_allclose(values[name].mean(), 0.25 / 4, rtol=1e-12)


def test_shortwave_pairs_unchanged_by_the_spectrum_option(archive, tmp_path):
    default, explicit = tmp_path / "default.nc", tmp_path / "shortwave.nc"
    assert main(["pairs", str(archive), "--out", str(default), "--host-resolution", "400", "--quiet"]) == 0
    assert main(["pairs", str(archive), "--out", str(explicit), "--host-resolution", "400", "--quiet",
                 "--spectrum", "shortwave"]) == 0
    a, b = open_dataset(default, what="pair table"), open_dataset(explicit, what="pair table")
    direct = build_pairs(archive, [HOST], quiet=True)
    assert a.identical(b)
    for name in direct.data_vars:
        np.testing.assert_array_equal(a[name].values, direct[name].values, err_msg=name)
    assert set(a["scene"].values) == {"s_00001", "s_00002"} and "spectrum" not in a.attrs


def test_bad_options_are_refused(archive, tmp_path, capsys):
    out = str(tmp_path / "x.nc")
    assert main(["pairs", str(archive), "--out", out, "--spectrum", "thermal"]) == 1
    assert "--spectrum" in capsys.readouterr().err
    assert main(["pairs", str(archive), "--out", out, "--spectrum", "longwave", "--host-fluxes",
                 "two_stream_host"]) == 1
    assert "--host-fluxes apply to shortwave pairs only" in capsys.readouterr().err
    assert main(["pairs", str(archive), "--out", out, "--spectrum", "longwave", "--host-resolution", "300"]) == 1
    assert "allowed values [m]: 100, 200, 400, 800" in capsys.readouterr().err
    assert not (tmp_path / "x.nc").exists()
    with pytest.raises(ParameterError, match="host_resolutions is empty"):
        build_longwave_pairs(archive, [], quiet=True)


def test_archive_without_longwave_results_is_refused(tmp_path):
    write_scene(scene(4), tmp_path / "s_00004.nc")
    with pytest.raises(FormatError, match="no scene with both longwave_full_3d and longwave_independent_column"):
        build_longwave_pairs(tmp_path, [HOST], quiet=True)


def test_table_names_its_longwave_feature_recipe(pairs):
    from surrogate3d.pairs.longwave_features import LongwaveFeatureRecipe, feature_recipe_from_dict
    from surrogate3d.pairs.recipe import FeatureRecipe

    recipe = feature_recipe_from_dict(json.loads(pairs.attrs["feature_recipe"]))
    assert recipe == LongwaveFeatureRecipe()
    assert recipe.column_names() == list(pairs["feature"].values)
    assert recipe.column_units() == json.loads(pairs["features"].attrs["units"])
    # A shortwave recipe reads as before, with or without the spectrum key.
    shortwave = FeatureRecipe(["cloud_fraction"])
    assert feature_recipe_from_dict(shortwave.to_dict()) == shortwave
    assert feature_recipe_from_dict({**shortwave.to_dict(), "spectrum": "shortwave"}) == shortwave
    with pytest.raises(ParameterError, match="unknown longwave feature name"):
        LongwaveFeatureRecipe(["cloud_fraction", "cos_solar_zenith"])
    with pytest.raises(ParameterError, match="spectrum must be 'shortwave' or 'longwave'"):
        feature_recipe_from_dict({"spectrum": "thermal", "features": []})


def test_table_carries_the_effective_cloud_fraction_baseline(archive, pairs):
    """The baseline of the pair table is the module's formula on the host column's own cover,
    edge length, depth and the mean independent-column flux of its cloudy and clear columns."""
    from surrogate3d.baselines.effective_cloud_fraction import effective_cloud_fraction_corrections
    from surrogate3d.pairs.coarsen import edge_length_density
    from surrogate3d.scenes.model import cloud_mask

    baseline = pairs["baseline_effective_cloud_fraction"].values
    assert baseline.shape == (pairs.sizes["sample"], 5) and np.isfinite(baseline).all()
    stored = read_scene(archive / "s_00002.nc")
    ica = select_longwave_result(stored, "longwave_independent_column")
    row = int(np.flatnonzero((pairs["scene"].values == "s_00002") & (pairs["host_iy"].values == 1)
                             & (pairs["host_ix"].values == 0))[0])
    mask = cloud_mask(stored).any(axis=0)[4:8, 0:4]
    down = ica["longwave_surface_downward_flux"].values[4:8, 0:4]
    edge = edge_length_density(cloud_mask(stored).any(axis=0), 100.0, 100.0)[4:8, 0:4].mean()
    names = list(pairs["feature"].values)
    depth = pairs["features"].values[row, names.index("cloud_top_height")] - \
        pairs["features"].values[row, names.index("cloud_base_height")]
    emissivity = pairs["features"].values[row, names.index("surface_longwave_emissivity")]
    cover = mask.mean()
    cloudy = down[mask].mean() if mask.any() else 0.0
    clear = down[~mask].mean() if (~mask).any() else 0.0
    by_hand = effective_cloud_fraction_corrections(np.array([[cover]]), np.array([[cloudy]]), np.array([[clear]]),
                                                   np.array([[edge]]), np.array([[depth]]), np.array([[emissivity]]))
    for k, name in enumerate(LONGWAVE_TARGETS):
        np.testing.assert_allclose(baseline[row, k], by_hand[name][0, 0], rtol=1e-12, atol=1e-12)
