"""Scene files: write-then-read round trips, stored results, damaged and foreign files."""

import os

import numpy as np
import pytest
import xarray as xr
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from surrogate3d.archive import (completed, insert_result, make_run_result, read_scene, select_result,
                                 write_dataset, write_scene)
from surrogate3d.core.data_model import COLUMN_FLUXES
from surrogate3d.errors import FormatError, ValidationError
from surrogate3d.scenes.generator import generate_scene
from surrogate3d.scenes.model import make_scene


def _result(scene, solver, zenith, azimuth, rng, per_band=False, heating=False):
    nz, ny, nx = scene.sizes["z"], scene.sizes["y"], scene.sizes["x"]
    bands = list(scene["band"].values)
    return make_run_result(
        {k: rng.random((ny, nx)) for k in COLUMN_FLUXES}, {k: rng.random((ny, nx)) * 1e-3 for k in COLUMN_FLUXES},
        rng.random((nz, ny, nx)) * 0.01, solver=solver, solar_zenith_angle=zenith, solar_beam_azimuth=azimuth,
        metadata={"run_photons": int(rng.integers(0, 10 ** 6)), "run_seed": int(rng.integers(0, 100)),
                  "run_scattering_events": 7, "run_wall_time": float(rng.random()), "run_solar_constant": 1361.0,
                  "run_package_version": "0.1.0"},
        per_band={k: rng.random((len(bands), ny, nx)) for k in COLUMN_FLUXES} if per_band else None,
        heating_rate=rng.random((nz, ny, nx)) if heating else None, band=bands if per_band else None)


@st.composite
def scenes_with_results(draw):
    nband = draw(st.integers(1, 3))
    nz, ny, nx = (draw(st.integers(1, 4)) for _ in range(3))
    rng = np.random.default_rng(draw(st.integers(0, 2 ** 32 - 1)))
    shape = (nband, nz, ny, nx)
    optional = {}
    if draw(st.booleans()):
        optional = {"liquid_water_content": rng.uniform(0, 1e-3, (nz, ny, nx)),
                    "effective_radius": rng.uniform(4e-6, 2e-5, (nz, ny, nx)),
                    "air_temperature": rng.uniform(200, 300, nz),
                    "air_pressure": np.sort(rng.uniform(5e4, 1e5, nz + 1))[::-1] - np.arange(nz + 1)}
    weights = rng.uniform(0.1, 1, nband)
    scene = make_scene(rng.uniform(0, 0.1, shape), rng.uniform(0, 1, shape), rng.uniform(-0.9, 0.9, shape),
                       np.concatenate([[0.0], np.cumsum(rng.uniform(10, 900, nz))]), draw(st.floats(1.0, 5e3)),
                       draw(st.floats(1.0, 5e3)), surface_albedo=rng.uniform(0, 1, (nband, ny, nx)),
                       solar_weight=weights / weights.sum(), band=[f"band_{i}" for i in range(nband)],
                       attrs={"regime": "random", "seed": 3}, **optional)
    runs = draw(st.lists(st.tuples(st.sampled_from(["full_3d", "independent_column", "two_stream"]),
                                   st.sampled_from([0.0, 30.0, 60.0]), st.sampled_from([0.0, 90.0, 270.0]),
                                   st.booleans(), st.booleans()), max_size=2))
    results = []
    for solver, zenith, azimuth, per_band, heating in runs:
        result = _result(scene, solver, zenith, azimuth, rng, per_band, heating)
        scene = insert_result(scene, result)
        results.append(result)
    return scene, results


# Few examples: each NetCDF write and read of ~60 variables costs a good fraction of a second.
@settings(max_examples=10, deadline=None, suppress_health_check=[HealthCheck.too_slow,
                                                                 HealthCheck.function_scoped_fixture])
