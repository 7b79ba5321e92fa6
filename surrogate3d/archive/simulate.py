"""Build a benchmark archive: run every scene x sun geometry x solver kind, resumably.

Work is split into tasks (one scene, one sun geometry, one solver kind; a longwave task
is one scene and one longwave solver kind, with no sun geometry).  Workers only
compute; the calling process stores every finished result at once (atomically) beside
its scene file and merges a scene's results into the scene file when its last task is
done (:mod:`surrogate3d.archive.pending`), so a run that is killed loses at most the
tasks in flight and the next run continues where it stopped.  Each task's seed is
derived from the run seed and the task's identity, never from the order of execution,
so 1 or N workers give the same numbers.  Longwave tasks are added with
``spectrum="longwave"`` or ``"both"``; the shortwave tasks and their seeds are the same
whatever the spectrum.

Runs started on one archive at the same time share the work
(:mod:`surrogate3d.archive.locking`): a run claims each task before computing it, puts
aside the tasks another run has claimed, and at the end waits for those and computes
any that run left undone (it was killed).  Between them the runs compute every task
once, and no finished result is lost.
"""

import hashlib
import inspect
import os
import socket
import stat
import time
from collections import Counter, deque
from dataclasses import dataclass, field
from functools import partial
from pathlib import Path

from tqdm.auto import tqdm

from .._workers import WorkerPool
from ..core.config import LONGWAVE_BOUNDARY_RAYS, SIMULATE_PHOTONS, SOLAR_CONSTANT
from ..core.data_model import LONGWAVE_SOLVERS, SOLVERS, SPECTRA
from ..core.validation import check_bool, check_integer, check_number, check_option
from ..errors import OutputError, ParameterError, Surrogate3DError
from ..solvers.montecarlo import check_monte_carlo_options, default_batch_size, solve_monte_carlo
from ..scenes.longwave_fields import check_longwave_scene
from ..scenes.longwave_optics import DEFAULT_RESOLUTION
from ..solvers.sun import check_sun
from .leftovers import remove_leftovers
from .longwave_results import has_longwave_result
from .locking import ArchiveLock
from .netcdf import read_result_flags, read_scene, scene_files
from .pending import merge_pending, pending_keys, write_pending
from .results import SUN_TOLERANCE_DEG, has_result


@dataclass(frozen=True)
class Task:
    """One unit of work: a solver run for one scene at one sun geometry (None for longwave solvers)."""

    path: str
    solver: str
    solar_zenith_angle: float
    solar_beam_azimuth: float
    seed: int

    @property
    def longwave(self):
        """True for a longwave solver kind (no sun geometry)."""
        return self.solver in LONGWAVE_SOLVERS

    @property
    def key(self):
        """The task's identity in the archive (what concurrent runs claim)."""
        if self.longwave:
            return f"{Path(self.path).name}|{self.solver}"
        return (f"{Path(self.path).name}|{self.solver}|{self.solar_zenith_angle:.6f}|"
                f"{self.solar_beam_azimuth:.6f}")

    @property
    def label(self):
        """Short description for the progress bar."""
        if self.longwave:
            return f"{Path(self.path).stem} {self.solver}"
        return f"{Path(self.path).stem} {self.solver} {self.solar_zenith_angle:g} deg"

    def __str__(self):
        if self.longwave:
            return f"{Path(self.path).name} {self.solver}"
        return (f"{Path(self.path).name} {self.solver} at solar zenith {self.solar_zenith_angle:g} deg, "
                f"beam azimuth {self.solar_beam_azimuth:g} deg")


@dataclass
class RunOptions:
    """Solver options shared by every task of a run (see :func:`simulate_archive`)."""

    photons: int = SIMULATE_PHOTONS
    batch_size: int = None
    batches: int = None
    rays_per_column: int = 1
    per_band: bool = False
    solar_constant: float = SOLAR_CONSTANT
    threads: int = None
    longwave_resolution: float = DEFAULT_RESOLUTION
    longwave_boundary_rays: int = LONGWAVE_BOUNDARY_RAYS
    extra: dict = field(default_factory=dict)


