"""simulate --spectrum longwave / both: longwave results per scene and longwave solver kind, stored,
resumed, reproducible, listed; shortwave results untouched; scenes without temperatures refused."""

import numpy as np
import pytest

from surrogate3d.archive import (LONGWAVE_SOLVERS, completed, completed_longwave, insert_longwave_result,
                                 insert_result, list_archive, read_scene, select_longwave_result, select_result,
                                 write_dataset, write_scene)
from surrogate3d.archive import simulate as simulate_module
from surrogate3d.archive.pending import pending_keys
from surrogate3d.archive.simulate import longwave_task_seed, simulate_archive
from surrogate3d.cli import main
from surrogate3d.errors import ParameterError, ValidationError
from surrogate3d.scenes.generator import generate_scene
from surrogate3d.scenes.longwave_fields import longwave_fields
from surrogate3d.solvers.longwave_scene import solve_longwave_scene
from surrogate3d.solvers.thermal_montecarlo import solve_thermal_monte_carlo

#: 100 cm-1 intervals (29 of them): tiny, the code path is the same as with 10 cm-1.
RESOLUTION = 10000.0
RUN = {"photons": 2000, "seed": 7, "quiet": True, "longwave_resolution": RESOLUTION}


def scene(seed):
    return generate_scene("scattered_cumulus", seed, nx=8, ny=8, nz=6)


@pytest.fixture
def archive(tmp_path):
    directory = tmp_path / "archive"
    directory.mkdir()
    for seed in (1, 2):
        write_scene(scene(seed), directory / f"s_{seed:05d}.nc")
    return directory


def write_old_scene(path):
    """A scene as format 1.1 wrote it: no humidity, surface temperature or emissivity."""
    new = scene(3)
    old = new.drop_vars(["specific_humidity", "surface_temperature", "surface_longwave_emissivity"]).assign(
        air_temperature=("z", new["air_temperature"].values[:, 0, 0], {"units": "K"}))
    old.attrs["format_version"] = "1.1"
    write_dataset(old, path)


def _longwave_values(archive_dir):
    out = {}
    for path in sorted(archive_dir.glob("*.nc")):
        stored = read_scene(path)
        for solver in completed_longwave(stored):
            result = select_longwave_result(stored, solver)
            for name in result.data_vars:
                if name != "longwave_run_wall_time":
                    out[(path.name, solver, name)] = result[name].values
    return out


def _shortwave_values(archive_dir):
    out = {}
    for path in sorted(archive_dir.glob("*.nc")):
        stored = read_scene(path)
        for key in completed(stored):
            result = select_result(stored, *key)
            for name in result.data_vars:
                if name != "run_wall_time":
                    out[(path.name,) + key + (name,)] = result[name].values
    return out


def test_longwave_then_both_store_every_kind_once_and_resume(archive):
    # Forward tallies alone, whose energy balance holds to round-off in every run.
    summary = simulate_archive(archive, spectrum="longwave", longwave_boundary_rays=0, **RUN)
    assert summary == {"computed": 6, "skipped": 0, "by_other_runs": 0, "scenes": 2}
    for path in archive.glob("*.nc"):
        stored = read_scene(path)
        assert completed_longwave(stored) == list(LONGWAVE_SOLVERS) and completed(stored) == []
        result = select_longwave_result(stored, "longwave_full_3d")
        assert result["longwave_surface_downward_flux"].attrs["units"] == "W m-2"
        assert result["longwave_heating_rate"].dims == ("z", "y", "x")
        assert int(result["longwave_run_photons"]) >= 2000 and int(result["longwave_run_batches"]) >= 2
        assert int(select_longwave_result(stored, "longwave_two_stream")["longwave_run_batches"]) == 0
        assert float(result["longwave_run_spectral_resolution"]) == RESOLUTION
        two_stream = select_longwave_result(stored, "longwave_two_stream")
        assert int(two_stream["longwave_run_photons"]) == 0
        assert float(two_stream["longwave_surface_downward_flux_standard_error"].max()) == 0.0
        # Nothing comes from space: what leaves the top is what air and surface lose
        # (energy conservation, first law), to round-off for the two-stream solver and
        # for the net-exchange Monte Carlo (docs/methods/longwave.md).
        for r in (result, two_stream):
            loss = (r["longwave_atmosphere_net_absorption"] + r["longwave_surface_net_absorption"]).mean()
            np.testing.assert_allclose(float(r["longwave_toa_upward_flux"].mean()), -float(loss), rtol=1e-10)
    again = simulate_archive(archive, spectrum="longwave", longwave_boundary_rays=0, **RUN)
    assert again["computed"] == 0 and again["skipped"] == 6
    both = simulate_archive(archive, [30.0], [0.0], spectrum="both", solvers=["two_stream"], **RUN)
    assert both["computed"] == 2 and both["skipped"] == 2
    for path in archive.glob("*.nc"):
        stored = read_scene(path)
        assert completed(stored) == [("two_stream", 30.0, 0.0)] and len(completed_longwave(stored)) == 3


