"""Reliability: no finished result is ever lost, every failure is one line, nothing half-written is left behind.

One test (or a few) per finding of issue 20, numbered as there: (1) concurrent
``simulate`` runs, (2) ``scenes`` over stored results, (3) one-line errors for bad or
failing outputs, (4) no partial outputs, (5) killed runs, (6) ``list`` validates,
(7) options and coefficient files are checked, (8) messages name what the user typed.
Scenes are tiny and photons few; processes are real where the finding is about processes.
"""

import collections
import errno
import fcntl
import os
import re
import shutil
import signal
import socket
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import xarray as xr

from surrogate3d import _outputs
from surrogate3d.archive import completed, write_dataset, write_scene
from surrogate3d.archive import locking
from surrogate3d.archive.locking import LOCK_FILE
from surrogate3d.archive.netcdf import read_result_flags
from surrogate3d.archive.pending import pending_dir, pending_keys, write_pending
from surrogate3d.cli import main
from surrogate3d.errors import ValidationError
from synthetic_pairs import make_synthetic_pairs
from surrogate3d.scenes import make_scene
from surrogate3d.archive import simulate as simulate_module
from surrogate3d.archive.simulate import Task, run_task, simulate_archive
from trained_model_fixtures import built, helpers, one_openmp_thread  # noqa: F401 (fixtures)

REPO = Path(__file__).resolve().parents[1]
ENV = {**os.environ, "PYTHONPATH": str(REPO)}
TINY_SCENES = ["--nx", "6", "--ny", "6", "--nz", "4", "--quiet"]
is_root = os.geteuid() == 0
linux_only = pytest.mark.skipif(not Path("/proc/self/stat").exists(), reason="needs Linux /proc")

TRAIN_RECIPE = """
name = "tiny"
features = "all"
[split]
held_out_scene_fraction = 0.25
seed = 3
[cross_validation]
folds = 2
[models.ridge]
kind = "ridge"
alpha = 1.0
"""


def small_scene(seed):
    rng = np.random.default_rng(seed)
    ext = np.where(rng.random((1, 4, 6, 6)) < 0.3, 0.01, 1e-5)
    return make_scene(ext, 0.999, 0.85, np.linspace(0, 1000, 5), 100.0, 100.0, surface_albedo=0.2,
                      attrs={"regime": "test", "seed": seed})


@pytest.fixture
def archive(tmp_path):
    directory = tmp_path / "archive"
    directory.mkdir()
    for seed in (1, 2):
        write_scene(small_scene(seed), directory / f"test_{seed:05d}.nc")
    return directory


def stored(archive_dir):
    """{file name: number of stored results}."""
    return {p.name: len(completed(read_result_flags(p))) for p in sorted(archive_dir.glob("*.nc"))}


def leftovers(directory):
    """Hidden entries of a directory other than the archive's lock file."""
    return sorted(p.name for p in Path(directory).glob(".*") if p.name != LOCK_FILE)


def error_line(capsys, command):
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith(f"surrogate3d {command}: error: "), err
    return err[0]


def run_cli(*argv):
    return main([str(a) for a in argv])


def _default_interrupt():
    # A test suite started in the background of a shell inherits an ignored SIGINT, and
    # Python then installs no Ctrl-C handler (POSIX: ignored signals stay ignored across
    # exec): give the command the terminal's default, as a user's shell does.
    signal.signal(signal.SIGINT, signal.SIG_DFL)


def spawn(*argv, script=None):
    """The command line in a new process (and session, so that signals reach only what the test sends)."""
    head = [sys.executable, "-c", script] if script else [sys.executable, "-m", "surrogate3d"]
    return subprocess.Popen(head + [str(a) for a in argv], env=ENV, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                            text=True, start_new_session=True, preexec_fn=_default_interrupt)