#: Keywords of solve_monte_carlo that a run passes through unchanged (``extra``).
_PASSED_THROUGH = sorted(set(inspect.signature(solve_monte_carlo).parameters)
                         - set(RunOptions.__dataclass_fields__)
                         - {"scene", "solar_zenith_angle", "solar_beam_azimuth", "seed", "independent_columns",
                            "progress"})


def check_run_options(photons, n_jobs, solver_options):
    """Validate the options of a run before any work; returns ``(RunOptions, n_jobs)``.

    Raises
    ------
    surrogate3d.errors.ParameterError
        An option is outside its range (named as the parameter of :func:`simulate_archive`)
        or unknown.
    """
    n_jobs = check_integer("n_jobs", n_jobs, 1)
    solver_options = dict(solver_options)
    known = {k: solver_options.pop(k) for k in list(solver_options) if k in RunOptions.__dataclass_fields__}
    unknown = sorted(set(solver_options) - set(_PASSED_THROUGH))
    if unknown or "extra" in known:
        raise ParameterError(f"unknown solver option(s) {unknown or ['extra']}; known: "
                             f"{sorted(set(RunOptions.__dataclass_fields__) - {'extra'}) + _PASSED_THROUGH}")
    options = RunOptions(photons=photons, extra=solver_options, **known)
    checked = check_monte_carlo_options(photons=options.photons, batch_size=options.batch_size,
                                        batches=options.batches, rays_per_column=options.rays_per_column,
                                        threads=options.threads, solar_constant=options.solar_constant)
    for name, value in checked.items():
        setattr(options, name, value)
    if options.batches is not None:
        # Shortwave and longwave runs alike: a batch count is a batch size for the photons of a run.
        options.batch_size = default_batch_size(options.photons, options.batches)
    options.per_band = check_bool("per_band", options.per_band)
    options.longwave_resolution = check_number("longwave_resolution", options.longwave_resolution, 0.0, None,
                                               low_open=True)
    options.longwave_boundary_rays = check_integer("longwave_boundary_rays", options.longwave_boundary_rays, 0)
    return options, n_jobs


def check_scheduler(address):
    """Validate the form of a Dask scheduler address (``tcp://HOST:PORT``, ``HOST:PORT``, ...); returns it.

    Raises
    ------
    surrogate3d.errors.ParameterError
    """
    from distributed.comm import parse_address, parse_host_port
    from distributed.comm.registry import backends

    try:
        scheme, location = parse_address(str(address))
        if scheme not in backends:
            raise ValueError(f"unknown protocol {scheme!r}; known: {', '.join(sorted(backends))}")
        if scheme != "inproc":
            port = parse_host_port(location)[1]
            if not 0 < int(port) < 65536:
                raise ValueError(f"port {port} is not in 1-65535")
    except (TypeError, ValueError) as exc:
        raise ParameterError(f"scheduler must be an address such as tcp://HOST:8786; got {address!r} "
                             f"({exc})") from None
    return str(address)


def task_seed(seed, path, zenith, azimuth):
    """Seed of a task from the run seed and the task identity (stable across runs and machines)."""
    text = f"{seed}|{Path(path).name}|{zenith:.6f}|{azimuth:.6f}"
    return int.from_bytes(hashlib.sha256(text.encode()).digest()[:7], "little")


def longwave_task_seed(seed, path):
    """Seed of a scene's longwave tasks from the run seed and the scene file's name (stable across
    runs and machines); the longwave solver kinds of a scene share it, as the shortwave ones
    share a sun geometry's seed."""
    text = f"{seed}|{Path(path).name}|longwave"
    return int.from_bytes(hashlib.sha256(text.encode()).digest()[:7], "little")


#: Largest solar zenith angle [degree] a jittered sun takes (the sun stays above the horizon).
JITTERED_ZENITH_MAX = 89.0