def test_stored_results_equal_a_direct_solver_call(archive):
    # The forward tallies alone (no boundary rays): the stored run is the thermal solver's.
    simulate_archive(archive, solvers=["full_3d", "independent_column"], spectrum="longwave",
                     longwave_boundary_rays=0, **RUN)
    path = archive / "s_00002.nc"
    stored = read_scene(path)
    fields = longwave_fields(scene(2), resolution=RESOLUTION)
    seed = longwave_task_seed(RUN["seed"], path)
    for mode in ("full_3d", "independent_column"):
        direct = solve_thermal_monte_carlo(
            fields.gas_absorption, fields.intervals, fields.cloud_extinction, fields.cloud_single_scattering_albedo,
            fields.cloud_asymmetry_parameter, fields.air_temperature, fields.surface_temperature,
            fields.surface_longwave_emissivity, fields.z_edge, fields.dx, fields.dy, mode=mode,
            air_pressure_edges=fields.air_pressure, photons=RUN["photons"], seed=seed)
        result = select_longwave_result(stored, f"longwave_{mode}")
        assert int(result["longwave_run_seed"]) == seed
        for name in ("surface_downward_flux", "surface_upward_flux", "toa_upward_flux",
                     "atmosphere_net_absorption", "surface_net_absorption"):
            np.testing.assert_array_equal(result[f"longwave_{name}"].values, direct[name])
            np.testing.assert_array_equal(result[f"longwave_{name}_standard_error"].values, direct[name + "_se"])
            assert float(result[f"longwave_{name}_domain_mean_standard_error"]) == direct[name + "_domain_mean_se"]
        np.testing.assert_array_equal(result["longwave_net_absorption"].values, direct["cell_net_absorption"])
        np.testing.assert_array_equal(result["longwave_heating_rate"].values, direct["heating_rate"])


def test_one_or_two_workers_give_identical_results(tmp_path):
    values = []
    for jobs in (1, 2):
        directory = tmp_path / f"jobs{jobs}"
        directory.mkdir()
        for seed in (1, 2):
            write_scene(scene(seed), directory / f"s_{seed:05d}.nc")
        simulate_archive(directory, [30.0], [0.0], solvers=["full_3d", "independent_column"], spectrum="both",
                         n_jobs=jobs, **RUN)
        values.append((_longwave_values(directory), _shortwave_values(directory)))
    for a, b in zip(*values):
        assert a.keys() == b.keys() and a
        for key in a:
            np.testing.assert_array_equal(a[key], b[key], err_msg=str(key))


def test_shortwave_results_are_bit_identical_with_or_without_longwave(tmp_path):
    values = []
    for spectrum in ("shortwave", "both"):
        directory = tmp_path / spectrum
        directory.mkdir()
        write_scene(scene(1), directory / "s_00001.nc")
        simulate_archive(directory, [30.0, 60.0], [0.0], solvers=["full_3d", "two_stream"], spectrum=spectrum, **RUN)
        values.append(_shortwave_values(directory))
    assert values[0].keys() == values[1].keys() and len({k[:4] for k in values[0]}) == 4
    for key in values[0]:
        np.testing.assert_array_equal(values[0][key], values[1][key], err_msg=str(key))


