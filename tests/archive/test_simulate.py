"""The archive builder: every scene x sun x solver, resumable, the same numbers for any number of workers."""

import os
from pathlib import Path
import subprocess
import sys

import numpy as np
import pytest

from surrogate3d.archive import completed, read_scene, select_result, write_scene
from surrogate3d.archive.pending import pending_keys
from surrogate3d.cli import main
from surrogate3d.errors import ParameterError, Surrogate3DError
from surrogate3d.scenes import generate_scene, make_scene
from surrogate3d.archive import simulate as simulate_module
from surrogate3d.archive.simulate import simulate_archive


def small_scene(seed):
    rng = np.random.default_rng(seed)
    ext = np.where(rng.random((1, 5, 6, 6)) < 0.3, 0.01, 1e-5)
    return make_scene(ext, 0.999, 0.85, np.linspace(0, 1000, 6), 100.0, 100.0, surface_albedo=0.2,
                      attrs={"regime": "test", "seed": seed})


@pytest.fixture
def archive(tmp_path):
    for seed in (1, 2):
        write_scene(small_scene(seed), tmp_path / f"test_{seed:05d}.nc")
    return tmp_path


def _stored(archive_dir):
    return {p.name: read_scene(p) for p in sorted(archive_dir.glob("*.nc"))}


def test_runs_every_scene_sun_and_solver(archive):
    summary = simulate_archive(archive, [0.0, 60.0], [0.0], photons=2000, seed=3, quiet=True)
    assert summary == {"computed": 12, "skipped": 0, "by_other_runs": 0, "scenes": 2}
    for scene in _stored(archive).values():
        assert len(completed(scene)) == 6
        result = select_result(scene, "full_3d", 60.0, 0.0)
        assert int(result.run_photons) >= 2000 and int(result.run_seed) > 0
        assert float(result.run_wall_time) > 0 and str(result.run_package_version.values)
        assert int(select_result(scene, "two_stream", 0.0, 0.0).run_photons) == 0
    again = simulate_archive(archive, [0.0, 60.0], [0.0], photons=2000, seed=3, quiet=True)
    assert again["computed"] == 0 and again["skipped"] == 12


def test_batches_option_sets_the_batches_every_stored_run_records(archive):
    assert main(["simulate", str(archive), "--zenith", "30", "--photons", "2000", "--batches", "8",
                 "--solvers", "full_3d", "two_stream", "--quiet"]) == 0
    scene = read_scene(archive / "test_00001.nc")
    assert int(select_result(scene, "full_3d", 30.0, 0.0).run_batches) == 8
    assert int(select_result(scene, "two_stream", 30.0, 0.0).run_batches) == 0


def test_killed_run_continues_where_it_stopped(archive, monkeypatch):
    calls = []
    real = simulate_module.run_task

    def dies_after_three(task, options):
        if len(calls) == 3:
            raise KeyboardInterrupt
        calls.append(task)
        return real(task, options)

    monkeypatch.setattr(simulate_module, "run_task", dies_after_three)
    with pytest.raises(KeyboardInterrupt):
        simulate_archive(archive, [30.0], [0.0, 90.0], photons=2000, seed=4, quiet=True)
    kept = sum(len(completed(s)) for s in _stored(archive).values())
    kept += sum(len(pending_keys(p)) for p in archive.glob("*.nc"))
    assert kept == 3
    monkeypatch.setattr(simulate_module, "run_task", real)
    summary = simulate_archive(archive, [30.0], [0.0, 90.0], photons=2000, seed=4, quiet=True)
    assert summary["computed"] == 12 - 3 and summary["skipped"] == 3
    assert sum(len(completed(s)) for s in _stored(archive).values()) == 12
    # No temporary or pending file left behind; only the archive's lock file.
    assert [p.name for p in archive.glob(".*")] == [".surrogate3d.lock"]