def children(pid):
    """Process ids of the worker processes of ``pid`` (from /proc)."""
    found = []
    for stat in Path("/proc").glob("[0-9]*/stat"):
        try:
            fields = stat.read_text().rsplit(")", 1)[1].split()
            cmdline = (stat.parent / "cmdline").read_bytes()
        except OSError:
            continue
        if int(fields[1]) == pid and b"surrogate3d._workers" in cmdline:
            found.append(int(stat.parent.name))
    return found


def wait_for(condition, timeout=120.0):
    """Poll ``condition`` until it holds (a deadline against hanging, not a timing check)."""
    deadline = time.monotonic() + timeout
    while not condition():
        assert time.monotonic() < deadline, "condition not reached"
        time.sleep(0.05)


def alive(pid):
    try:
        stat = Path(f"/proc/{pid}/stat").read_text()
    except OSError:
        return False
    return stat.rsplit(")", 1)[1].split()[0] != "Z"


# A helper process that holds locks of an archive until a marker file appears.
HOLD = """
import sys, time
from pathlib import Path
from surrogate3d.archive.locking import ArchiveLock
lock = ArchiveLock(sys.argv[1])
lock.hold_archive(exclusive=False, what="test")
for key in sys.argv[3:]:
    lock.claim(key)
print("ready", flush=True)
while not Path(sys.argv[2]).exists():
    time.sleep(0.02)
"""


def hold(archive_dir, marker, *claims):
    process = subprocess.Popen([sys.executable, "-c", HOLD, str(archive_dir), str(marker), *claims], env=ENV,
                               stdout=subprocess.PIPE, text=True)
    assert process.stdout.readline().strip() == "ready"
    return process


# 1. Concurrent simulate runs share the work; none loses a result.

def test_1_two_simulate_processes_share_the_work(archive):
    argv = ("simulate", archive, "--zenith", "0", "30", "60", "--photons", "300", "--quiet")
    runs = [spawn(*argv), spawn(*argv)]
    outputs = [run.communicate(timeout=600) for run in runs]
    assert [run.returncode for run in runs] == [0, 0], outputs
    assert stored(archive) == {"test_00001.nc": 9, "test_00002.nc": 9}
    computed = sum(int(re.search(r"(\d+) runs computed", out).group(1)) for out, _ in outputs)
    assert computed == 18  # every task once between them
    assert leftovers(archive) == []


def test_1_a_task_claimed_by_a_run_that_dies_is_computed_by_the_other(archive, monkeypatch, tmp_path):
    key = Task(str(archive / "test_00001.nc"), "two_stream", 30.0, 0.0, 0).key
    marker = tmp_path / "release"
    holder = hold(archive, marker, key)
    real_claim = locking.ArchiveLock.claim

    def claim(self, task_key, wait=False):
        got = real_claim(self, task_key, wait=False)
        if not got and not wait:
            marker.touch()  # the other run "dies" once this run has put its task aside
        return got or (wait and real_claim(self, task_key, wait=True))

    monkeypatch.setattr(locking.ArchiveLock, "claim", claim)
    summary = simulate_archive(archive, [30.0], solvers=["two_stream"], quiet=True)
    holder.wait(timeout=60)
    assert marker.exists(), "the task was never put aside"
    assert summary["computed"] == 2 and summary["by_other_runs"] == 0
    assert stored(archive) == {"test_00001.nc": 1, "test_00002.nc": 1}


def test_1_runs_that_replace_files_refuse_an_archive_in_use(archive, tmp_path, capsys, monkeypatch):
    monkeypatch.setattr(locking, "_GRACE", 0.2)
    holder = hold(archive, tmp_path / "release")
    try:
        assert run_cli("simulate", archive, "--overwrite", "--solvers", "two_stream", "--quiet") == 1
        assert "is in use by another surrogate3d run" in error_line(capsys, "simulate")
        assert run_cli("scenes", "--out", archive, "--regime", "overcast", *TINY_SCENES) == 1
        assert "in use" in error_line(capsys, "scenes")
    finally:
        (tmp_path / "release").touch()
        holder.wait(timeout=60)


