"""The ``scenes`` and ``show`` subcommands, run through a parser built with register()."""

import argparse

import numpy as np
import pytest

from surrogate3d import cli
from surrogate3d.archive import read_scene
from surrogate3d.scenes import commands
from surrogate3d.scenes.model import cloud_mask
from surrogate3d.scenes.regimes import REGIMES

TINY = ["--nx", "8", "--ny", "6", "--nz", "5", "--quiet"]


def _parser():
    parser = argparse.ArgumentParser(prog="surrogate3d")
    commands.register(parser.add_subparsers(dest="command"))
    return parser


def run(argv):
    """Run like surrogate3d.cli.main, with only this stage's subcommands registered."""
    saved = cli.COMMAND_MODULES
    cli.COMMAND_MODULES = ["surrogate3d.scenes.commands"]
    try:
        return cli.main(argv)
    finally:
        cli.COMMAND_MODULES = saved


def test_register_adds_both_subcommands():
    args = _parser().parse_args(["show", "a.nc", "--out", "a.png", "--row", "2"])
    assert args.func is commands.run_show and args.row == "2"
    args = _parser().parse_args(["scenes", "--out", "d", "--regime", "overcast", "--regime", "clear"])
    assert args.func is commands.run_scenes and args.regime == ["overcast", "clear"]


def test_scenes_writes_files_for_consecutive_seeds(tmp_path, capsys):
    out = tmp_path / "new" / "dir"
    assert run(["scenes", "--out", str(out), "--regime", "overcast", "--regime", "broken_stratocumulus",
                "--count", "2", "--seed", "7", *TINY]) == 0
    names = sorted(p.name for p in out.iterdir())
    assert names == ["broken_stratocumulus_00007.nc", "broken_stratocumulus_00008.nc",
                     "overcast_00007.nc", "overcast_00008.nc"]
    scene = read_scene(out / "overcast_00008.nc")
    assert scene.attrs["seed"] == 8 and dict(scene.sizes)["x"] == 8
    assert f"wrote 4 scene files to {out}" in capsys.readouterr().out


def test_overrides_reach_the_scene(tmp_path):
    assert run(["scenes", "--out", str(tmp_path), "--regime", "scattered_cumulus", "--cloud-fraction", "0.5",
                "--optical-depth", "4", "--cloud-top-variability", "0", "--dx", "50", "--top", "3000",
                *TINY]) == 0
    scene = read_scene(tmp_path / "scattered_cumulus_00000.nc")
    assert cloud_mask(scene).any(axis=0).sum() == 24
    assert scene.attrs["mean_optical_depth"] == 4.0 and scene.attrs["dx_m"] == 50.0
    assert scene["z_edge"].values[-1] == 3000.0


def test_per_file_lines_unless_quiet(tmp_path, capsys):
    assert run(["scenes", "--out", str(tmp_path), "--regime", "clear", "--nx", "2", "--ny", "2", "--nz", "2"]) == 0
    out = capsys.readouterr().out
    assert f"wrote {tmp_path / 'clear_00000.nc'}" in out


def test_config_file_with_command_line_override(tmp_path):
    config = tmp_path / "set.toml"
    config.write_text('count = 3\n[grid]\nnx = 4\nny = 4\nnz = 3\n[[regime]]\nname = "overcast"\n'
                      '[[regime]]\nname = "clear"\ncount = 1\n')
    assert run(["scenes", "--config", str(config), "--out", str(tmp_path / "o"), "--nx", "5", "--quiet"]) == 0
    names = sorted(p.name for p in (tmp_path / "o").iterdir())
    assert names == ["clear_00000.nc", "overcast_00000.nc", "overcast_00001.nc", "overcast_00002.nc"]
    assert read_scene(tmp_path / "o" / "overcast_00002.nc").sizes["x"] == 5


def test_all_regimes(tmp_path):
    assert run(["scenes", "--out", str(tmp_path), "--regime", "all", "--cloud-fraction", "0.3", *TINY]) == 0
    assert len(list(tmp_path.glob("*.nc"))) == len(REGIMES)


def test_show_draws_a_scene_file(tmp_path, capsys):
    run(["scenes", "--out", str(tmp_path), "--regime", "scattered_cumulus", *TINY])
    png = tmp_path / "pics" / "cu.png"
    assert run(["show", str(tmp_path / "scattered_cumulus_00000.nc"), "--out", str(png), "--row", "1",
                "--band", "near_infrared"]) == 0
    assert png.read_bytes()[:4] == b"\x89PNG"
    assert f"wrote {png}" in capsys.readouterr().out


