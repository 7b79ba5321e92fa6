"""Per-layer (heating-rate) variables of the pair table: conservation, heating rates, host grids, errors."""

import math

import numpy as np
import pytest

from surrogate3d.archive import insert_result, write_scene
from surrogate3d.errors import FormatError, ParameterError
from surrogate3d.pairs import build_pairs
from surrogate3d.pairs.profiles import (check_host_layer_edges, host_edge_pressure, overlap_matrix,
                                       slant_optical_depth_above)
from surrogate3d.scenes import make_scene
from surrogate3d.solvers import solve_monte_carlo

#: Isothermal hydrostatic atmosphere, p = p0 exp(-z / H) (textbook, e.g. Wallace and Hobbs 2006).
SCALE_HEIGHT = 8000.0
SURFACE_PRESSURE = 101325.0


def absorbing_cloud_scene():
    ext = np.full((2, 5, 8, 8), 2e-5)
    ext[:, 1:3, 2:5, 3:6] = 0.02
    lwc = np.where(ext[0] > 1e-3, 1e-4, 0.0)
    ssa = np.stack([np.full((5, 8, 8), 0.9999), np.full((5, 8, 8), 0.95)])
    z_edge = np.array([0.0, 300.0, 700.0, 1000.0, 1500.0, 2000.0])
    return make_scene(ext, ssa, 0.85, z_edge, 100.0, 100.0, surface_albedo=0.2, liquid_water_content=lwc,
                      solar_weight=[0.6, 0.4], air_pressure=SURFACE_PRESSURE * np.exp(-z_edge / SCALE_HEIGHT),
                      attrs={"regime": "test", "seed": 1})


@pytest.fixture(scope="module")
def archive(tmp_path_factory):
    scene = absorbing_cloud_scene()
    for independent in (False, True):
        scene = insert_result(scene, solve_monte_carlo(scene, 40.0, 30.0, photons=6000, seed=3, threads=1,
                                                       independent_columns=independent))
    directory = tmp_path_factory.mktemp("profiles")
    write_scene(scene, directory / "cloud.nc")
    return directory


def test_layer_sums_keep_the_column_absorption_on_any_host_grid(archive):
    # Coarse-graining conserves the column integral (issue requirement; bookkeeping, common practice).
    for edges in (None, [0.0, 150.0, 1000.0, 1200.0, 2000.0, 2600.0], np.linspace(0.0, 2000.0, 11)):
        pairs = build_pairs(archive, [400.0], quiet=True, host_layer_edges=edges)
        for kind, var in (("full_3d", "full_3d_layer_absorption"),
                          ("independent_column", "independent_column_layer_absorption")):
            column = pairs[f"{kind}_flux"].sel(target="atmosphere_absorption").values
            np.testing.assert_allclose(pairs[var].sum("host_layer").values, column, rtol=1e-12, atol=1e-15)
        np.testing.assert_allclose(pairs["layer_absorption_target"].sum("host_layer").values,
                                   pairs["target_value"].sel(target="atmosphere_absorption").values, atol=1e-14)
        # Optical depth is additive, cloud fraction a thickness-weighted mean.
        assert np.all((pairs["layer_cloud_fraction"] >= 0) & (pairs["layer_cloud_fraction"] <= 1))
    assert pairs.sizes["host_layer"] == 10


def test_heating_rate_target_matches_a_hand_computation(archive):
    # dT/dt = g / c_p * dF / dp (Liou 2002): g = 9.80665 m s-2 (CGPM 1901), c_p = 1004.64 J kg-1 K-1
    # (from memory), 86400 s per day; incident flux S0 cos(40 deg) with S0 = 1361 W m-2.
    pairs = build_pairs(archive, [800.0], quiet=True)
    row = pairs.isel(sample=0)
    k = 2
    dp = SURFACE_PRESSURE * (math.exp(-700.0 / SCALE_HEIGHT) - math.exp(-1000.0 / SCALE_HEIGHT))
    assert float(row["host_layer_pressure_thickness"][k]) == pytest.approx(dp, rel=1e-12)
    flux = float(row["layer_absorption_target"][k]) * 1361.0 * math.cos(math.radians(40.0))
    expected = 9.80665 / 1004.64 * flux / dp * 86400.0
    assert float(row["layer_heating_rate_target"][k]) == pytest.approx(expected, rel=1e-10)
    assert float(row["incident_flux"]) == pytest.approx(1361.0 * math.cos(math.radians(40.0)))