# 2. scenes never destroys stored results.

def test_2_scenes_keeps_files_with_results_unless_overwrite(tmp_path, capsys):
    out = tmp_path / "scenes"
    argv = ("scenes", "--out", out, "--regime", "overcast", "--count", "2", *TINY_SCENES)
    assert run_cli(*argv) == 0
    simulate_archive(out, [30.0], solvers=["two_stream"], quiet=True)
    task = Task(str(out / "overcast_00000.nc"), "two_stream", 50.0, 0.0, 0)
    write_pending(task.path, run_task(task, simulate_module.RunOptions()))
    before = {p.name: p.read_bytes() for p in out.glob("*.nc")}
    capsys.readouterr()
    assert run_cli(*argv) == 1
    line = error_line(capsys, "scenes")
    assert "overcast_00000.nc holds 2 results" in line and "--overwrite" in line
    assert {p.name: p.read_bytes() for p in out.glob("*.nc")} == before
    assert run_cli(*argv, "--overwrite") == 0
    err = capsys.readouterr().err
    assert "overcast_00000.nc: it held 2 results, now dropped" in err
    assert stored(out) == {"overcast_00000.nc": 0, "overcast_00001.nc": 0}
    assert not pending_dir(out / "overcast_00000.nc").exists() and leftovers(out) == []


# 3. Every failure is one line.

@pytest.fixture
def no_work(monkeypatch):
    """Make the work of every command fail loudly: output problems must be found before it."""
    def refuse(*args, **kwargs):
        raise AssertionError("the work started before the output was checked")

    monkeypatch.setattr("surrogate3d.learn.train.train_models", refuse)
    monkeypatch.setattr("surrogate3d.evaluation.report.evaluate", refuse)
    monkeypatch.setattr("surrogate3d.export.exporter.export_training_run", refuse)
    monkeypatch.setattr("surrogate3d.pairs.build.build_pairs", refuse)


@pytest.mark.parametrize("command", ["train", "evaluate", "export", "pairs", "list"])
@pytest.mark.parametrize("where", ["under a file", "a file or directory", "empty"])
def test_3_outputs_are_checked_before_any_work(built, archive, tmp_path, capsys, no_work, command, where):
    blocker = tmp_path / "file"
    blocker.write_text("x")
    file_output = command in ("pairs", "list")
    out = {"under a file": blocker / "out", "a file or directory": tmp_path if file_output else blocker,
           "empty": ""}[where]
    argv = {"train": ["train", built["pairs_file"], "--recipe", "r.toml", "--out", out],
            "evaluate": ["evaluate", built["model_dir"], built["pairs_file"], "--out", out],
            "export": ["export", built["model_dir"], "--out", out],
            "pairs": ["pairs", archive, "--out", out],
            "list": ["list", archive, "--csv", out]}[command]
    assert run_cli(*argv) == 1
    expected = {"under a file": "is a file, not a directory",
                "a file or directory": "is a directory" if file_output else "is a file",
                "empty": "is empty"}[where]
    assert expected in error_line(capsys, command)


@pytest.mark.skipif(is_root, reason="root writes into read-only directories")
def test_3_unwritable_output_directory(built, tmp_path, capsys, no_work):
    locked = tmp_path / "locked"
    locked.mkdir()
    os.chmod(locked, 0o555)
    try:
        assert run_cli("export", built["model_dir"], "--out", locked / "export") == 1
        assert "is not writable" in error_line(capsys, "export")
    finally:
        os.chmod(locked, 0o755)


def test_3_read_only_location_named_plainly(built, tmp_path, capsys, no_work, monkeypatch):
    monkeypatch.setattr(_outputs.os, "access", lambda path, mode: False)
    assert run_cli("train", built["pairs_file"], "--recipe", "r.toml", "--out", tmp_path / "models") == 1
    assert "is not writable" in error_line(capsys, "train")