def jittered_zenith(seed, path, zenith, jitter):
    """A solar zenith angle [degree, 3 decimals] drawn uniformly from the part of [zenith - jitter,
    zenith + jitter] in [0, 89], by the run seed, the scene file's name and the nominal zenith:
    each scene meets its own sun near every nominal one, the same in every run, on any number
    of workers, so that a scene set covers the angles between the nominal ones."""
    text = f"{seed}|{Path(path).name}|{zenith:.6f}|zenith"
    fraction = int.from_bytes(hashlib.sha256(text.encode()).digest()[:7], "little") / 2.0**56
    low, high = max(zenith - jitter, 0.0), min(zenith + jitter, JITTERED_ZENITH_MAX)
    return round(low + (high - low) * fraction, 3)


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
    if task.longwave:
        from ..solvers.longwave_scene import solve_longwave_scene

        return solve_longwave_scene(scene, task.solver, photons=options.photons, seed=task.seed,
                                    resolution=options.longwave_resolution, batch_size=options.batch_size,
                                    threads=options.threads, label=task.path,
                                    boundary_rays=0 if task.solver == "longwave_two_stream"
                                    else options.longwave_boundary_rays)
    if task.solver == "two_stream":
        from ..solvers.two_stream import solve_scene

        return solve_scene(scene, task.solar_zenith_angle, task.solar_beam_azimuth,
                           solar_constant=options.solar_constant, per_band=options.per_band)
    return solve_monte_carlo(
        scene, task.solar_zenith_angle, task.solar_beam_azimuth, photons=options.photons, seed=task.seed,
        independent_columns=task.solver == "independent_column", batch_size=options.batch_size,
        rays_per_column=options.rays_per_column, threads=options.threads, per_band=options.per_band,
        solar_constant=options.solar_constant, **options.extra)


def _check_archive_dir(archive_dir):
    archive_dir = Path(archive_dir)
    if not archive_dir.is_dir():
        what = "is not a directory" if archive_dir.exists() else "does not exist"
        raise Surrogate3DError(f"archive directory {str(archive_dir)!r} {what}")
    if not os.access(archive_dir, os.W_OK | os.X_OK):
        raise OutputError(f"archive directory {str(archive_dir)!r} is not writable; results are stored in "
                          "its scene files")
    return archive_dir


def _check_replaceable(path):
    # A file whose permissions allow writing but that the system refuses is immutable,
    # append-only or on a read-only mount: its results could never be stored.
    if os.access(path, os.W_OK):
        return
    info = os.stat(path)
    if os.geteuid() == 0 or (info.st_uid == os.geteuid() and info.st_mode & stat.S_IWUSR):
        raise OutputError(f"scene file {str(path)!r} cannot be rewritten although its permissions allow it "
                          "(immutable or append-only? see lsattr; or a read-only mount): lift that "
                          "(chattr -i) or move the file out of the archive")


