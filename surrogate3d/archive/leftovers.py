"""What killed runs leave in an archive directory, found for ``list`` and removed by ``simulate``.

A run killed while it writes leaves a temporary file (``.<scene>.nc.<random>.tmp.nc``
beside the scene file, or ``.<result>.nc.<random>.tmp.nc`` in a pending directory), an
empty pending directory, or a staging directory of ``scenes`` (``.partial-<random>``).
None of them holds a finished result: finished results are complete pending files,
which the next ``simulate`` merges.  Every writer of a scene's temporary files holds the
scene's lock (:mod:`surrogate3d.archive.locking`), so a run that holds it can tell that
the temporary files it sees are left over and remove them.
"""

import contextlib
from pathlib import Path

from .._outputs import remove_stale_staging, stale_staging
from .netcdf import SCENE_SUFFIX

_TEMPORARY = ".tmp" + SCENE_SUFFIX
_PENDING = ".pending"


def _scene_of_temporary(name):
    # ".<scene>.nc.<random>.tmp.nc" -> "<scene>.nc" (the random part has no dot)
    return name[1:-len(_TEMPORARY)].rsplit(".", 1)[0]


def _scene_of_pending_dir(name):
    return name[1:-len(_PENDING)] + SCENE_SUFFIX


def temporary_files(archive_dir):
    """``{scene file name: [temporary files]}`` of an archive directory (also of missing scene files)."""
    archive_dir = Path(archive_dir)
    found = {}
    for entry in archive_dir.iterdir():
        name = entry.name
        if name.startswith(".") and name.endswith(_TEMPORARY) and entry.is_file():
            found.setdefault(_scene_of_temporary(name), []).append(entry)
        elif name.startswith(".") and name.endswith(_PENDING) and entry.is_dir():
            temporaries = [p for p in entry.iterdir() if p.name.startswith(".")]
            if temporaries:
                found.setdefault(_scene_of_pending_dir(name), []).extend(temporaries)
    return {scene: sorted(paths) for scene, paths in sorted(found.items())}


def empty_pending_dirs(archive_dir):
    """Pending directories that hold nothing."""
    return sorted(p for p in Path(archive_dir).glob(f".*{_PENDING}") if p.is_dir() and not any(p.iterdir()))


def orphaned_pending_dirs(archive_dir):
    """Pending directories holding results of a scene file that is no longer there."""
    archive_dir = Path(archive_dir)
    return sorted(p for p in archive_dir.glob(f".*{_PENDING}")
                  if p.is_dir() and any(p.iterdir()) and not (archive_dir / _scene_of_pending_dir(p.name)).exists())


def find_leftovers(archive_dir):
    """Everything killed runs left in ``archive_dir``, as sorted paths (nothing of a live run's staging)."""
    paths = [p for files in temporary_files(archive_dir).values() for p in files]
    paths += empty_pending_dirs(archive_dir) + stale_staging(archive_dir)
    return sorted(paths)


def remove_leftovers(archive_dir, lock):
    """Remove the temporary files, empty pending directories and stale staging of killed runs.

    Parameters
    ----------
    archive_dir : str or Path
    lock : surrogate3d.archive.locking.ArchiveLock
        The archive's locks; each scene's leftovers are removed under the scene's lock.

    Returns
    -------
    int
        Entries removed.
    """
    archive_dir = Path(archive_dir)
    removed = remove_stale_staging(archive_dir)
    for scene, paths in temporary_files(archive_dir).items():
        with lock.scene(archive_dir / scene):
            for path in paths:
                with contextlib.suppress(FileNotFoundError):
                    path.unlink()
                    removed += 1
    for directory in empty_pending_dirs(archive_dir):
        with lock.scene(archive_dir / _scene_of_pending_dir(directory.name)):
            with contextlib.suppress(OSError):  # a run may have written into it meanwhile
                directory.rmdir()
                removed += 1
    return removed