def test_3_full_disk_is_one_line_and_loses_nothing(archive, capsys, monkeypatch):
    simulate_archive(archive, [30.0], solvers=["two_stream"], quiet=True)

    def full_disk(self, target, **kwargs):
        Path(target).write_bytes(b"\x89HDF partial")
        raise RuntimeError("NetCDF: HDF error")

    usage = collections.namedtuple("usage", "total used free")
    monkeypatch.setattr(xr.Dataset, "to_netcdf", full_disk)
    monkeypatch.setattr(shutil, "disk_usage", lambda path: usage(10**6, 10**6 - 4096, 4096))
    assert run_cli("simulate", archive, "--zenith", "60", "--solvers", "two_stream", "--quiet") == 1
    line = error_line(capsys, "simulate")
    assert "NetCDF: HDF error" in line and "no space left" in line
    monkeypatch.undo()
    assert leftovers(archive) == [] and stored(archive) == {"test_00001.nc": 1, "test_00002.nc": 1}
    simulate_archive(archive, [60.0], solvers=["two_stream"], quiet=True)
    assert stored(archive) == {"test_00001.nc": 2, "test_00002.nc": 2}


@pytest.mark.skipif(not is_root or shutil.which("mount") is None, reason="mounting a small file system needs root")
def test_3_full_small_file_system(tmp_path):
    small = tmp_path / "small"
    small.mkdir()
    if subprocess.run(["mount", "-t", "tmpfs", "-o", "size=256k", "tmpfs", str(small)]).returncode:
        pytest.skip("cannot mount a tmpfs here")
    try:
        write_scene(small_scene(1), small / "test_00001.nc")
        with open(small / "filler", "wb", buffering=0) as filler:  # leave a few KiB free
            with pytest.raises(OSError):
                while True:
                    filler.write(b"\0" * 4096)
                    filler.flush()
        os.truncate(small / "filler", max(0, (small / "filler").stat().st_size - 4096))
        # In a process of its own: the NetCDF library keeps a file it failed to close open until the process ends.
        run = spawn("simulate", small, "--zenith", "30", "--solvers", "two_stream", "--quiet")
        _, err = run.communicate(timeout=300)
        assert run.returncode == 1 and len(err.strip().splitlines()) == 1 and "no space left" in err
        assert leftovers(small) == []
    finally:
        subprocess.run(["umount", str(small)])


def test_3_immutable_scene_file(archive, capsys, monkeypatch):
    # The system refuses the rename onto the scene file (immutable): one line, results kept pending.
    real = os.replace

    def refuse(source, target):
        if str(target).endswith("test_00001.nc"):
            raise PermissionError(errno.EPERM, "Operation not permitted", str(target))
        return real(source, target)

    monkeypatch.setattr(os, "replace", refuse)
    assert run_cli("simulate", archive, "--solvers", "two_stream", "--quiet") == 1
    line = error_line(capsys, "simulate")
    assert "test_00001.nc" in line and "Operation not permitted" in line and "immutable" in line
    monkeypatch.undo()
    assert pending_keys(archive / "test_00001.nc")  # the finished result waits to be merged
    simulate_archive(archive, [30.0], solvers=["two_stream"], quiet=True)
    assert stored(archive) == {"test_00001.nc": 1, "test_00002.nc": 1} and leftovers(archive) == []


@pytest.mark.skipif(not is_root or shutil.which("chattr") is None, reason="chattr +i needs root")
def test_3_immutable_scene_file_is_refused_before_any_work(archive, capsys):
    target = archive / "test_00001.nc"
    if subprocess.run(["chattr", "+i", str(target)], capture_output=True).returncode:
        pytest.skip("the file system has no immutable attribute")
    try:
        assert run_cli("simulate", archive, "--solvers", "two_stream", "--quiet") == 1
        assert "immutable" in error_line(capsys, "simulate")
        assert stored(archive) == {"test_00001.nc": 0, "test_00002.nc": 0}
    finally:
        subprocess.run(["chattr", "-i", str(target)])


