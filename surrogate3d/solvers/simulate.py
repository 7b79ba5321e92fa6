"""Build a benchmark archive: run every scene x sun geometry x solver kind, resumably.

Work is split into tasks (one scene, one sun geometry, one solver kind).  Workers only
compute; the calling process stores every finished result at once (atomically) beside
its scene file and merges a scene's results into the scene file when its last task is
done (:mod:`surrogate3d.archive.pending`), so a run that is killed loses at most the
tasks in flight and the next run continues where it stopped.  Each task's seed is derived from the run seed and the task's
identity, never from the order of execution, so 1 or N workers give the same numbers.
"""

import hashlib
import os
from dataclasses import dataclass, field
from pathlib import Path

from tqdm.auto import tqdm

from ..archive.netcdf import read_result_flags, read_scene, scene_files
from ..archive.pending import merge_pending, write_pending
from ..archive.results import SOLVERS, has_result
from ..errors import ParameterError, Surrogate3DError
from .montecarlo import SOLAR_CONSTANT, _check_int, solve_monte_carlo
from .sun import check_sun


@dataclass(frozen=True)
class Task:
    """One unit of work: a solver run for one scene at one sun geometry."""

    path: str
    solver: str
    solar_zenith_angle: float
    solar_beam_azimuth: float
    seed: int


@dataclass
class RunOptions:
    """Solver options shared by every task of a run (see :func:`simulate_archive`)."""

    photons: int = 200_000
    batch_size: int = None
    rays_per_column: int = 1
    per_band: bool = False
    solar_constant: float = SOLAR_CONSTANT
    threads: int = None
    extra: dict = field(default_factory=dict)


def task_seed(seed, path, zenith, azimuth):
    """Seed of a task from the run seed and the task identity (stable across runs and machines)."""
    text = f"{seed}|{Path(path).name}|{zenith:.6f}|{azimuth:.6f}"
    return int.from_bytes(hashlib.sha256(text.encode()).digest()[:7], "little")


def drawn_azimuth(seed, path, zenith):
    """A beam azimuth [degree, 0-360, 3 decimals] drawn from the run seed, the scene file's
    name and the zenith angle: each scene and zenith gets its own direction, the same in
    every run, on any number of workers."""
    text = f"{seed}|{Path(path).name}|{zenith:.6f}|azimuth"
    fraction = int.from_bytes(hashlib.sha256(text.encode()).digest()[:7], "little") / 2.0**56
    return round(360.0 * fraction, 3) % 360.0


def run_task(task, options):
    """Compute one task; returns the run result (an xarray Dataset).  Runs in workers."""
    scene = read_scene(task.path, results=False)
    if task.solver == "two_stream":
        from .two_stream import solve_scene

        return solve_scene(scene, task.solar_zenith_angle, task.solar_beam_azimuth,
                           solar_constant=options.solar_constant, per_band=options.per_band)
    return solve_monte_carlo(
        scene, task.solar_zenith_angle, task.solar_beam_azimuth, photons=options.photons, seed=task.seed,
        independent_columns=task.solver == "independent_column", batch_size=options.batch_size,
        rays_per_column=options.rays_per_column, threads=options.threads, per_band=options.per_band,
        solar_constant=options.solar_constant, **options.extra)


def plan_tasks(archive_dir, zeniths, azimuths, solvers, seed, overwrite=False):
    """Validate the archive and the sun geometries; list the tasks still to do.

    Returns
    -------
    todo : list of Task
    done : int
        Tasks already stored (skipped).
    """
    archive_dir = Path(archive_dir)
    if not archive_dir.is_dir():
        raise Surrogate3DError(f"archive directory {str(archive_dir)!r} does not exist")
    if not os.access(archive_dir, os.W_OK):
        raise Surrogate3DError(f"archive directory {str(archive_dir)!r} is not writable")
    files = scene_files(archive_dir)
    if not files:
        raise Surrogate3DError(f"archive directory {str(archive_dir)!r} holds no scene files (*.nc)")
    unknown = [s for s in solvers if s not in SOLVERS]
    if unknown or not solvers:
        raise ParameterError(f"solvers must be a non-empty selection of {', '.join(SOLVERS)}; got {list(solvers)}")
    drawn = isinstance(azimuths, str)
    if drawn and azimuths != "random":
        raise ParameterError(f"azimuths must be a sequence of angles or 'random'; got {azimuths!r}")
    if not zeniths or not azimuths:
        raise ParameterError("at least one solar zenith angle and one beam azimuth are needed")
    suns = [check_sun(z, 0.0 if drawn else a) for z in zeniths for a in ([0.0] if drawn else azimuths)]
    todo, done = [], 0
    for path in files:
        merge_pending(path)  # results an interrupted run left behind
        read_scene(path, results=False)  # every scene is validated before any work starts
        stored = read_result_flags(path)
        for zenith, azimuth in suns:
            if drawn:
                azimuth = drawn_azimuth(seed, path, zenith)
            tseed = task_seed(seed, path, zenith, azimuth)
            for solver in solvers:
                if not overwrite and has_result(stored, solver, zenith, azimuth):
                    done += 1
                    continue
                todo.append(Task(str(path), solver, zenith, azimuth, tseed))
    return todo, done