def plan_tasks(archive_dir, zeniths, azimuths, solvers, seed, overwrite=False, lock=None, spectrum="shortwave",
               zenith_jitter=0.0):
    """Validate the archive and the sun geometries; list the tasks still to do.

    Results an interrupted run left pending are merged first, and the temporary files of
    killed runs are removed.  With a longwave spectrum every scene must hold the longwave
    fields; the first that does not stops the planning, before any work.

    Parameters
    ----------
    spectrum : {"shortwave", "longwave", "both"}
        Which tasks: those of ``solvers`` at every sun geometry, those of their longwave
        counterparts (``longwave_<solver>``, one per scene; the sun geometries are then not
        needed), or both.
    lock : surrogate3d.archive.locking.ArchiveLock, optional
        The archive's locks, the archive lock held by the caller (default: held here, shared,
        for the planning).
    zenith_jitter : float
        Each scene's sun near every nominal zenith at :func:`jittered_zenith` [degree]; 0: the
        nominal zeniths.

    Returns
    -------
    todo : list of Task
    done : int
        Tasks already stored (skipped).
    """
    archive_dir = _check_archive_dir(archive_dir)
    files = scene_files(archive_dir)
    if not files:
        raise Surrogate3DError(f"archive directory {str(archive_dir)!r} holds no scene files (*.nc)")
    unknown = [s for s in solvers if s not in SOLVERS]
    if unknown or not solvers:
        raise ParameterError(f"solvers must be a non-empty selection of {', '.join(SOLVERS)}; got {list(solvers)}")
    spectrum = check_option("spectrum", spectrum, SPECTRA, ParameterError)
    drawn = isinstance(azimuths, str)
    suns = []
    if spectrum != "longwave":
        if drawn and azimuths != "random":
            raise ParameterError(f"azimuths must be a sequence of angles or 'random'; got {azimuths!r}")
        if not zeniths or not azimuths:
            raise ParameterError("at least one solar zenith angle and one beam azimuth are needed")
        suns = [check_sun(z, 0.0 if drawn else a) for z in zeniths for a in ([0.0] if drawn else azimuths)]
    longwave_solvers = [f"longwave_{s}" for s in solvers] if spectrum != "shortwave" else []
    if lock is None:
        with ArchiveLock(archive_dir) as own:
            own.hold_archive(exclusive=False, what="planning")
            return plan_tasks(archive_dir, zeniths, azimuths, solvers, seed, overwrite, own, spectrum, zenith_jitter)
    remove_leftovers(archive_dir, lock)
    todo, done = [], 0
    for path in files:
        with lock.scene(path):
            merge_pending(path)  # results an interrupted run left behind
        scene = read_scene(path, results=False)  # every scene is validated before any work starts
        if longwave_solvers:
            check_longwave_scene(scene, label=str(path))
        stored = read_result_flags(path)
        tasks = []
        for zenith, azimuth in suns:
            if zenith_jitter > 0.0:
                zenith = jittered_zenith(seed, path, zenith, zenith_jitter)
            if drawn:
                azimuth = drawn_azimuth(seed, path, zenith)
            tseed = task_seed(seed, path, zenith, azimuth)
            for solver in solvers:
                if not overwrite and has_result(stored, solver, zenith, azimuth):
                    done += 1
                    continue
                tasks.append(Task(str(path), solver, zenith, azimuth, tseed))
        for solver in longwave_solvers:
            if not overwrite and has_longwave_result(stored, solver):
                done += 1
                continue
            tasks.append(Task(str(path), solver, None, None, longwave_task_seed(seed, path)))
        if tasks:
            _check_replaceable(path)
        todo += tasks
    return todo, done


def _is_done(task, lock):
    """True if the task's result is stored or pending (another run computed it)."""
    if task.longwave:
        with lock.scene(task.path):
            return (any(solver == task.solver for solver, _, _ in pending_keys(task.path))
                    or has_longwave_result(read_result_flags(task.path), task.solver))
    slot = (task.solar_zenith_angle, task.solar_beam_azimuth)
    with lock.scene(task.path):
        if any(solver == task.solver and z is not None and abs(z - slot[0]) < SUN_TOLERANCE_DEG and abs(a - slot[1]) < SUN_TOLERANCE_DEG
               for solver, z, a in pending_keys(task.path)):
            return True
        return has_result(read_result_flags(task.path), task.solver, *slot)


class _WorkQueue:
    """The tasks of a run in order, each claimed before it is handed out.

    A task another run has claimed is put aside and handed out only once that run has let
    go of it without finishing it (it was killed); one it finished is counted in
    ``finished_elsewhere``.
    """

    def __init__(self, tasks, lock, is_done):
        self._fresh = deque(tasks)
        self._aside = deque()
        self._lock = lock
        self._is_done = is_done
        self.finished_elsewhere = []

    def next(self, wait):
        """The next claimed task to compute, or None (all handed out, or ``not wait`` and only others' claims left)."""
        while self._fresh:
            task = self._fresh.popleft()
            if not self._lock.claim(task.key):
                self._aside.append(task)
            elif self._take(task):
                return task
        while self._aside:
            if not self._lock.claim(self._aside[0].key, wait=wait):
                return None
            task = self._aside.popleft()
            if self._take(task):
                return task
        return None

    def _take(self, task):
        if self._is_done(task):
            self._lock.release(task.key)
            self.finished_elsewhere.append(task)
            return False
        return True