def test_3_unreachable_or_malformed_scheduler(archive, capsys):
    assert run_cli("simulate", archive, "--scheduler", "no-port-here", "--quiet") == 1
    assert "--scheduler must be an address such as tcp://HOST:8786" in error_line(capsys, "simulate")
    with socket.socket() as probe:  # a port nobody listens on
        probe.bind(("127.0.0.1", 0))
        port = probe.getsockname()[1]
    assert run_cli("simulate", archive, "--scheduler", f"tcp://127.0.0.1:{port}", "--quiet") == 1
    assert "cannot reach the Dask scheduler" in error_line(capsys, "simulate")


# 4. A failure leaves nothing behind.

def test_4_export_failing_part_way_leaves_nothing(built, tmp_path, capsys):
    out = tmp_path / "export"
    assert run_cli("export", built["model_dir"], "--out", out, "--fortran", "--pairs", tmp_path / "missing.nc") == 1
    error_line(capsys, "export")
    assert not out.exists() and leftovers(tmp_path) == []


@pytest.mark.parametrize("broken", ["nan feature", "inf target"])
def test_4_train_on_bad_values_leaves_no_directory(tmp_path, capsys, broken):
    pairs = make_synthetic_pairs(seeds_per_regime=2, seed=1)
    variable = "features" if broken == "nan feature" else "target_value"
    pairs[variable].values[::5, 0] = np.nan if broken == "nan feature" else np.inf
    path = write_dataset(pairs, tmp_path / "pairs.nc")
    (tmp_path / "recipe.toml").write_text(TRAIN_RECIPE)
    out = tmp_path / "models"
    assert run_cli("train", path, "--recipe", tmp_path / "recipe.toml", "--out", out, "--quiet") == 1
    line = error_line(capsys, "train")
    name = str(pairs["feature"].values[0]) if broken == "nan feature" else str(pairs["target"].values[0])
    assert name in line and "np.float64" not in line and "Y contains" not in line
    assert not out.exists() and leftovers(tmp_path) == []


def test_4_scenes_failing_leaves_no_directory(tmp_path, capsys):
    out = tmp_path / "new" / "scenes"
    assert run_cli("scenes", "--out", out, "--regime", "overcast", "--nx", "0", "--quiet") == 1
    assert "--nx must be an integer in [1, 4096]" in error_line(capsys, "scenes")
    assert not (tmp_path / "new").exists()


def test_4_training_again_replaces_the_whole_model_directory(built, helpers, tmp_path, capsys):
    recipe = tmp_path / "recipe.toml"
    recipe.write_text(helpers.TRAINING_RECIPE)
    models = tmp_path / "models"
    shutil.copytree(built["model_dir"], models)
    shutil.copytree(models / "ridge", models / "old_model")
    assert run_cli("train", built["pairs_file"], "--recipe", recipe, "--out", models, "--quiet") == 1
    assert "use --overwrite" in error_line(capsys, "train")
    assert run_cli("train", built["pairs_file"], "--recipe", recipe, "--out", models, "--overwrite") == 0
    assert "old_model" in capsys.readouterr().out
    assert not (models / "old_model").exists() and leftovers(models) == []
    assert run_cli("export", models, "--out", tmp_path / "export", "--quiet") == 0
    assert sorted(p.name for p in (tmp_path / "export").iterdir()) == [
        "boosted.coefficients.json", "boosted.coefficients.nc", "profile.coefficients.json", "profile.coefficients.nc",
        "ridge.coefficients.json", "ridge.coefficients.nc"]


