"""Host fluxes from the host's own columns (two_stream_host), how they are recorded, and refused when mismatched."""

import argparse
import json
import types

import numpy as np
import pytest

from surrogate3d.archive import insert_result, write_scene
from surrogate3d.errors import ParameterError, ValidationError
from surrogate3d.evaluation.scoring import check_pairs_match
from surrogate3d.core.pairs_table import read_pairs
from surrogate3d.pairs import build_pairs, commands
from surrogate3d.pairs.build import with_host_fluxes
from surrogate3d.pairs.coarsen import HOST_FLUXES, block_mean, clear_sky_layer_optical_depth, scene_host_fields
from surrogate3d.pairs.host_fields import assemble_host_fields, host_two_stream_fluxes
from surrogate3d.pairs.recipe import FeatureRecipe, default_recipe
from surrogate3d.scenes import make_scene
from surrogate3d.solvers.two_stream import solve_scene


def two_band_scene(cloudy, nz=4, cloud_layers=slice(1, 3), clear_extinction=(2e-5, 5e-5), nx=8, ny=8):
    """Two bands; every cloudy column (mask ``cloudy`` (ny, nx)) holds the same cloud in ``cloud_layers``."""
    ext = np.empty((2, nz, ny, nx))
    ssa = np.empty_like(ext)
    g = np.empty_like(ext)
    lwc = np.zeros((nz, ny, nx))
    for b, (clear, cloud, cloud_ssa, cloud_g) in enumerate(zip(clear_extinction, (0.02, 0.021), (0.9999, 0.99),
                                                                (0.85, 0.82))):
        ext[b], ssa[b], g[b] = clear, 0.9 + 0.05 * b, 0.0
        column = np.zeros((nz, ny, nx), dtype=bool)
        column[cloud_layers] = cloudy[None]
        ext[b][column] = cloud + clear
        ssa[b][column] = (cloud * cloud_ssa + clear * (0.9 + 0.05 * b)) / (cloud + clear)
        g[b][column] = cloud * cloud_ssa * cloud_g / (cloud * cloud_ssa + clear * (0.9 + 0.05 * b))
        lwc[column] = 1e-4
    return make_scene(ext, ssa, g, np.linspace(0.0, 2000.0, nz + 1), 100.0, 100.0, surface_albedo=[0.15, 0.3],
                      solar_weight=[0.6, 0.4], liquid_water_content=lwc, attrs={"regime": "test", "seed": 1})


def fine_two_stream(scene, zenith, host_resolution):
    """Block means of the benchmark grid's delta-Eddington fluxes (the archive's two_stream result)."""
    fine = solve_scene(scene, zenith, quiet=True)
    f = int(round(host_resolution / 100.0))
    out = {flux: block_mean(fine[flux].values, f, f) for flux in HOST_FLUXES[1:]}
    out["surface_downward_flux"] = out["surface_downward_direct_flux"] + out["surface_downward_diffuse_flux"]
    return out


def test_homogeneous_overcast_host_column_equals_the_benchmark_two_stream():
    # A horizontally uniform host column is its own grid-box mean: the host's solve is the
    # fine grid's (the delta-Eddington solver of Joseph et al. 1976, run twice).
    scene = two_band_scene(np.ones((8, 8), dtype=bool))
    for zenith in (0.0, 55.0):
        host = host_two_stream_fluxes(scene, 400.0, zenith)
        fine = fine_two_stream(scene, zenith, 400.0)
        for flux in HOST_FLUXES:
            np.testing.assert_allclose(host[flux], fine[flux], rtol=1e-12, atol=1e-14, err_msg=flux)


def test_clear_and_cloudy_sub_columns_are_exact_for_two_kinds_of_columns():
    # Independent columns of two kinds, shares 1 - c and c: the host-column mean flux is
    # (1 - c) F_clear + c F_cloudy exactly (linearity of the mean).
    cloudy = np.zeros((8, 8), dtype=bool)
    cloudy[1:4, 2:7] = True
    scene = two_band_scene(cloudy)
    host = host_two_stream_fluxes(scene, 400.0, 35.0)
    fine = fine_two_stream(scene, 35.0, 400.0)
    for flux in HOST_FLUXES:
        np.testing.assert_allclose(host[flux], fine[flux], rtol=1e-12, atol=1e-14, err_msg=flux)