@given(scenes_with_results())
def test_write_then_read_gives_an_identical_dataset(tmp_path, case):
    scene, results = case
    path = tmp_path / "scene.nc"
    write_scene(scene, path)
    back = read_scene(path)
    xr.testing.assert_identical(back, scene)
    slots = {(r.attrs["solver"], r.attrs["solar_zenith_angle"], r.attrs["solar_beam_azimuth"]): r for r in results}
    assert sorted(completed(back)) == sorted(slots)
    for (solver, zenith, azimuth), result in slots.items():
        stored = select_result(back, solver, zenith, azimuth)
        for name in result.data_vars:
            np.testing.assert_array_equal(stored[name].values, result[name].values)


def test_generated_scene_round_trip_keeps_every_value_and_attribute(tmp_path):
    scene = generate_scene("cumulus_under_thin_layer", 9, nx=12, ny=10, nz=8)
    write_scene(scene, tmp_path / "s.nc")
    back = read_scene(tmp_path / "s.nc")
    xr.testing.assert_identical(back, scene)
    assert back.attrs["generator_parameters"] == scene.attrs["generator_parameters"]
    assert [str(b) for b in back["band"].values] == ["visible", "near_infrared"]


@pytest.fixture
def written(tmp_path):
    scene = generate_scene("overcast", 1, nx=6, ny=5, nz=4)
    path = tmp_path / "overcast_00001.nc"
    write_scene(scene, path)
    return scene, path


def test_truncated_file_gives_format_error(written):
    _, path = written
    data = path.read_bytes()
    path.write_bytes(data[: len(data) // 2])
    with pytest.raises(FormatError, match="truncated"):
        read_scene(path)


@pytest.mark.parametrize("content", [b"", b"this is not netcdf\n" * 20, os.urandom(4096)])
def test_unreadable_file_gives_format_error(tmp_path, content):
    path = tmp_path / "bad.nc"
    path.write_bytes(content)
    with pytest.raises(FormatError, match="bad.nc"):
        read_scene(path)


def test_missing_file_gives_format_error(tmp_path):
    with pytest.raises(FormatError, match="does not exist"):
        read_scene(tmp_path / "nothing.nc")


def test_failed_write_leaves_the_existing_file_intact(written):
    scene, path = written
    before = path.read_bytes()
    broken = scene.copy()
    broken.attrs["unstorable"] = {"a": 1}  # NetCDF attributes cannot hold a mapping
    with pytest.raises(TypeError):
        write_scene(broken, path)
    invalid = scene.copy(deep=True)
    invalid["extinction"].values[0, 0, 0, 0] = np.nan
    with pytest.raises(ValidationError):
        write_scene(invalid, path)
    assert path.read_bytes() == before
    assert sorted(p.name for p in path.parent.iterdir()) == [path.name]  # no temporary files left
    xr.testing.assert_identical(read_scene(path), scene)


def test_write_interrupted_midway_leaves_the_existing_file_intact(written, monkeypatch):
    scene, path = written
    before = path.read_bytes()

    def half_write(self, target, **kwargs):
        with open(target, "wb") as fh:
            fh.write(b"\x89HDF\r\n\x1a\n partial")
        raise OSError("disk full")

    monkeypatch.setattr(xr.Dataset, "to_netcdf", half_write)
    with pytest.raises(OSError, match="disk full"):
        write_scene(scene, path)
    assert path.read_bytes() == before
    assert sorted(p.name for p in path.parent.iterdir()) == [path.name]


def test_file_of_another_format_version_is_refused(written, tmp_path):
    scene, _ = written
    future = scene.copy()
    future.attrs["format_version"] = "2.0"
    write_dataset(future, tmp_path / "future.nc")
    with pytest.raises(FormatError, match="format_version 2.0"):
        read_scene(tmp_path / "future.nc")
    anonymous = scene.copy()
    del anonymous.attrs["format_version"]
    write_dataset(anonymous, tmp_path / "anonymous.nc")
    with pytest.raises(FormatError, match="no format_version"):
        read_scene(tmp_path / "anonymous.nc")


def test_write_into_missing_directory_is_an_error(tmp_path):
    scene = generate_scene("clear", 0, nx=2, ny=2, nz=2)
    with pytest.raises(Exception, match="does not exist"):
        write_scene(scene, tmp_path / "no" / "such" / "dir.nc")
