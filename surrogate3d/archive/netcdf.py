"""NetCDF reading and writing of scene files (the benchmark archive format).

This is the only module that knows the layout of scene files (reading and writing any
NetCDF file is :mod:`surrogate3d.core.netcdf`).  One file per scene holds the scene and
every radiative-transfer result computed for it; see ``docs/archive-format.md``.  Writes
are atomic: a temporary file in the same directory is renamed onto the target only once
complete.
"""

from pathlib import Path

import xarray as xr

from ..core.data_model import SCENE_FORMAT_VERSION as FORMAT_VERSION
from ..core.netcdf import check_format_version, open_dataset, write_dataset
from ..errors import FormatError
from ..scenes.model import annotate
from ..scenes.validation import validate_scene
from .longwave_results import LONGWAVE_FLAG
from .results import strip_results

SCENE_SUFFIX = ".nc"


def _scene_only(ds):
    return strip_results(ds)


def write_scene(scene, path, validate=True):
    """Write a scene (with any results it holds) to ``path`` atomically.

    Parameters
    ----------
    scene : xarray.Dataset
        A scene (see :func:`surrogate3d.scenes.make_scene`).
    path : str or Path
        Target file; its directory must exist and be writable.
    validate : bool
        Validate before writing, so that no invalid scene reaches the archive.

    Returns
    -------
    Path
    """
    if validate:
        validate_scene(scene, label=str(path))
    scene = scene.copy()
    scene.attrs["format_version"] = FORMAT_VERSION
    return write_dataset(scene, path)


def read_scene(path, validate=True, results=True):
    """Read a scene file fully into memory.

    Parameters
    ----------
    path : str or Path
    validate : bool
        Run the scene validator (default).
    results : bool
        Also read the stored results (default); without them reading is faster.

    Returns
    -------
    xarray.Dataset

    Raises
    ------
    surrogate3d.errors.FormatError
        The file is missing, unreadable, truncated or of another format version.
    surrogate3d.errors.ValidationError
        The scene breaks the data model.
    """
    ds = open_dataset(path, what="scene file", keep=None if results else _scene_only)
    check_format_version(ds, path, FORMAT_VERSION, what="scene file")
    # NetCDF stores band names as variable-length strings; keep them as Python str.
    if "band" in ds.coords:
        ds = ds.assign_coords(band=[str(b) for b in ds["band"].values])
    annotate(ds)
    if validate:
        validate_scene(ds, label=str(path))
    return ds


def read_result_flags(path):
    """Only the stored-result flags of a scene file (``result_complete`` and
    ``longwave_result_complete`` with their coordinates).

    Enough for :func:`surrogate3d.archive.results.completed`, ``has_result`` and their
    longwave counterparts without reading the result fields; an empty Dataset when the
    file holds no results.
    """
    def flags(ds):
        names = [n for n in ("result_complete", LONGWAVE_FLAG) if n in ds]
        return ds[names] if names else xr.Dataset()

    return open_dataset(path, what="scene file", keep=flags)


def scene_files(archive_dir):
    """Sorted scene files of an archive directory."""
    archive_dir = Path(archive_dir)
    if not archive_dir.is_dir():
        raise FormatError(f"archive directory {str(archive_dir)!r} does not exist")
    return sorted(p for p in archive_dir.glob(f"*{SCENE_SUFFIX}") if not p.name.startswith("."))