class _InProcess:
    """Computes each task in this process when its result is asked for."""

    def __init__(self, function):
        self._function = function
        self._items = deque()

    free = property(lambda self: 1 - len(self._items))
    busy = property(lambda self: len(self._items))

    def submit(self, item):
        self._items.append(item)

    def next_result(self):
        item = self._items.popleft()
        return item, self._function(item)

    def close(self, kill=False):
        self._items.clear()


def _connect(address):
    """A Dask client of the scheduler at ``address``, or a one-line error if it cannot be reached."""
    from distributed import Client
    from distributed.comm import parse_address, parse_host_port

    scheme, location = parse_address(address)
    advice = "start it (dask scheduler) or give the address it prints"
    if scheme in ("tcp", "tls", "ws", "wss"):
        # A quick look first: the client itself retries for its whole timeout before it gives up.
        host, port = parse_host_port(location)
        try:
            socket.create_connection((host, port), timeout=5).close()
        except OSError as exc:
            raise Surrogate3DError(f"cannot reach the Dask scheduler at {address!r} "
                                   f"({exc.strerror or exc}); {advice}") from None
    try:
        return Client(address, timeout="10s")
    except (OSError, TimeoutError) as exc:
        raise Surrogate3DError(f"cannot connect to the Dask scheduler at {address!r} ({exc}); {advice}") from None


class _DaskWorkers:
    """Tasks run on a Dask cluster, a few per cluster thread in flight."""

    def __init__(self, address, function):
        self._client = _connect(address)
        self._function = function
        self._window = max(2, 2 * sum(self._client.nthreads().values()))
        self._items = {}

    free = property(lambda self: self._window - len(self._items))
    busy = property(lambda self: len(self._items))

    def submit(self, item):
        self._items[self._client.submit(self._function, item, pure=False)] = item

    def next_result(self):
        # Polled: a Ctrl-C would not interrupt a blocking wait on the client's threads.
        while not (done := [future for future in self._items if future.done()]):
            time.sleep(0.05)
        return self._items.pop(done[0]), done[0].result()

    def close(self, kill=False):
        self._client.close()


def _workers(options, n_jobs, scheduler, n_tasks):
    if scheduler:
        # One compiled thread per task unless asked: the cluster's threads are the parallelism.
        options = RunOptions(**{**options.__dict__, "threads": options.threads or 1})
        return _DaskWorkers(scheduler, partial(run_task, options=options))
    if n_jobs == 1 or n_tasks == 1:
        # Looked up at call time, so that tests can replace run_task.
        return _InProcess(lambda task: run_task(task, options))
    options = RunOptions(**{**options.__dict__, "threads": options.threads or 1})
    return WorkerPool(min(n_jobs, n_tasks), partial(run_task, options=options), describe=str)