def _fluxes(archive_dir):
    out = {}
    for name, scene in _stored(archive_dir).items():
        for solver, zen, az in completed(scene):
            r = select_result(scene, solver, zen, az)
            out[(name, solver, zen, az)] = r.toa_upward_flux.values
    return out


def test_one_or_two_workers_give_identical_results(tmp_path):
    a, b = tmp_path / "a", tmp_path / "b"
    for d in (a, b):
        d.mkdir()
        for seed in (1, 2):
            write_scene(small_scene(seed), d / f"test_{seed:05d}.nc")
    simulate_archive(a, [20.0], [45.0], solvers=["full_3d", "independent_column"], photons=3000, seed=5,
                     n_jobs=1, quiet=True)
    simulate_archive(b, [20.0], [45.0], solvers=["full_3d", "independent_column"], photons=3000, seed=5,
                     n_jobs=2, quiet=True)
    fa, fb = _fluxes(a), _fluxes(b)
    assert fa.keys() == fb.keys() and len(fa) == 4
    for key in fa:
        np.testing.assert_array_equal(fa[key], fb[key], err_msg=str(key))


def test_dask_cluster_on_loopback_gives_the_same_numbers(tmp_path):
    distributed = pytest.importorskip("distributed")
    a, b = tmp_path / "a", tmp_path / "b"
    for d in (a, b):
        d.mkdir()
        write_scene(small_scene(7), d / "test_00007.nc")
    simulate_archive(a, [40.0], [0.0], solvers=["full_3d", "independent_column"], photons=2000, seed=6, quiet=True)
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                                  dashboard_address=None) as cluster:
        simulate_archive(b, [40.0], [0.0], solvers=["full_3d", "independent_column"], photons=2000, seed=6,
                         scheduler=cluster.scheduler_address, quiet=True)
    fa, fb = _fluxes(a), _fluxes(b)
    assert fa.keys() == fb.keys() and len(fa) == 2
    for key in fa:
        np.testing.assert_array_equal(fa[key], fb[key], err_msg=str(key))


def test_bad_input_is_refused_before_any_work(archive, tmp_path):
    before = {p.name: p.read_bytes() for p in archive.glob("*.nc")}
    with pytest.raises(ParameterError, match="photons"):
        simulate_archive(archive, [30.0], photons=0, quiet=True)
    with pytest.raises(ParameterError, match="solar_zenith_angle"):
        simulate_archive(archive, [30.0, 95.0], photons=100, quiet=True)
    with pytest.raises(Surrogate3DError, match="does not exist"):
        simulate_archive(tmp_path / "missing", [30.0], photons=100, quiet=True)
    bad = small_scene(3)
    bad["extinction"].values[0, 0, 0, 0] = -1.0
    bad.to_netcdf(archive / "test_00003.nc", engine="netcdf4")
    with pytest.raises(Surrogate3DError, match="extinction"):
        simulate_archive(archive, [30.0], photons=100, quiet=True)
    assert {p.name: p.read_bytes() for p in archive.glob("test_0000[12].nc")} == before


@pytest.mark.skipif(os.geteuid() == 0, reason="root can write into read-only directories")
def test_read_only_archive_is_refused(archive):
    os.chmod(archive, 0o555)
    try:
        with pytest.raises(Surrogate3DError, match="not writable"):
            simulate_archive(archive, [30.0], photons=100, quiet=True)
    finally:
        os.chmod(archive, 0o755)


def test_command_line_prints_one_line_errors(archive, capsys):
    assert main(["simulate", str(archive), "--zenith", "90", "--photons", "100", "--quiet"]) == 1
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "--zenith must be in [0, 90)" in err[0]
    assert main(["simulate", str(archive), "--photons", "-3", "--quiet"]) == 1
    assert "photons" in capsys.readouterr().err
    assert main(["simulate", str(archive), "--zenith", "30", "--photons", "1000", "--solvers", "two_stream",
                 "--quiet"]) == 0
    assert "2 runs computed" in capsys.readouterr().out