def test_4_staging_of_killed_runs_is_removed_and_live_staging_kept(tmp_path):
    final = tmp_path / "report"
    stale = tmp_path / ".report.partial-dead"
    live = tmp_path / ".report.partial-live"
    for directory in (stale, live):
        directory.mkdir()
        (directory / "half.csv").write_text("1,")
    owner = os.open(live, os.O_RDONLY)
    fcntl.flock(owner, fcntl.LOCK_EX)  # a writer that is still running
    try:
        with _outputs.staged_directory(final) as staging:
            (staging / "metrics.csv").write_text("a,b\n")
        assert not stale.exists() and live.exists()
        assert sorted(p.name for p in final.iterdir()) == ["metrics.csv"]
    finally:
        os.close(owner)


def test_4_a_failure_inside_staging_keeps_the_old_output(tmp_path):
    final = tmp_path / "report"
    final.mkdir()
    (final / "metrics.csv").write_text("old\n")
    with pytest.raises(RuntimeError):
        with _outputs.staged_directory(final) as staging:
            (staging / "metrics.csv").write_text("new\n")
            raise RuntimeError("fails half-way")
    assert (final / "metrics.csv").read_text() == "old\n" and leftovers(final) == []


# 5. Killed runs: leftovers are found and removed, workers die with their parent.

KILLED_IN_MERGE = """
import os, signal, sys
real = os.replace
def replace(source, target):
    if str(target).endswith("test_00001.nc"):   # killed with the merged scene file written but not renamed
        os.kill(os.getpid(), signal.SIGKILL)
    return real(source, target)
os.replace = replace
from surrogate3d.cli import main
sys.exit(main(sys.argv[1:]))
"""


def test_5_kill_during_merge_leaves_a_temporary_file_the_next_run_removes(archive, capsys):
    run = spawn("simulate", archive, "--zenith", "30", "--solvers", "two_stream", "independent_column",
                "--photons", "200", "--quiet", script=KILLED_IN_MERGE)
    run.communicate(timeout=300)
    assert run.returncode == -signal.SIGKILL
    temporary = [p for p in leftovers(archive) if p.endswith(".tmp.nc")]
    assert temporary and temporary[0].startswith(".test_00001.nc.")
    finished = len(pending_keys(archive / "test_00001.nc"))
    assert finished == 2
    assert run_cli("list", archive) == 0
    assert "left by killed runs" in capsys.readouterr().out
    summary = simulate_archive(archive, [30.0], solvers=["two_stream", "independent_column"], photons=200,
                               quiet=True)
    assert summary["skipped"] == 2 and summary["computed"] == 2  # the pending ones were merged, not redone
    assert stored(archive) == {"test_00001.nc": 2, "test_00002.nc": 2} and leftovers(archive) == []


def cpu_ticks(pid):
    """User + system CPU time of a process [clock ticks] (from /proc), 0 once it is gone."""
    try:
        fields = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()
    except OSError:
        return 0
    return int(fields[11]) + int(fields[12])


def _long_run(archive):
    """A simulate run of two long tasks, returned once its two workers are computing.

    Computing, not only started: a signal that reached the parent while it was still
    starting its workers was seen to be lost under load (the run then finished normally),
    which these tests do not cover.
    """
    run = spawn("simulate", archive, "--zenith", "30", "--photons", "20000000", "--solvers", "full_3d", "--jobs", "2",
                "--quiet")
    wait_for(lambda: len(children(run.pid)) == 2 or run.poll() is not None)
    workers = children(run.pid)
    start = {pid: cpu_ticks(pid) for pid in workers}
    # Past their start-up (about 1 s of CPU importing and compiling): the tasks are running.
    wait_for(lambda: all(cpu_ticks(pid) - start[pid] > 100 for pid in workers) or run.poll() is not None)
    assert run.poll() is None, run.communicate()
    return run


@linux_only
def test_5_workers_die_with_a_killed_parent(archive):
    run = _long_run(archive)
    try:
        workers = children(run.pid)
        run.kill()
        run.communicate(timeout=60)
        wait_for(lambda: not any(alive(pid) for pid in workers))
    finally:
        if run.poll() is None:
            run.kill()


