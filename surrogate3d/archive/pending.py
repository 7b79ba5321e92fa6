"""Results waiting to be merged into their scene file.

Rewriting a whole scene file for every finished run would make a long archive build
spend its time on I/O.  A finished run is instead written at once, atomically, as a small
file in the hidden directory ``.<scene>.pending/`` beside its scene file; the pending
results of a scene are merged into the scene file in one rewrite (and then removed) when
its last run finishes, or by the next run after an interruption.  Nothing finished is
ever lost, and readers of the archive only ever see complete scene files.  Runs that
share an archive hold the scene's lock (:mod:`surrogate3d.archive.locking`) while they
write or merge its pending results.
"""

import contextlib
from pathlib import Path

from ..core.data_model import LONGWAVE_SOLVERS
from ..core.longwave_result import is_longwave_result
from ..core.netcdf import open_dataset, write_dataset
from .longwave_results import insert_longwave_results
from .netcdf import read_scene, write_scene
from .results import insert_results, run_key


def pending_dir(scene_path):
    """The directory holding a scene's pending results."""
    scene_path = Path(scene_path)
    return scene_path.parent / f".{scene_path.stem}.pending"


def write_pending(scene_path, result):
    """Store one finished run result beside its scene file (atomically): ``<solver>_<zenith>_<azimuth>.nc``
    for a shortwave result, ``<longwave solver>.nc`` for a longwave one."""
    if is_longwave_result(result):
        name = f"{result.attrs['solver']}.nc"
    else:
        solver, zenith, azimuth = run_key(result)
        name = f"{solver}_{zenith:.6f}_{azimuth:.6f}.nc"
    directory = pending_dir(scene_path)
    directory.mkdir(exist_ok=True)
    try:
        return write_dataset(result, directory / name)
    except BaseException:
        with contextlib.suppress(OSError):  # not empty: it holds earlier results
            directory.rmdir()
        raise


def pending_files(scene_path):
    """Sorted pending result files of a scene (complete files only: temporaries start with '.')."""
    directory = pending_dir(scene_path)
    if not directory.is_dir():
        return []
    return sorted(p for p in directory.glob("*.nc") if not p.name.startswith("."))


def pending_keys(scene_path):
    """``(solver, zenith, azimuth)`` of every pending result of a scene; zenith and azimuth
    are None for a longwave result (it has no sun geometry)."""
    keys = []
    for path in pending_files(scene_path):
        if path.stem in LONGWAVE_SOLVERS:
            keys.append((path.stem, None, None))
            continue
        solver, zenith, azimuth = path.stem.rsplit("_", 2)
        keys.append((solver, float(zenith), float(azimuth)))
    return keys


def merge_pending(scene_path):
    """Merge a scene's pending results into its file in one atomic rewrite; returns how many.

    Only the merged files are removed afterwards, and the pending directory once empty.
    """
    files = pending_files(scene_path)
    if files:
        results = [open_dataset(p, what="pending result") for p in files]
        scene = read_scene(scene_path)
        longwave = [r for r in results if is_longwave_result(r)]
        shortwave = [r for r in results if not is_longwave_result(r)]
        if shortwave:
            scene = insert_results(scene, shortwave)
        if longwave:
            scene = insert_longwave_results(scene, longwave)
        write_scene(scene, scene_path, validate=False)
        for path in files:
            path.unlink(missing_ok=True)
    with contextlib.suppress(OSError):  # missing, or holding files of another run
        pending_dir(scene_path).rmdir()
    return len(files)
