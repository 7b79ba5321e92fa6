"""Kill and concurrent-start trials of ``simulate`` on a small archive (target: 0 lost results, 0 stray files).

    .venv/bin/python benchmarks/bench_reliability.py [--kills 20] [--concurrent 5] [--seed 0] [--json FILE]

Kill trials: runs of ``simulate --jobs 2`` fill one archive, each stopped after a random
time by SIGKILL or SIGTERM to the main process, or SIGKILL to its whole process group
(a full archive starts over empty).  Before every run the finished results (stored and
pending) are listed; a result listed once and missing later is *lost*.  Workers of a
killed main process still alive 10 s later are *orphaned*.  After the trials one run
finishes the archive; hidden entries other than the lock file are then *stray*.

Concurrent trials: two ``simulate`` processes on a fresh copy of the archive, started
0 to 2 s apart.  Both must exit 0, every result must be stored, no stray entry left,
and every task computed once between them.
"""

import argparse
import json
import os
import random
import re
import shutil
import signal
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from surrogate3d._atomic import write_text_atomic
from surrogate3d.archive import completed, write_scene
from surrogate3d.archive.leftovers import find_leftovers
from surrogate3d.archive.locking import LOCK_FILE
from surrogate3d.archive.netcdf import read_result_flags, scene_files
from surrogate3d.archive.pending import pending_keys
from surrogate3d.scenes.generator import generate_scene

REPO = Path(__file__).resolve().parents[1]
ENV = {**os.environ, "PYTHONPATH": os.pathsep.join([str(REPO), os.environ.get("PYTHONPATH", "")])}
ZENITHS = ["0", "40", "70"]
SOLVERS = 3


def simulate(archive, photons, *extra):
    return subprocess.Popen([sys.executable, "-m", "surrogate3d", "simulate", str(archive), "--zenith", *ZENITHS,
                             "--photons", str(photons), "--jobs", "2", "--quiet", *extra], env=ENV,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, start_new_session=True)


def finished(archive):
    """Every finished result of the archive: stored, or pending a merge."""
    out = set()
    for path in scene_files(archive):
        out |= {(path.name, s, round(z, 6), round(a, 6)) for s, z, a in completed(read_result_flags(path))}
        out |= {(path.name, s, round(z, 6), round(a, 6)) for s, z, a in pending_keys(path)}
    return out


def stray(archive):
    """Hidden entries but the lock file: none once every result is merged and nothing half-written is left."""
    return sorted(p.name for p in Path(archive).glob(".*") if p.name != LOCK_FILE)


def workers_of(pid):
    found = []
    for stat in Path("/proc").glob("[0-9]*/stat"):
        try:
            ppid = int(stat.read_text().rsplit(")", 1)[1].split()[1])
            cmdline = (stat.parent / "cmdline").read_bytes()
        except (OSError, ValueError, IndexError):
            continue
        if ppid == pid and b"surrogate3d._workers" in cmdline:
            found.append(int(stat.parent.name))
    return found


def alive(pid):
    try:
        return Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()[0] != "Z"
    except OSError:
        return False


def kill_trials(template, work, n, photons, rng):
    archive = work / "killed"
    shutil.copytree(template, archive)
    total = len(scene_files(archive)) * len(ZENITHS) * SOLVERS
    lost = orphaned = restarts = 0
    seen = set()
    for trial in range(n):
        now = finished(archive)
        lost += len(seen - now)
        if len(now) == total:  # full: start over empty
            shutil.rmtree(archive)
            shutil.copytree(template, archive)
            restarts += 1
            now = set()
        seen = now
        run = simulate(archive, photons)
        how = rng.choice(["SIGKILL main", "SIGTERM main", "SIGKILL group"])
        time.sleep(rng.uniform(1.0, 10.0))
        workers = workers_of(run.pid)
        if run.poll() is None:
            if how == "SIGKILL group":
                os.killpg(run.pid, signal.SIGKILL)
            else:
                os.kill(run.pid, signal.SIGKILL if how == "SIGKILL main" else signal.SIGTERM)
        run.communicate()
        deadline = time.monotonic() + 10.0
        while any(alive(p) for p in workers) and time.monotonic() < deadline:
            time.sleep(0.1)
        orphaned += sum(alive(p) for p in workers)
        for p in workers:  # never leave one running, whatever the count says
            if alive(p):
                os.kill(p, signal.SIGKILL)
        print(f"  kill {trial + 1:2d}: {how:13s} after {len(finished(archive)):2d}/{total} results, "
              f"exit {run.returncode}, {len(find_leftovers(archive))} temporary entries left", flush=True)
    lost += len(seen - finished(archive))
    seen = finished(archive)
    run = simulate(archive, photons)
    out, err = run.communicate()
    final = finished(archive)
    lost += len(seen - final)
    missing = total - len(final)
    return {"kill_trials": n, "restarts_from_empty": restarts, "lost_results": lost,
            "missing_after_final_run": missing, "final_run_exit_status": run.returncode,
            "stray_files": len(stray(archive)), "orphaned_workers": orphaned}