def test_overlap_shares_and_edge_pressure():
    share = overlap_matrix([0.0, 100.0, 300.0], [0.0, 50.0, 250.0, 400.0])
    np.testing.assert_allclose(share, [[0.5, 0.0], [0.5, 0.75], [0.0, 0.25]])
    np.testing.assert_allclose(share.sum(axis=0), 1.0)
    # log p linear in height is exact for an isothermal hydrostatic profile (Wallace and Hobbs 2006).
    z = np.array([0.0, 500.0, 1500.0])
    p = SURFACE_PRESSURE * np.exp(-z / SCALE_HEIGHT)
    host = np.array([0.0, 200.0, 1000.0, 2500.0])
    np.testing.assert_allclose(host_edge_pressure(z, p, host), SURFACE_PRESSURE * np.exp(-host / SCALE_HEIGHT),
                               rtol=1e-12)
    with pytest.raises(ParameterError, match=r"air_pressure must be positive and decrease with height .* at edge 2 "
                                             r"\(1500 m\) it is 95000.0 after 90000.0"):
        host_edge_pressure(z, [100000.0, 90000.0, 95000.0], host)


def test_slant_path_from_a_layer_middle():
    # Sun at 45 deg, beam toward +x, 1 km columns and layers: from the middle of the lowest
    # layer the path toward the sun stays in its own column through the upper half of that
    # layer and crosses the column up-sun (-x) in the next one; Beer-Lambert along it, the
    # optical depth divided by cos(45 deg) (geometry, common practice).
    tau = np.zeros((2, 1, 4))
    tau[0] = [[1.0, 2.0, 3.0, 4.0]]
    tau[1] = [[10.0, 20.0, 30.0, 40.0]]
    out = slant_optical_depth_above(tau, [0.0, 1000.0, 2000.0], 1000.0, 1000.0, 45.0, 0.0)
    mu0 = math.cos(math.radians(45.0))
    np.testing.assert_allclose(out[0, 0], (0.5 * tau[0, 0] + np.roll(tau[1, 0], 1)) / mu0, rtol=1e-12)
    np.testing.assert_allclose(out[1, 0], 0.5 * tau[1, 0] / mu0, rtol=1e-12)
    # A horizontally uniform sky: the plane-parallel slant path.
    uniform = np.ones((2, 3, 3))
    np.testing.assert_allclose(slant_optical_depth_above(uniform, [0.0, 400.0, 2000.0], 500.0, 500.0, 60.0, 37.0)[0],
                               1.5 / 0.5, rtol=1e-12)


@pytest.mark.parametrize("edges, words", [
    ([0.0, 500.0, 400.0, 2000.0], "host_layer_edges must increase strictly; at index 2"),
    ([10.0, 2000.0], "must start at the scene's surface, 0 m"),
    ([0.0, 1000.0], "must reach the scene's top, 2000 m"),
    ([0.0, math.nan, 2000.0], "host_layer_edges"),
    ([0.0], "at least two heights"),
])
def test_bad_host_layer_edges_are_named(edges, words):
    with pytest.raises(ParameterError, match=words.replace("(", r"\(")):
        check_host_layer_edges(edges, [0.0, 1000.0, 2000.0])


def test_results_without_cell_absorption(tmp_path):
    # An archive from elsewhere may lack per-cell absorption: the table has no per-layer
    # variables, and asking for host layers is refused naming the scene.
    scene = absorbing_cloud_scene()
    for independent in (False, True):
        run = solve_monte_carlo(scene, 40.0, 30.0, photons=2000, seed=3, threads=1, independent_columns=independent)
        run["absorption"][:] = np.nan
        scene = insert_result(scene, run)
    write_scene(scene, tmp_path / "old.nc")
    pairs = build_pairs(tmp_path, [400.0], quiet=True)
    assert "host_layer" not in pairs.sizes and "layer_absorption_target" not in pairs
    with pytest.raises(FormatError, match="scene 'old'.*per-cell absorption"):
        build_pairs(tmp_path, [400.0], quiet=True, host_layer_edges=[0.0, 1000.0, 2000.0])


def test_command_line_names_bad_host_layer_edges(archive, tmp_path, capsys):
    from surrogate3d import cli

    out = tmp_path / "pairs.nc"
    status = cli.main(["pairs", str(archive), "--out", str(out), "--host-resolution", "400", "--quiet",
                       "--host-layer-edges", "0", "800", "600", "2000"])
    err = capsys.readouterr().err.strip().splitlines()
    assert status != 0 and len(err) == 1, err
    assert err[0].endswith("--host-layer-edges must increase strictly; at index 2 it is 600.0 after 800.0"), err
    assert not out.exists()
