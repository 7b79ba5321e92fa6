"""The pair table: contents, round trip through a file, the command line and clear errors."""

import argparse
import json

import numpy as np
import pytest

from surrogate3d.archive import insert_result, read_scene, select_result, write_dataset, write_scene
from surrogate3d.errors import FormatError, OutputError, ParameterError
from surrogate3d.core.pairs_table import REQUIRED_VARIABLES, read_pairs
from surrogate3d.pairs import build_pairs
from surrogate3d.pairs import commands
from surrogate3d.pairs.build import archive_fingerprint
from surrogate3d.pairs.coarsen import block_mean
from surrogate3d.pairs.recipe import FeatureRecipe, default_recipe
from surrogate3d.core.data_model import BASELINES, TARGETS


@pytest.fixture(scope="module")
def pairs(archive_template):
    return build_pairs(archive_template, [200.0, 400.0], quiet=True)


def test_table_contents(pairs, archive_template):
    # Targets are differences of host-column means, errors add in quadrature (docs/pairs-format.md;
    # independent Monte Carlo runs, common practice); incident flux S0 cos(60 deg) = S0 / 2.
    archive = archive_template
    # 2 scenes x 2 sun geometries x (4 x 4 + 2 x 2) host columns; the 3D-only geometry is skipped.
    assert pairs.sizes["sample"] == 2 * 2 * (16 + 4)
    assert list(pairs["target"].values) == list(TARGETS)
    assert list(pairs["feature"].values) == default_recipe().column_names()
    assert len(json.loads(pairs["features"].attrs["units"])) == pairs.sizes["feature"]
    skipped = json.loads(pairs.attrs["skipped"])
    assert len(skipped) == 2 and all("lacks independent_column" in s for s in skipped)
    assert np.allclose(pairs["target_value"], pairs["full_3d_flux"] - pairs["independent_column_flux"])
    assert np.all(pairs["target_standard_error"] >= pairs["full_3d_flux_standard_error"])
    total = pairs["full_3d_flux"].sel(target="surface_downward_flux")
    parts = pairs["full_3d_flux"].sel(target=["surface_downward_direct_flux", "surface_downward_diffuse_flux"])
    assert np.allclose(total, parts.sum("target"))
    # One host column checked against the scene file by hand: scene1, sun (60, 90), 400 m, column (iy=1, ix=0).
    scene = read_scene(archive / "scene1.nc")
    full = select_result(scene, "full_3d", 60.0, 90.0)
    pick = ((pairs["scene"] == "scene1") & (pairs["solar_zenith_angle"] == 60.0) & (pairs["host_resolution"] == 400.0)
            & (pairs["host_iy"] == 1) & (pairs["host_ix"] == 0)).values
    assert pick.sum() == 1
    row = pairs.isel(sample=np.flatnonzero(pick)[0])
    assert float(row["full_3d_flux"].sel(target="toa_upward_flux")) == pytest.approx(
        float(full["toa_upward_flux"].values[4:8, 0:4].mean()))
    assert float(row["incident_flux"]) == pytest.approx(1361.0 * 0.5)
    assert int(row["seed"]) == 1 and str(row["regime"].values) == "test" and int(row["host_nx"]) == 2
    for name in ("baseline_tilted_independent_column", "baseline_nonlocal_independent_pixel"):
        assert np.isfinite(pairs[name]).all()


def test_round_trip_through_a_file(pairs, tmp_path):
    write_dataset(pairs, tmp_path / "pairs.nc")
    back = read_pairs(tmp_path / "pairs.nc")
    for name in REQUIRED_VARIABLES:
        assert np.array_equal(back[name].values, pairs[name].values), name
    assert FeatureRecipe.from_json(back.attrs["feature_recipe"]) == default_recipe()
    assert back.attrs["archive_fingerprint"] == pairs.attrs["archive_fingerprint"]
    assert isinstance(back["scene"].values[0], str) and list(back["feature"].values) == list(pairs["feature"].values)


def test_fingerprint_follows_the_results(pairs, archive, make_result):
    assert archive_fingerprint(archive) == pairs.attrs["archive_fingerprint"]
    scene = read_scene(archive / "scene0.nc")
    scene = insert_result(scene, make_result(scene, "full_3d", 30.0, 0.0, np.random.default_rng(9)))
    write_scene(scene, archive / "scene0.nc")
    assert archive_fingerprint(archive) != pairs.attrs["archive_fingerprint"]