def _local_results(todo, options, n_jobs):
    if n_jobs == 1:
        for task in todo:
            yield task, run_task(task, options)
        return
    from joblib import Parallel, delayed

    # One numba thread per worker process: the workers are the parallelism.
    options = RunOptions(**{**options.__dict__, "threads": 1})
    jobs = Parallel(n_jobs=n_jobs, return_as="generator_unordered")(
        delayed(_run_pair)(task, options) for task in todo)
    yield from jobs


def _run_pair(task, options):
    return task, run_task(task, options)


def _dask_results(todo, options, scheduler):
    from distributed import Client, as_completed

    options = RunOptions(**{**options.__dict__, "threads": 1})
    with Client(scheduler) as client:
        futures = [client.submit(_run_pair, task, options, pure=False) for task in todo]
        for future in as_completed(futures):
            yield future.result()


def simulate_archive(archive_dir, zeniths, azimuths=(0.0,), *, solvers=SOLVERS, photons=200_000, seed=0,
                     n_jobs=1, scheduler=None, overwrite=False, quiet=False, **solver_options):
    """Run the benchmark solvers on every scene of an archive and store the results.

    Parameters
    ----------
    archive_dir : str or Path
        Directory of scene files; each result is written into its scene file.
    zeniths, azimuths : sequence of float
        Solar zenith angles [degree, 0-90) and beam azimuths [degree]; every combination runs.
        ``azimuths="random"`` gives every scene and zenith one beam azimuth of its own
        (:func:`drawn_azimuth`), so that a scene set meets the sun from all sides.
    solvers : sequence of str
        Solver kinds among ``full_3d``, ``independent_column``, ``two_stream``.
    photons : int
        Photons per Monte Carlo run.
    seed : int
        Run seed; each task derives its own seed from it and its identity.
    n_jobs : int
        Local worker processes (joblib).
    scheduler : str, optional
        Address of a Dask distributed scheduler (for example ``tcp://127.0.0.1:8786``);
        the tasks then run on that cluster instead of locally.
    overwrite : bool
        Recompute results that are already stored.
    quiet : bool
        No progress bar.
    **solver_options
        ``batch_size``, ``rays_per_column``, ``per_band``, ``solar_constant``, ``threads``
        and any further keyword of :func:`surrogate3d.solvers.montecarlo.solve_monte_carlo`.

    Returns
    -------
    dict
        ``{"computed": n, "skipped": n, "scenes": n}``.
    """
    photons = _check_int("photons", photons, 1)
    seed = _check_int("seed", seed, 0, 2**63 - 1)
    n_jobs = _check_int("n_jobs", n_jobs, 1)
    known = {k: solver_options.pop(k) for k in list(solver_options) if k in RunOptions.__dataclass_fields__}
    options = RunOptions(photons=photons, extra=solver_options, **known)
    todo, done = plan_tasks(archive_dir, zeniths, azimuths, list(solvers), seed, overwrite)
    if scheduler:
        results = _dask_results(todo, options, scheduler)
    else:
        results = _local_results(todo, options, n_jobs)
    bar = tqdm(total=len(todo), desc="simulate", unit="run", disable=quiet or not todo)
    remaining = {}
    for task in todo:
        remaining[task.path] = remaining.get(task.path, 0) + 1
    computed = 0
    try:
        for task, result in results:
            write_pending(task.path, result)
            remaining[task.path] -= 1
            if remaining[task.path] == 0:
                merge_pending(task.path)
            computed += 1
            bar.set_postfix_str(f"{Path(task.path).stem} {task.solver} {task.solar_zenith_angle:g} deg")
            bar.update()
    finally:
        bar.close()
    return {"computed": computed, "skipped": done, "scenes": len({t.path for t in todo})}