@linux_only
@pytest.mark.parametrize("how", ["SIGTERM to the process", "Ctrl-C to the process group"])
def test_5_and_8_stopped_run_prints_one_line_and_leaves_nothing(archive, how):
    run = _long_run(archive)
    try:
        workers = children(run.pid)
        if how.startswith("SIGTERM"):
            run.terminate()
        else:
            os.killpg(run.pid, signal.SIGINT)
        out, err = run.communicate(timeout=120)
    finally:
        if run.poll() is None:
            run.kill()
    word = "terminated" if how.startswith("SIGTERM") else "interrupted"
    assert err.strip().splitlines() == [f"surrogate3d simulate: {word}; finished results are kept; run it again "
                                        "to continue"]
    assert run.returncode == (143 if word == "terminated" else 130)
    wait_for(lambda: not any(alive(pid) for pid in workers))
    assert leftovers(archive) == []


# 6. list checks every file as simulate does.

def test_6_list_shows_the_first_problem_and_fails(archive, tmp_path, capsys):
    nan = small_scene(3)
    nan["extinction"].values[0, 1, 2, 3] = np.nan
    write_scene(nan, archive / "nan.nc", validate=False)
    write_scene(small_scene(4).drop_vars("asymmetry_parameter"), archive / "missing.nc", validate=False)
    future = small_scene(5)
    future.attrs["format_version"] = "2.0"
    write_dataset(future, archive / "future.nc")
    (archive / "junk.nc").write_text("not NetCDF")
    assert run_cli("list", archive, "--csv", tmp_path / "list.csv") == 1
    out, err = capsys.readouterr()
    table = pd.read_csv(tmp_path / "list.csv")
    status = dict(zip(table["file"], table["status"]))
    assert status["test_00001.nc"] == "ok" and status["test_00002.nc"] == "ok"
    assert status["nan.nc"].startswith("invalid:")
    assert "extinction must be finite; got nan (at band='band0', z=1, y=2, x=3)" in status["nan.nc"]
    assert status["missing.nc"].startswith("invalid:") and "missing variables: asymmetry_parameter" in status[
        "missing.nc"]
    assert "format_version 2.0" in status["future.nc"] and status["junk.nc"].startswith("unreadable:")
    assert len(err.strip().splitlines()) == 1 and "4 of 6 scene files cannot be used" in err


# 7. Options and coefficient files are checked.

def test_7_invalid_options_are_refused_with_nothing_left_to_compute(archive, capsys):
    simulate_archive(archive, [30.0], solvers=["two_stream"], quiet=True)
    for option, value in (("--batch-size", "0"), ("--rays-per-column", "17"), ("--threads", "0"),
                          ("--solar-constant", "-1"), ("--jobs", "0")):
        assert run_cli("simulate", archive, "--solvers", "two_stream", option, value, "--quiet") == 1
        assert f"{option} must be" in error_line(capsys, "simulate")


def test_7_azimuth_outside_a_turn_is_refused(archive, capsys):
    assert run_cli("simulate", archive, "--azimuth", "400", "--quiet") == 1
    assert "--azimuth must be in [0, 360) degrees; got 400 (the same direction as 40)" in error_line(capsys,
                                                                                                    "simulate")


def test_7_threads_apply_to_each_worker(archive, monkeypatch):
    seen = {}

    class Pool:
        def __init__(self, n, function, describe=str):
            seen.update(n=n, threads=function.keywords["options"].threads)
            raise KeyboardInterrupt  # enough: the options are what is checked

    monkeypatch.setattr(simulate_module, "WorkerPool", Pool)
    with pytest.raises(KeyboardInterrupt):
        simulate_archive(archive, [30.0], solvers=["two_stream"], n_jobs=2, threads=2, quiet=True)
    assert seen == {"n": 2, "threads": 2}


def test_7_make_scene_names_a_solar_weight_of_the_wrong_length():
    with pytest.raises(ValidationError, match=r"solar_weight has shape \(2,\); expected \(1,\)"):
        make_scene(np.full((1, 2, 2, 2), 1e-3), 0.9, 0.8, [0, 500, 1000], 100, 100, solar_weight=[0.5, 0.5])