def test_mixed_columns_keep_the_energy_balance_of_each_band():
    # Cloud at different heights in one host column is not of the two kinds above; each
    # sub-column still conserves energy: T + A + (1 - a) S = 1 per band, hence for the
    # solar-weighted sum with one albedo for all bands.
    rng = np.random.default_rng(2)
    cloudy = rng.random((8, 8)) < 0.5
    scene = two_band_scene(cloudy)
    lwc = scene["liquid_water_content"].values.copy()
    lwc[2:3, :, :4] = 0.0                   # the cloud of some columns only in layer 1
    scene["liquid_water_content"].values[...] = lwc
    scene["surface_albedo"].values[...] = 0.2
    host = host_two_stream_fluxes(scene, 400.0, 60.0)
    total = host["toa_upward_flux"] + host["atmosphere_absorption"] + 0.8 * host["surface_downward_flux"]
    np.testing.assert_allclose(total, 1.0, rtol=1e-12)
    assert np.allclose(host["surface_upward_flux"], 0.2 * host["surface_downward_flux"])


def test_layer_absorption_of_the_host_columns_sums_to_the_column():
    # Energy: the absorbed shares of the layers add up to the column's absorption, and two
    # kinds of columns give the block mean of the fine grid's layers (linearity of the mean).
    cloudy = np.zeros((8, 8), dtype=bool)
    cloudy[1:4, 2:7] = True
    scene = two_band_scene(cloudy)
    host = host_two_stream_fluxes(scene, 400.0, 35.0, layers=True)
    assert host["layer_absorption"].shape == (4, 2, 2)
    np.testing.assert_allclose(host["layer_absorption"].sum(axis=0), host["atmosphere_absorption"], rtol=1e-12)
    fine = solve_scene(scene, 35.0, quiet=True)
    np.testing.assert_allclose(host["layer_absorption"], block_mean(fine["absorption"].values, 4, 4),
                               rtol=1e-12, atol=1e-15)


def test_clear_sky_optical_depth_of_cloudy_cells():
    # Clear cells keep their optical depth; cloudy cells get the mean of the clear cells of
    # their layer; a layer without clear cells is interpolated in height (by hand).
    tau = np.array([[[0.1, 5.0]], [[7.0, 8.0]], [[0.3, 9.0]]])
    cloudy = np.array([[[False, True]], [[True, True]], [[False, True]]])
    z_edge = np.array([0.0, 100.0, 200.0, 300.0])
    out = clear_sky_layer_optical_depth(tau, cloudy, z_edge)
    np.testing.assert_allclose(out[:, 0, :], [[0.1, 0.1], [0.2, 0.2], [0.3, 0.3]], rtol=1e-12)
    scene = two_band_scene(np.ones((8, 8), dtype=bool))
    host = scene_host_fields(scene, 400.0)
    # Clear extinction 0.6 * 2e-5 + 0.4 * 5e-5 m-1 (solar-weighted) over 500 m layers; the
    # two cloud layers have no clear cell and are interpolated between the two clear ones.
    np.testing.assert_allclose(host["layer_clear_sky_optical_depth"], 3.2e-5 * 500.0, rtol=1e-12)


@pytest.fixture(scope="module")
def archive_2s(tmp_path_factory, make_result):
    """Two-band scenes with a broken cloud and fake Monte Carlo results at two suns."""
    directory = tmp_path_factory.mktemp("host") / "archive"
    directory.mkdir()
    rng = np.random.default_rng(4)
    for i in range(2):
        scene = two_band_scene(rng.random((8, 8)) < 0.4)
        scene.attrs["seed"] = i
        for zenith, azimuth in ((30.0, 0.0), (60.0, 90.0)):
            for solver, level in (("full_3d", 0.5), ("independent_column", 0.4)):
                scene = insert_result(scene, make_result(scene, solver, zenith, azimuth, rng, level))
        write_scene(scene, directory / f"s{i}.nc")
    return directory