def test_console_script_exit_status(archive):
    proc = subprocess.run([sys.executable, "-m", "surrogate3d", "simulate", str(archive / "nope")],
                          capture_output=True, text=True)
    assert proc.returncode == 1
    assert proc.stderr.count("\n") == 1 and "does not exist" in proc.stderr


def test_jittered_zeniths_cover_the_angles_between_the_given_ones_and_resume(tmp_path):
    from surrogate3d.archive.simulate import jittered_zenith, plan_tasks

    for k in range(6):
        write_scene(generate_scene("scattered_cumulus", k, nx=6, ny=6, nz=4), tmp_path / f"s{k}.nc")
    todo, _ = plan_tasks(tmp_path, [10.0, 80.0], "random", ["two_stream"], seed=4, zenith_jitter=15.0)
    zeniths = {(Path(t.path).name, round(t.solar_zenith_angle)): t.solar_zenith_angle for t in todo}
    # Every scene has its own angle near each given one, within the jitter and above the horizon,
    # the same when planned again; the azimuth is drawn for the jittered angle.
    assert len(todo) == 12 and len(set(zeniths.values())) == 12
    assert all(0.0 <= z <= 25.0 or 65.0 <= z <= 89.0 for z in zeniths.values())
    assert jittered_zenith(4, "s0.nc", 10.0, 15.0) == next(t.solar_zenith_angle for t in todo
                                                          if t.path.endswith("s0.nc") and t.solar_zenith_angle < 45)
    assert jittered_zenith(4, "s0.nc", 80.0, 45.0) <= 89.0 and jittered_zenith(4, "s0.nc", 1.0, 45.0) >= 0.0
    again, _ = plan_tasks(tmp_path, [10.0, 80.0], "random", ["two_stream"], seed=4, zenith_jitter=15.0)
    assert [(t.solar_zenith_angle, t.solar_beam_azimuth) for t in again] == \
        [(t.solar_zenith_angle, t.solar_beam_azimuth) for t in todo]
    # Stored results at the jittered angles are found again: a second run computes nothing.
    assert simulate_archive(tmp_path, [10.0, 80.0], "random", solvers=["two_stream"], seed=4, zenith_jitter=15.0,
                            quiet=True)["computed"] == 12
    assert simulate_archive(tmp_path, [10.0, 80.0], "random", solvers=["two_stream"], seed=4, zenith_jitter=15.0,
                            quiet=True)["skipped"] == 12
    with pytest.raises(ParameterError, match="zenith_jitter"):
        simulate_archive(tmp_path, [10.0], solvers=["two_stream"], zenith_jitter=50.0, quiet=True)


def test_random_azimuths_are_drawn_per_scene_and_zenith_and_stable(tmp_path):
    from surrogate3d.archive.simulate import drawn_azimuth, plan_tasks

    scenes = [generate_scene("scattered_cumulus", s, nx=6, ny=6, nz=4) for s in (1, 2)]
    for k, scene in enumerate(scenes):
        write_scene(scene, tmp_path / f"s{k}.nc")
    todo, _ = plan_tasks(tmp_path, [20.0, 50.0], "random", ["full_3d"], seed=4)
    azimuths = {(Path(t.path).name, t.solar_zenith_angle): t.solar_beam_azimuth for t in todo}
    # One azimuth per scene and zenith, all different, in [0, 360), the same when planned again.
    assert len(azimuths) == 4 and len(set(azimuths.values())) == 4
    assert all(0.0 <= a < 360.0 for a in azimuths.values())
    again, _ = plan_tasks(tmp_path, [20.0, 50.0], "random", ["full_3d"], seed=4)
    assert [t.solar_beam_azimuth for t in again] == [t.solar_beam_azimuth for t in todo]
    assert drawn_azimuth(4, "s0.nc", 20.0) == azimuths[("s0.nc", 20.0)]
    with pytest.raises(ParameterError, match="azimuths"):
        plan_tasks(tmp_path, [20.0], "sideways", ["full_3d"], seed=4)