def simulate_archive(archive_dir, zeniths=None, azimuths=(0.0,), *, solvers=SOLVERS, spectrum="shortwave",
                     photons=SIMULATE_PHOTONS, seed=0, n_jobs=1, scheduler=None, overwrite=False, quiet=False,
                     zenith_jitter=0.0, **solver_options):
    """Run the benchmark solvers on every scene of an archive and store the results.

    Several runs may fill one archive at the same time: they share the work (see the
    module docstring).  Every option is checked before anything is read or computed.

    Parameters
    ----------
    archive_dir : str or Path
        Directory of scene files; each result is written into its scene file.
    zeniths, azimuths : sequence of float
        Solar zenith angles [degree, 0-90) and beam azimuths [degree]; every combination runs
        (shortwave only: not needed with ``spectrum="longwave"``).
        ``azimuths="random"`` gives every scene and zenith one beam azimuth of its own
        (:func:`drawn_azimuth`), so that a scene set meets the sun from all sides.
    zenith_jitter : float
        [degree, 0-45]: every scene's sun near each zenith at its own angle within this of it
        (:func:`jittered_zenith`), so that a scene set covers the angles between the given
        ones; 0 (default): the given zeniths.
    solvers : sequence of str
        Solver kinds among ``full_3d``, ``independent_column``, ``two_stream``; a longwave
        spectrum runs their longwave counterparts ``longwave_<solver>``.
    spectrum : {"shortwave", "longwave", "both"}
        Shortwave results (one per solver and sun geometry), longwave results (one per
        longwave solver kind and scene; every scene needs the longwave fields, else a
        one-line error names the scene and the missing variable before anything is
        computed), or both.  The shortwave results are the same whatever the spectrum.
    photons : int
        Photons per Monte Carlo run, shortwave and longwave.
    seed : int
        Run seed; each task derives its own seed from it and its identity.
    n_jobs : int
        Local worker processes; they exit when this process dies.
    scheduler : str, optional
        Address of a Dask distributed scheduler (for example ``tcp://127.0.0.1:8786``);
        the tasks then run on that cluster instead of locally.
    overwrite : bool
        Recompute results that are already stored.  Needs the archive to itself: refused
        while another run uses it.
    quiet : bool
        No progress bar.
    **solver_options
        ``batch_size`` or ``batches`` (photons per batch, or batches per run: 200 give
        standard errors precise to about 5 %), ``rays_per_column``, ``per_band``,
        ``solar_constant``, ``threads`` (per worker with ``n_jobs > 1`` or a scheduler, default 1 there),
        ``longwave_resolution`` (widest spectral interval of the longwave gas absorption
        [m-1], default 1000 = 10 cm-1), ``longwave_boundary_rays`` (rays per cell column of
        the backward estimate of the longwave surface fields and top upward flux of the
        Monte Carlo runs, :func:`surrogate3d.solvers.longwave_scene.solve_longwave_scene`;
        default :data:`LONGWAVE_BOUNDARY_RAYS`; 0: the forward tallies) and any further keyword of
        :func:`surrogate3d.solvers.montecarlo.solve_monte_carlo`.  ``batch_size``,
        ``batches`` and ``threads`` apply to the longwave Monte Carlo too; the others are shortwave only.

    Returns
    -------
    dict
        ``{"computed": n, "skipped": n, "by_other_runs": n, "scenes": n}``: runs computed,
        found stored, computed meanwhile by another run on the archive, and scenes with
        work to do.
    """
    options, n_jobs = check_run_options(photons, n_jobs, solver_options)
    seed = check_monte_carlo_options(seed=seed)["seed"]
    zenith_jitter = check_number("zenith_jitter", zenith_jitter, 0.0, 45.0)
    if scheduler:
        scheduler = check_scheduler(scheduler)
    archive_dir = _check_archive_dir(archive_dir)
    with ArchiveLock(archive_dir) as lock:
        lock.hold_archive(exclusive=overwrite, what="simulate --overwrite" if overwrite else "simulate")
        todo, done = plan_tasks(archive_dir, zeniths, azimuths, list(solvers), seed, overwrite, lock, spectrum,
                                zenith_jitter)
        counts = {"computed": 0, "skipped": done, "by_other_runs": 0, "scenes": len({t.path for t in todo})}
        if todo:
            _run(todo, _workers(options, n_jobs, scheduler, len(todo)), lock, overwrite, quiet, counts)
    return counts


def _run(todo, workers, lock, overwrite, quiet, counts):
    """Compute the claimable tasks of ``todo`` with ``workers`` and store their results."""
    queue = _WorkQueue(todo, lock, (lambda task: False) if overwrite else (lambda task: _is_done(task, lock)))
    remaining = Counter(task.path for task in todo)

    def settled(task):
        remaining[task.path] -= 1
        if remaining[task.path] == 0:
            with lock.scene(task.path):
                merge_pending(task.path)
        bar.update()

    bar = tqdm(total=len(todo), desc="simulate", unit="run", disable=True if quiet else None)
    try:
        while True:
            while workers.free:
                task = queue.next(wait=not workers.busy)
                if task is None:
                    break
                workers.submit(task)
            for task in queue.finished_elsewhere:
                counts["by_other_runs"] += 1
                settled(task)
            queue.finished_elsewhere.clear()
            if not workers.busy:
                break
            task, result = workers.next_result()
            with lock.scene(task.path):
                write_pending(task.path, result)
            lock.release(task.key)
            counts["computed"] += 1
            bar.set_postfix_str(task.label)
            settled(task)
    except BaseException:
        workers.close(kill=True)
        raise
    finally:
        bar.close()
    workers.close()