def test_pairs_with_host_two_stream_fluxes(archive_2s, tmp_path):
    # The features' independent-column fluxes change; targets, the table's Monte Carlo
    # independent-column flux and every other feature do not; the kind is recorded.
    mc = build_pairs(archive_2s, 400.0, quiet=True)
    host = build_pairs(archive_2s, 400.0, quiet=True, host_fluxes="two_stream_host")
    assert mc.attrs["host_fluxes"] == "monte_carlo" and host.attrs["host_fluxes"] == "two_stream_host"
    assert json.loads(host.attrs["feature_recipe"])["parameters"]["host_fluxes"] == "two_stream_host"
    for var in ("target_value", "independent_column_flux", "full_3d_flux", "baseline_tilted_independent_column"):
        np.testing.assert_array_equal(mc[var].values, host[var].values)
    names = list(mc["feature"].values)
    changed = [n for n in names if not np.array_equal(mc["features"].sel(feature=n), host["features"].sel(feature=n))]
    assert sorted(changed) == sorted(n for n in names if n.startswith("independent_column_"))
    from surrogate3d.archive import read_scene, select_result

    scene = read_scene(archive_2s / "s0.nc")
    expected = host_two_stream_fluxes(scene, 400.0, 30.0)
    first = host["features"].sel(feature="independent_column_toa_upward_flux").values[:4]
    np.testing.assert_allclose(first, expected["toa_upward_flux"].reshape(-1), rtol=1e-12)
    fields = assemble_host_fields(scene, select_result(scene, "independent_column", 30.0, 0.0), 400.0,
                                  "two_stream_host")
    np.testing.assert_array_equal(fields["independent_column_surface_downward_flux"],
                                  expected["surface_downward_flux"])


def test_command_line_records_the_host_fluxes(archive_2s, tmp_path):
    parser = argparse.ArgumentParser()
    commands.register(parser.add_subparsers())
    out = tmp_path / "pairs.nc"
    args = parser.parse_args(["pairs", str(archive_2s), "--out", str(out), "--host-resolution", "400",
                              "--host-fluxes", "two_stream_host", "--quiet"])
    args.func(args)
    table = read_pairs(out)
    assert table.attrs["host_fluxes"] == "two_stream_host"
    assert FeatureRecipe.from_json(table.attrs["feature_recipe"]).parameters["host_fluxes"] == "two_stream_host"
    with pytest.raises(SystemExit):
        parser.parse_args(["pairs", str(archive_2s), "--out", str(out), "--host-fluxes", "fortran"])


def test_recipes_name_the_host_fluxes():
    recipe = FeatureRecipe(["independent_column_toa_upward_flux"], {"host_fluxes": "two_stream_host"})
    assert FeatureRecipe.from_json(recipe.to_json()) == recipe
    with pytest.raises(ParameterError, match="host_fluxes must be one of monte_carlo, two_stream_host"):
        FeatureRecipe(["cloud_fraction"], {"host_fluxes": "mystery"})
    assert with_host_fluxes(default_recipe(), None) == default_recipe()
    assert with_host_fluxes(default_recipe(), "two_stream_host").parameters["host_fluxes"] == "two_stream_host"
    with pytest.raises(ParameterError, match="contradicts the feature recipe"):
        with_host_fluxes(recipe, "monte_carlo")
    with pytest.raises(ParameterError, match="host_fluxes must be one of"):
        with_host_fluxes(default_recipe(), "monte carlo")


def test_a_model_of_one_kind_of_host_fluxes_is_refused_on_the_other(archive_2s):
    # What `surrogate3d score` checks before scoring (docs/methods/models-and-metrics.md).
    mc = build_pairs(archive_2s, 400.0, quiet=True)
    host = build_pairs(archive_2s, 400.0, quiet=True, host_fluxes="two_stream_host")
    model = types.SimpleNamespace(name="boosted", target_names=["toa_upward_flux"],
                                  feature_names=["cloud_fraction", "independent_column_toa_upward_flux"])
    recipe = json.loads(mc.attrs["feature_recipe"])
    check_pairs_match(model, recipe, mc)
    with pytest.raises(ValidationError, match="'independent_column_toa_upward_flux'.*host_fluxes = 'monte_carlo' in "
                                              "training.*'two_stream_host'"):
        check_pairs_match(model, recipe, host)
    # A model without host-flux features applies to either.
    plain = types.SimpleNamespace(name="ridge", feature_names=["cloud_fraction"], target_names=["toa_upward_flux"])
    check_pairs_match(plain, recipe, host)
    # A recipe stored before the parameter existed reads as Monte Carlo host fluxes.
    old = json.loads(mc.attrs["feature_recipe"])
    del old["parameters"]["host_fluxes"]
    check_pairs_match(model, old, mc)
    with pytest.raises(ValidationError, match="host_fluxes"):
        check_pairs_match(model, old, host)