def test_killed_longwave_run_continues_where_it_stopped(archive, monkeypatch):
    calls = []
    real = simulate_module.run_task

    def dies_after_two(task, options):
        if len(calls) == 2:
            raise KeyboardInterrupt
        calls.append(task)
        return real(task, options)

    monkeypatch.setattr(simulate_module, "run_task", dies_after_two)
    with pytest.raises(KeyboardInterrupt):
        simulate_archive(archive, spectrum="longwave", **RUN)
    kept = sum(len(completed_longwave(read_scene(p))) + len(pending_keys(p)) for p in archive.glob("*.nc"))
    assert kept == 2
    monkeypatch.setattr(simulate_module, "run_task", real)
    summary = simulate_archive(archive, spectrum="longwave", **RUN)
    assert summary["computed"] == 4 and summary["skipped"] == 2
    assert [p.name for p in archive.glob(".*")] == [".surrogate3d.lock"]


def test_scene_without_temperatures_is_refused_for_longwave_in_one_line(archive, capsys):
    write_old_scene(archive / "s_00000.nc")
    before = {p.name: p.read_bytes() for p in archive.iterdir()}
    message = (r"^scene '.*s_00000.nc' has no specific_humidity: it was written before longwave support; "
               r"regenerate it with `surrogate3d scenes`")
    for spectrum in ("longwave", "both"):
        with pytest.raises(ValidationError, match=message):
            simulate_archive(archive, [30.0], spectrum=spectrum, **RUN)
    assert main(["simulate", str(archive), "--spectrum", "longwave", "--photons", "100", "--quiet"]) == 1
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "s_00000.nc' has no specific_humidity" in err[0]
    # Nothing written: no result, no pending directory, no temporary file.
    after = {p.name: p.read_bytes() for p in archive.iterdir() if p.name != ".surrogate3d.lock"}
    assert after == before
    summary = simulate_archive(archive, [30.0], solvers=["two_stream"], **RUN)
    assert summary["computed"] == 3


def test_bad_spectrum_options_are_refused(archive):
    with pytest.raises(ParameterError, match="spectrum"):
        simulate_archive(archive, [30.0], spectrum="thermal", **RUN)
    with pytest.raises(ParameterError, match="longwave_resolution"):
        simulate_archive(archive, spectrum="longwave", **{**RUN, "longwave_resolution": 0.0})
    with pytest.raises(ParameterError, match="solar zenith"):
        simulate_archive(archive, spectrum="both", **RUN)


def test_list_shows_longwave_results(archive, capsys):
    simulate_archive(archive, [30.0], solvers=["two_stream"], spectrum="both", **RUN)
    write_old_scene(archive / "s_00000.nc")
    table = list_archive(archive)
    assert table["results"].tolist() == ["", "two_stream@30/0, longwave_two_stream",
                                         "two_stream@30/0, longwave_two_stream"]
    assert table["longwave"].tolist() == ["no", "yes", "yes"]
    assert main(["list", str(archive)]) == 0
    lines = capsys.readouterr().out.splitlines()
    assert "longwave_two_stream" in lines[2] and "longwave_two_stream" not in lines[1]


def _same_result(a, b):
    """The same variables with the same values (a stored result also carries the scene's coordinates)."""
    assert set(a.data_vars) == set(b.data_vars) and a.attrs == b.attrs
    for name in a.data_vars:
        np.testing.assert_array_equal(a[name].values, b[name].values, err_msg=name)


def test_inserting_longwave_results_keeps_the_shortwave_ones(archive):
    simulate_archive(archive, [30.0], solvers=["two_stream"], **RUN)
    stored = read_scene(archive / "s_00001.nc")
    longwave = solve_longwave_scene(scene(1), "longwave_two_stream", resolution=RESOLUTION)
    both = insert_longwave_result(stored, longwave)
    shortwave = select_result(stored, "two_stream", 30.0, 0.0)
    assert select_result(both, "two_stream", 30.0, 0.0).identical(shortwave)
    _same_result(select_longwave_result(both, "longwave_two_stream"), longwave)
    # Inserting a shortwave result later keeps the longwave one, also through a file.
    again = insert_result(both, shortwave)
    _same_result(select_longwave_result(again, "longwave_two_stream"), longwave)
    write_scene(again, archive / "s_00001.nc")
    _same_result(select_longwave_result(read_scene(archive / "s_00001.nc"), "longwave_two_stream"), longwave)