@pytest.fixture(scope="module")
def fortran_drivers(built, tmp_path_factory):
    gfortran = shutil.which("gfortran")
    if gfortran is None:
        pytest.skip("gfortran is not installed (make test installs Debian's gfortran)")
    drivers = {}
    for name in ("ridge", "boosted"):
        work = tmp_path_factory.mktemp(f"fortran_{name}")
        sources = [f"{name}_correction.f90", f"{name}_correction_driver.f90"]
        for source in sources:
            shutil.copy(built["export_dir"] / "fortran" / source, work / source)
        subprocess.run([gfortran, "-std=f2008", "-O1", *sources, "-o", "driver"], cwd=work, check=True)
        drivers[name] = work / "driver"
    return drivers


@pytest.mark.parametrize("name, section, message", [
    ("ridge", "coef", "coef and intercept must be finite numbers"),
    ("boosted", "leaf_value", "baseline and leaf_value must be finite numbers"),
    ("boosted", "baseline", "baseline and leaf_value must be finite numbers"),
])
def test_7_fortran_refuses_nan_coefficients(built, fortran_drivers, tmp_path, name, section, message):
    fortran = built["export_dir"] / "fortran"
    lines = (fortran / f"{name}.coefficients.txt").read_text().splitlines()
    row = lines.index(section) + 1
    lines[row] = " ".join(["nan"] + lines[row].split()[1:])
    (tmp_path / "nan.txt").write_text("\n".join(lines) + "\n")
    result = subprocess.run([str(fortran_drivers[name]), str(tmp_path / "nan.txt"),
                             str(fortran / f"{name}_sample_features.txt")], capture_output=True, text=True)
    assert result.returncode != 0 and message in result.stderr
    assert "NaN" not in result.stdout and "nan" not in result.stdout.lower()


# 8. Messages name the option typed, plain values, the target or feature by name.

def test_8_messages_name_the_options(archive, capsys):
    for option, value in (("--jobs", "0"), ("--batch-size", "0"), ("--rays-per-column", "0")):
        assert run_cli("simulate", archive, option, value, "--quiet") == 1
        line = error_line(capsys, "simulate")
        assert line.split("error: ")[1].startswith(f"{option} must be")
        assert not re.search(r"n_jobs|batch_size|rays_per_column", line)
    assert run_cli("pairs", archive, "--out", archive.parent / "p.nc", "--host-resolution", "-5", "--quiet") == 1
    line = error_line(capsys, "pairs")
    assert "--host-resolution must be in (0, inf); got -5.0" in line and "host_resolutions" not in line


def test_8_messages_name_the_model_not_its_class(built, tmp_path, capsys):
    pairs = xr.load_dataset(built["pairs_file"])
    fewer = write_dataset(pairs.drop_sel(feature=[str(pairs["feature"].values[0])]), tmp_path / "fewer.nc")
    assert run_cli("evaluate", built["model_dir"], fewer, "--out", tmp_path / "report", "--quiet") == 1
    line = error_line(capsys, "evaluate")
    assert "Correction" not in line and "model" in line
    assert not (tmp_path / "report").exists()


def test_8_feature_values_are_plain_numbers(tmp_path, capsys):
    pairs = make_synthetic_pairs(seeds_per_regime=2, seed=1)
    pairs["features"].values[:, 1] = np.nan
    path = write_dataset(pairs, tmp_path / "pairs.nc")
    (tmp_path / "recipe.toml").write_text(TRAIN_RECIPE)
    assert run_cli("train", path, "--recipe", tmp_path / "recipe.toml", "--out", tmp_path / "m", "--quiet") == 1
    line = error_line(capsys, "train")
    assert f"feature {pairs['feature'].values[1]} must be finite; got nan (at sample 0, scene" in line