@pytest.fixture(scope="module")
def scene_dir(tmp_path_factory):
    """A directory holding one small scene file, scene.nc (6 rows)."""
    directory = tmp_path_factory.mktemp("scenes")
    run(["scenes", "--out", str(directory), "--regime", "overcast", *TINY])
    (directory / "overcast_00000.nc").rename(directory / "scene.nc")
    return directory


@pytest.mark.parametrize("argv, message", [
    (["scenes", "--out", "{d}", "--regime", "cirrus"], "--regime must be one of"),
    (["scenes", "--out", "{d}", "--regime", "overcast", "--nx", "many"], "--nx must be an integer; got 'many'"),
    (["scenes", "--out", "{d}", "--regime", "overcast", "--dx", "1e"], "--dx must be a number; got '1e'"),
    (["scenes", "--out", "{d}", "--regime", "overcast", "--cloud-fraction", "1.5"],
     "--cloud-fraction must be in [0, 1]"),
    (["scenes", "--out", "{d}", "--regime", "overcast", "--optical-depth", "-2"], "--optical-depth must be in (0"),
    (["scenes", "--out", "{d}", "--regime", "overcast", "--count", "0"], "--count must be an integer in [1, 100000]; got 0"),
    (["scenes", "--out", "{d}", "--regime", "overcast", "--seed", "-4"], "--seed must be an integer in [0, 4611686018427387904]; got -4"),
    (["scenes", "--out", "{d}", "--regime", "overcast", "--nx", "0"], "nx must be an integer in [1, 4096]"),
    (["scenes", "--out", "{d}", "--regime", "overcast", "--top", "100"], "at or below the cloud base"),
    (["scenes", "--out", "{d}", "--regime", "clear", "--optical-depth", "3"], "has no cloud layer"),
    (["scenes", "--out", "{d}"], "no regime given"),
    (["scenes", "--regime", "overcast"], "--out is required"),
    (["scenes", "--out", "{d}", "--config", "{d}/missing.toml"], "does not exist"),
    (["show", "{d}/missing.nc", "--out", "{d}/x.png"], "scene file"),
    (["show", "{d}/scene.nc", "--out", "{d}/x.png", "--row", "99"], "row must be an integer in [0, 5]"),
    (["show", "{d}/scene.nc", "--out", "{d}/x.png", "--row", "a"], "--row must be an integer; got 'a'"),
    (["show", "{d}/scene.nc", "--out", "{d}/x.png", "--band", "uv"], "band 'uv' is not in the scene"),
    (["show", "{d}/scene.nc", "--out", "{d}/x.pdf"], "--out must name a .png file"),
])
def test_errors_print_one_line_and_exit_non_zero(scene_dir, capsys, argv, message):
    status = run([a.replace("{d}", str(scene_dir)) for a in argv])
    err = capsys.readouterr().err
    assert status == 1
    assert len(err.strip().splitlines()) == 1
    assert err.startswith(f"surrogate3d {argv[0]}: error: ") and message in err


def test_output_directory_that_is_a_file(tmp_path, capsys):
    blocker = tmp_path / "file"
    blocker.write_text("x")
    assert run(["scenes", "--out", str(blocker / "sub"), "--regime", "clear", *TINY]) == 1
    assert "is a file, not a directory" in capsys.readouterr().err


def test_same_command_twice_gives_identical_files(tmp_path):
    for name in ("a", "b"):
        run(["scenes", "--out", str(tmp_path / name), "--regime", "broken_stratocumulus", "--seed", "3", *TINY])
    a = read_scene(tmp_path / "a" / "broken_stratocumulus_00003.nc")
    b = read_scene(tmp_path / "b" / "broken_stratocumulus_00003.nc")
    assert a.identical(b) and np.any(a["liquid_water_content"].values > 0)


def test_config_draws_reach_the_scene_files_and_repeat(tmp_path):
    config = tmp_path / "world.toml"
    config.write_text('count = 3\n[optics]\noptics_set = { choice = ["two_band_moist", "visible_only"] }\n'
                      'surface_albedo = { uniform = [0.03, 0.8] }\n'
                      '[optics.surface_pattern]\nkind = "coastline"\ncontrast_albedo = 0.7\n'
                      '[[regime]]\nname = "cloud_streets"\n')
    for out in ("a", "b"):
        assert run(["scenes", "--config", str(config), "--out", str(tmp_path / out), *TINY]) == 0
    albedos = set()
    for seed in range(3):
        a = read_scene(tmp_path / "a" / f"cloud_streets_{seed:05d}.nc")
        b = read_scene(tmp_path / "b" / f"cloud_streets_{seed:05d}.nc")
        assert np.array_equal(a["surface_albedo"].values, b["surface_albedo"].values)
        assert a.attrs["optics_set"] in ("two_band_moist", "visible_only")
        albedos.add(float(a["surface_albedo"].values.min()))
    assert len(albedos) == 3