def test_baselines_are_coarse_grained_benchmark_corrections(pairs, archive_template):
    from surrogate3d.baselines import NonlocalIndependentPixel, TiltedIndependentColumn
    scene = read_scene(archive_template / "scene0.nc")
    fine = TiltedIndependentColumn().corrections(scene, 30.0, 0.0)
    pick = ((pairs["scene"] == "scene0") & (pairs["solar_zenith_angle"] == 30.0)
            & (pairs["host_resolution"] == 400.0)).values
    stored = pairs["baseline_tilted_independent_column"].values[pick]
    assert np.allclose(stored[:, 1], block_mean(fine["surface_downward_direct_flux"], 4, 4).reshape(-1))
    # Every baseline of the registry is computed and stored under its variable.
    assert {b.name: b.variable for b in (TiltedIndependentColumn(), NonlocalIndependentPixel())} == {
        name: entry.variable for name, entry in BASELINES.items()}
    for entry in BASELINES.values():
        assert pairs[entry.variable].dims == ("sample", "target") and np.isfinite(pairs[entry.variable]).all()


def test_command_line(archive_template, tmp_path, capsys):
    archive = archive_template
    parser = argparse.ArgumentParser()
    commands.register(parser.add_subparsers())
    recipe_file = tmp_path / "recipe.json"
    FeatureRecipe(["cloud_fraction", "slant_optical_depth"]).write(recipe_file)
    out = tmp_path / "pairs.nc"
    args = parser.parse_args(["pairs", str(archive), "--out", str(out), "--host-resolution", "400", "800",
                              "--recipe", str(recipe_file)])
    args.func(args)
    printed = capsys.readouterr()
    assert "wrote 20 samples x 2 features and 4 host layers from 2 scene(s)" in printed.out and "skipped 2" in printed.out
    assert "lacks independent_column" in printed.err
    assert read_pairs(out).sizes["sample"] == 20
    args = parser.parse_args(["pairs", str(archive), "--out", str(tmp_path / "q.nc"), "--quiet"])
    with pytest.raises(ParameterError, match="host_resolution"):
        args.func(args)             # 1000 m does not divide the 800 m domain
    args = parser.parse_args(["pairs", str(archive), "--out", str(tmp_path / "nowhere" / "q.nc")])
    with pytest.raises(OutputError, match="does not exist"):
        args.func(args)


def test_clear_errors(tmp_path, archive_template, make_block_scene, make_result):
    archive = archive_template
    empty = tmp_path / "empty"
    empty.mkdir()
    with pytest.raises(FormatError, match="holds no scene files"):
        build_pairs(empty, 400.0, quiet=True)
    with pytest.raises(FormatError, match="does not exist"):
        build_pairs(tmp_path / "absent", 400.0, quiet=True)
    lonely = tmp_path / "lonely"
    lonely.mkdir()
    scene = make_block_scene()
    write_scene(insert_result(scene, make_result(scene, "full_3d", 30.0, 0.0, np.random.default_rng(0))),
                lonely / "a.nc")
    write_scene(scene, lonely / "b.nc")
    with pytest.raises(FormatError, match="no scene and sun geometry with both.*b.nc: holds no results"):
        build_pairs(lonely, 400.0, quiet=True)
    with pytest.raises(ParameterError, match="scene 'scene0'.*host_resolution.*allowed values"):
        build_pairs(archive, 300.0, quiet=True)
    with pytest.raises(ParameterError, match="host_resolutions"):
        build_pairs(archive, [], quiet=True)
    with pytest.raises(ParameterError, match="unknown feature name"):
        build_pairs(archive, 400.0, recipe={"features": ["nope"]}, quiet=True)


def test_read_pairs_errors(pairs, tmp_path):
    with pytest.raises(FormatError, match="does not exist"):
        read_pairs(tmp_path / "missing.nc")
    (tmp_path / "junk.nc").write_bytes(b"not netcdf")
    with pytest.raises(FormatError, match="cannot read"):
        read_pairs(tmp_path / "junk.nc")
    other = pairs.copy()
    other.attrs["format_version"] = "2.0"
    write_dataset(other, tmp_path / "v2.nc")
    with pytest.raises(FormatError, match="format_version 2.0"):
        read_pairs(tmp_path / "v2.nc")
    write_dataset(pairs.drop_vars("target_value"), tmp_path / "short.nc")
    with pytest.raises(FormatError, match="lacks variable.*target_value"):
        read_pairs(tmp_path / "short.nc")