def test_boundary_rays_give_the_surface_fields_and_top_flux_from_the_backward_estimate():
    # With boundary rays the surface downward and top upward fluxes come from the backward
    # estimate; at a grey Lambertian surface up = eps pi B(T_s) + (1 - eps) down and net =
    # down - up follow exactly (Kirchhoff's law; common practice); the atmosphere keeps the
    # forward estimate.  Both estimates agree within their standard errors.
    from surrogate3d.scenes.planck import planck_band_radiance
    from surrogate3d.solvers.thermal_backward import backward_longwave_fluxes

    s = generate_scene("scattered_cumulus", 4, nx=10, ny=10, nz=6)
    forward = solve_longwave_scene(s, "longwave_full_3d", photons=400000, seed=2, resolution=RESOLUTION)
    both = solve_longwave_scene(s, "longwave_full_3d", photons=400000, seed=2, resolution=RESOLUTION,
                                boundary_rays=64)
    assert int(both["longwave_run_boundary_rays"]) == 64 and int(forward["longwave_run_boundary_rays"]) == 0
    f = longwave_fields(s, resolution=RESOLUTION)
    back = backward_longwave_fluxes(f.gas_absorption, f.intervals, f.cloud_extinction, f.cloud_single_scattering_albedo,
                                    f.cloud_asymmetry_parameter, f.air_temperature, f.surface_temperature,
                                    f.surface_longwave_emissivity, f.z_edge, f.dx, f.dy, rays_per_column=64, seed=2)
    np.testing.assert_array_equal(both["longwave_surface_downward_flux"].values, back["surface_downward_flux"])
    np.testing.assert_array_equal(both["longwave_toa_upward_flux"].values, back["toa_upward_flux"])
    eps = np.broadcast_to(f.surface_longwave_emissivity, (10, 10))
    emitted = eps * np.pi * planck_band_radiance(np.asarray(f.surface_temperature)[..., None], f.intervals.wavenumber_low,
                                                 f.intervals.wavenumber_high).sum(axis=-1)
    down = both["longwave_surface_downward_flux"].values
    np.testing.assert_allclose(both["longwave_surface_upward_flux"].values, emitted + (1.0 - eps) * down, rtol=1e-12)
    np.testing.assert_allclose(both["longwave_surface_net_absorption"].values,
                               down - both["longwave_surface_upward_flux"].values, rtol=1e-12, atol=1e-9)
    np.testing.assert_array_equal(both["longwave_atmosphere_net_absorption"].values,
                                  forward["longwave_atmosphere_net_absorption"].values)
    # The energy balance of the domain (what leaves the top is what air and surface lose)
    # now holds in expectation only: backward boundary fluxes, forward atmosphere.
    names = ("longwave_toa_upward_flux", "longwave_atmosphere_net_absorption", "longwave_surface_net_absorption")
    imbalance = sum(float(both[n].mean()) for n in names)
    spread = np.sqrt(sum(float(both[n + "_domain_mean_standard_error"]) ** 2 for n in names))
    assert abs(imbalance) < 4.0 * spread
    for name in ("longwave_surface_downward_flux", "longwave_toa_upward_flux"):
        se_f, se_b = (r[name + "_standard_error"].values for r in (forward, both))
        if name == "longwave_toa_upward_flux":   # few photons of the forward run leave through the top
            assert np.median(se_b) < 0.2 * np.median(se_f)
        z = (forward[name].values - both[name].values) / np.hypot(se_f, se_b)
        assert np.sqrt(np.mean(z**2)) < 1.6, name
    with pytest.raises(ParameterError, match="boundary_rays"):
        solve_longwave_scene(s, "longwave_full_3d", photons=1000, resolution=RESOLUTION, boundary_rays=-1)


def test_simulate_passes_the_boundary_rays_to_the_monte_carlo_runs(archive):
    assert main(["simulate", str(archive), "--spectrum", "longwave", "--photons", "2000", "--seed", "7",
                 "--longwave-resolution", "100", "--longwave-boundary-rays", "8", "--quiet"]) == 0
    for path in sorted(archive.glob("*.nc")):
        s = read_scene(path)
        for solver, rays in (("longwave_full_3d", 8), ("longwave_independent_column", 8), ("longwave_two_stream", 0)):
            assert int(select_longwave_result(s, solver)["longwave_run_boundary_rays"]) == rays
    with pytest.raises(ParameterError, match="longwave_boundary_rays"):
        simulate_archive(archive, spectrum="longwave", longwave_boundary_rays=-2, **RUN)