def concurrent_trials(template, work, n, photons, rng):
    total = len(scene_files(template)) * len(ZENITHS) * SOLVERS
    failed = lost = strays = duplicated = 0
    for trial in range(n):
        archive = work / f"concurrent{trial}"
        shutil.copytree(template, archive)
        offset = 0.0 if trial == 0 else rng.uniform(0.0, 2.0)
        first = simulate(archive, photons)
        time.sleep(offset)
        second = simulate(archive, photons)
        outputs = [first.communicate(), second.communicate()]
        codes = [first.returncode, second.returncode]
        failed += sum(code != 0 for code in codes)
        computed = sum(int(m.group(1)) for out, _ in outputs for m in [re.search(r"(\d+) runs computed", out)] if m)
        present = len(finished(archive))
        lost += total - present
        duplicated += max(0, computed - total)
        strays += len(stray(archive))
        print(f"  start {trial + 1}: second {offset:.1f} s later, exit {codes}, {present}/{total} results, "
              f"{computed} runs computed, {len(stray(archive))} stray", flush=True)
    return {"concurrent_trials": n, "concurrent_failed_runs": failed, "concurrent_lost_results": lost,
            "concurrent_stray_files": strays, "concurrent_duplicate_runs": duplicated}


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--kills", type=int, default=20)
    parser.add_argument("--concurrent", type=int, default=5)
    parser.add_argument("--scenes", type=int, default=3)
    parser.add_argument("--photons", type=int, default=300_000)
    parser.add_argument("--seed", type=int, default=0)
    parser.add_argument("--json", metavar="FILE")
    args = parser.parse_args(argv)
    rng = random.Random(args.seed)
    with tempfile.TemporaryDirectory() as tmp:
        work = Path(tmp)
        template = work / "template"
        template.mkdir()
        for seed in range(args.scenes):
            write_scene(generate_scene("scattered_cumulus", seed, nx=12, ny=12, nz=8), template / f"s_{seed:05d}.nc")
        print(f"reliability of simulate: {args.scenes} scenes of 12 x 12 x 8 cells, zenith {', '.join(ZENITHS)}, "
              f"3 solvers, {args.photons} photons, 2 workers")
        figures = kill_trials(template, work, args.kills, args.photons, rng)
        figures.update(concurrent_trials(template, work, args.concurrent, args.photons, rng))
    print(f"kill trials: {figures['lost_results']} lost results, {figures['stray_files']} stray files, "
          f"{figures['orphaned_workers']} orphaned workers, {figures['missing_after_final_run']} missing after the "
          f"final run (target 0 each)")
    print(f"concurrent starts: {figures['concurrent_lost_results']} lost results, "
          f"{figures['concurrent_stray_files']} stray files, {figures['concurrent_failed_runs']} failed runs, "
          f"{figures['concurrent_duplicate_runs']} tasks computed twice (target 0 each)")
    if args.json:
        write_text_atomic(args.json, json.dumps(figures, indent=2))
    bad = (figures["lost_results"] + figures["stray_files"] + figures["orphaned_workers"]
           + figures["missing_after_final_run"] + figures["concurrent_lost_results"]
           + figures["concurrent_stray_files"] + figures["concurrent_failed_runs"])
    return 1 if bad else 0


if __name__ == "__main__":
    sys.exit(main())
