"""Scene files with and without the longwave fields: stored, read, listed, simulated, refused when bad."""

import numpy as np
import pytest
import xarray as xr

from surrogate3d.archive import list_archive, read_scene, select_result, write_dataset, write_scene
from surrogate3d.archive.simulate import simulate_archive
from surrogate3d.cli import main
from surrogate3d.core.data_model import SCENE_FORMAT_VERSION
from surrogate3d.errors import ValidationError
from surrogate3d.scenes.generator import generate_scene
from surrogate3d.scenes.longwave_fields import longwave_fields

NEW_FIELDS = ("specific_humidity", "surface_temperature", "surface_longwave_emissivity")
SHORTWAVE_RESULTS = ("toa_upward_flux", "surface_downward_direct_flux", "surface_downward_diffuse_flux",
                     "surface_upward_flux", "atmosphere_absorption", "absorption")


@pytest.fixture(scope="module")
def scene():
    return generate_scene("scattered_cumulus", 4, nx=8, ny=6, nz=5,
                          surface_pattern={"kind": "coastline", "contrast_albedo": 0.3, "scale": 300.0,
                                           "contrast_emissivity": "vegetation"})


def write_old_scene(scene, path):
    """Write ``scene`` as format 1.1 wrote it: no longwave fields, air_temperature a layer profile."""
    old = scene.drop_vars(list(NEW_FIELDS)).assign(
        air_temperature=("z", scene["air_temperature"].values[:, 0, 0], {"units": "K"}))
    old.attrs["format_version"] = "1.1"
    write_dataset(old, path)


def test_longwave_fields_are_stored_and_read_back(tmp_path, scene):
    path = write_scene(scene, tmp_path / "s.nc")
    back = read_scene(path)
    xr.testing.assert_identical(back, scene.assign_attrs(format_version=SCENE_FORMAT_VERSION))
    assert back.attrs["format_version"] == "1.3"
    for name in NEW_FIELDS + ("air_temperature",):
        assert back[name].attrs["units"] and back[name].attrs["standard_name"] == name
    assert set(np.unique(back["surface_longwave_emissivity"].values)) == {0.98, 0.99}


def test_an_old_file_still_reads_and_simulates_shortwave_exactly_as_before(tmp_path, scene):
    (tmp_path / "old").mkdir()
    (tmp_path / "new").mkdir()
    write_old_scene(scene, tmp_path / "old" / "s_00004.nc")
    write_scene(scene, tmp_path / "new" / "s_00004.nc")
    old = read_scene(tmp_path / "old" / "s_00004.nc")
    assert old["air_temperature"].dims == ("z",) and not set(NEW_FIELDS) & set(old.variables)
    for name in ("extinction", "single_scattering_albedo", "asymmetry_parameter", "surface_albedo"):
        assert np.array_equal(old[name].values, scene[name].values)
    for archive in ("old", "new"):
        summary = simulate_archive(tmp_path / archive, [30.0], [0.0], solvers=("full_3d", "two_stream"),
                                   photons=400, seed=5, quiet=True)
        assert summary["computed"] == 2
    old, new = read_scene(tmp_path / "old" / "s_00004.nc"), read_scene(tmp_path / "new" / "s_00004.nc")
    for solver in ("full_3d", "two_stream"):
        a, b = select_result(old, solver, 30.0, 0.0), select_result(new, solver, 30.0, 0.0)
        for name in SHORTWAVE_RESULTS:
            assert np.array_equal(a[name].values, b[name].values, equal_nan=True), (solver, name)
    with pytest.raises(ValidationError, match=r"^scene 'old/s_00004.nc' has no specific_humidity: it was written "
                                              r"before longwave support; regenerate it with `surrogate3d scenes`"):
        longwave_fields(old, label="old/s_00004.nc")
    assert longwave_fields(new).gas_absorption.shape == (299, 5)


def test_list_shows_which_scenes_can_do_longwave(tmp_path, scene, capsys):
    write_old_scene(scene, tmp_path / "a_old.nc")
    write_scene(scene, tmp_path / "b_new.nc")
    table = list_archive(tmp_path)
    assert table["longwave"].tolist() == ["no", "yes"] and table["status"].tolist() == ["ok", "ok"]
    assert main(["list", str(tmp_path)]) == 0
    header, first, second = capsys.readouterr().out.splitlines()[:3]
    assert "longwave" in header.split() and " no " in first and " yes " in second


@pytest.mark.parametrize("name, index, value, rule", [
    ("air_temperature", (2, 3, 1), -1.0, "> 0"),
    ("air_temperature", (0, 0, 7), np.nan, "finite"),
    ("surface_temperature", (5, 2), 0.0, "> 0"),
    ("surface_temperature", (1, 1), np.inf, "finite"),
    ("surface_longwave_emissivity", (3, 4), 1.5, "in [0, 1]"),
    ("surface_longwave_emissivity", (0, 6), -0.2, "in [0, 1]"),
])
def test_bad_values_are_refused_naming_variable_and_index_and_nothing_is_written(tmp_path, scene, name, index,
                                                                                  value, rule):
    bad = scene.copy(deep=True)
    bad[name].values[index] = value
    where = ", ".join(f"{d}={i}" for d, i in zip(bad[name].dims, index))
    expected = f"{name} must be {rule}; got {float(value)!r} (at {where})"
    with pytest.raises(ValidationError) as err:
        write_scene(bad, tmp_path / "bad.nc")
    assert expected in str(err.value) and "\n" not in str(err.value)
    assert list(tmp_path.iterdir()) == []
    # A file written by other means is refused when read.
    write_dataset(bad, tmp_path / "foreign.nc")
    with pytest.raises(ValidationError) as err:
        read_scene(tmp_path / "foreign.nc")
    assert str(err.value).startswith(f"{tmp_path / 'foreign.nc'} is invalid: ") and expected in str(err.value)
