"""The host field file: exact round trip, periodic split with halos, malformed files named."""

import numpy as np
import pytest

from surrogate3d.core.data_model import TARGETS
from surrogate3d.errors import FormatError, ValidationError
from surrogate3d.pairs.longwave_features import LONGWAVE_TARGETS
from surrogate3d.runtime.host_field_file import (ARRAYS, CLEAR_SKY_FIELDS, LONGWAVE_ARRAYS, read_host_field_file,
                                                 split_periodic, stacked_fields, stacked_longwave_fields,
                                                 write_host_field_file)


def whole_domain(seed=0, ny=6, nx=8, nz=3):
    rng = np.random.default_rng(seed)
    fields = {"z_edge": np.array([0.0, 333.3, 1000.0 / 3.0 * 2.0, 1e3 + 1e-9])[:nz + 1], "dx": 1000.0, "dy": 750.0,
              "solar_zenith_angle": 47.123456789, "solar_beam_azimuth": 301.0}
    for name, kind in ARRAYS.items():
        if kind == "layers":
            fields[name] = rng.uniform(0.0, 1.0, (nz, ny, nx)) / 3.0
        elif kind == "plane":
            fields[name] = rng.uniform(0.0, 1.0, (ny, nx)) * np.pi / 4.0
    for flux in TARGETS:
        fields[f"independent_column_{flux}"] = rng.uniform(0.0, 1.0, (ny, nx))
    return stacked_fields(fields, fields.pop("independent_column_layer_absorption"))


def test_round_trip_is_exact(tmp_path):
    # Shortest round-trip decimals (the Python repr of a double) read back bit for bit.
    fields = whole_domain()
    (sub, origin), = split_periodic(fields, (1, 1), (2, 1))
    write_host_field_file(tmp_path / "f.txt", sub, (2, 1), origin, (8, 6))
    back, layout = read_host_field_file(tmp_path / "f.txt")
    assert layout == {"halo": (2, 1), "origin": (0, 0), "domain": (8, 6), "own": (8, 6), "longwave": False}
    for name in ARRAYS:
        np.testing.assert_array_equal(back[name], sub[name])
    assert back["solar_zenith_angle"] == fields["solar_zenith_angle"] and back["dy"] == 750.0


def test_longwave_round_trip_is_exact(tmp_path):
    rng = np.random.default_rng(3)
    fields = {"z_edge": np.array([0.0, 333.3, 1000.0 + 1e-9]), "dx": 1000.0, "dy": 750.0}
    for name, kind in LONGWAVE_ARRAYS.items():
        if kind in ("layers", "plane"):
            fields[name] = rng.uniform(200.0, 300.0, (2, 6, 8) if kind == "layers" else (6, 8)) / 7.0
    fields.update({name: rng.uniform(200.0, 400.0, (6, 8)) for name in CLEAR_SKY_FIELDS})
    fluxes = {name: rng.normal(0.0, 100.0, (6, 8)) for name in LONGWAVE_TARGETS}
    stacked = stacked_longwave_fields(fields, fluxes)
    np.testing.assert_array_equal(stacked["longwave_fluxes"][2], fluxes[LONGWAVE_TARGETS[2]])
    parts = split_periodic(stacked, (2, 1), (1, 1))
    sub, origin = parts[1]
    write_host_field_file(tmp_path / "lw.txt", sub, (1, 1), origin, (8, 6), longwave=True)
    assert (tmp_path / "lw.txt").read_text().startswith("surrogate3d longwave host fields 1\n")
    back, layout = read_host_field_file(tmp_path / "lw.txt")
    assert layout == {"halo": (1, 1), "origin": (4, 0), "domain": (8, 6), "own": (4, 6), "longwave": True}
    for name in LONGWAVE_ARRAYS:
        np.testing.assert_array_equal(back[name], sub[name])
    assert "solar_zenith_angle" not in back and back["dy"] == 750.0
    with pytest.raises(ValidationError, match="longwave host fields lack longwave_toa_upward_flux"):
        stacked_longwave_fields(fields, {k: v for k, v in fluxes.items() if k != "longwave_toa_upward_flux"})


def test_split_fills_halos_from_the_periodic_neighbours():
    fields = whole_domain(1)
    parts = split_periodic(fields, (2, 3), (1, 2))
    assert [origin for _, origin in parts] == [(0, 0), (4, 0), (0, 2), (4, 2), (0, 4), (4, 4)]
    sub, (x0, y0) = parts[3]
    albedo = sub["surface_albedo"]
    assert albedo.shape == (2 + 4, 4 + 2)
    # Halo cell (-2, -1) of the sub-domain at (4, 2) is the periodic domain's (0, 3).
    assert albedo[0, 0] == fields["surface_albedo"][(y0 - 2) % 6, (x0 - 1) % 8]
    assert sub["independent_column_fluxes"].shape == (len(TARGETS), 6, 6)
    with pytest.raises(ValidationError, match="divide"):
        split_periodic(fields, (3, 1), (1, 1))


def test_malformed_files_are_named(tmp_path):
    fields = whole_domain(2)
    (sub, origin), = split_periodic(fields, (1, 1), (0, 0))
    path = tmp_path / "f.txt"
    write_host_field_file(path, sub, (0, 0), origin, (8, 6))
    lines = path.read_text().splitlines()
    (tmp_path / "cut.txt").write_text("\n".join(lines[:-2]) + "\n")
    with pytest.raises(FormatError, match="truncated"):
        read_host_field_file(tmp_path / "cut.txt")
    (tmp_path / "other.txt").write_text("something else\n")
    with pytest.raises(FormatError, match="does not start with"):
        read_host_field_file(tmp_path / "other.txt")
    bad = dict(sub, surface_albedo=np.where(np.arange(48).reshape(6, 8) == 9, np.nan, sub["surface_albedo"]))
    with pytest.raises(ValidationError, match=r"surface_albedo is not finite at index \(1, 1\)"):
        write_host_field_file(tmp_path / "nan.txt", bad, (0, 0), origin, (8, 6))
    assert not (tmp_path / "nan.txt").exists()
    with pytest.raises(ValidationError, match="leaves no own column"):
        write_host_field_file(tmp_path / "h.txt", sub, (4, 0), origin, (8, 6))
    with pytest.raises(ValidationError, match="independent_column_toa_upward_flux"):
        stacked_fields({k: v for k, v in sub.items() if k != "independent_column_toa_upward_flux"},
                       sub["independent_column_layer_absorption"])
