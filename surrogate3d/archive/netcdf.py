"""NetCDF reading and writing of scene files (the benchmark archive format).

This is the only module that touches the on-disk format of scenes.  One file per
scene holds the scene and every radiative-transfer result computed for it; see
``docs/archive-format.md``.  Writes are atomic: a temporary file in the same directory
is renamed onto the target only once complete.
"""

from pathlib import Path

import numpy as np
import xarray as xr

from .._atomic import atomic_path
from ..errors import FormatError
from .results import strip_results
from ..scenes.model import FORMAT_VERSION, annotate
from ..scenes.validation import validate_scene

ENGINE = "netcdf4"
SCENE_SUFFIX = ".nc"


def _encoding(ds):
    # Scene fields (clear air, smooth clouds) compress well; Monte Carlo results are noise
    # that does not, and compressing them would only slow every rewrite.
    enc = {}
    for name, var in ds.variables.items():
        if np.issubdtype(var.dtype, np.floating) and var.ndim >= 2 and "solver" not in var.dims:
            enc[name] = {"zlib": True, "complevel": 1, "shuffle": True}
    return enc


def write_dataset(ds, path):
    """Write any Dataset to NetCDF-4 atomically (temporary file, then rename)."""
    path = Path(path)
    with atomic_path(path, suffix=".tmp.nc") as tmp:
        ds.to_netcdf(tmp, engine=ENGINE, encoding=_encoding(ds), invalid_netcdf=False)
    return path


def _scene_only(ds):
    return strip_results(ds)


def open_dataset(path, what="file", keep=None):
    """Read a whole NetCDF file into memory and close it; unreadable files raise FormatError.

    ``keep``, if given, maps the lazily opened Dataset to the part to load.
    """
    path = Path(path)
    if not path.is_file():
        raise FormatError(f"{what} {str(path)!r} does not exist")
    try:
        with xr.open_dataset(path, engine=ENGINE) as ds:
            return (keep(ds) if keep else ds).load()
    except (OSError, ValueError, KeyError, RuntimeError) as exc:
        raise FormatError(f"cannot read {what} {str(path)!r}: not a NetCDF-4 file or truncated ({exc})") from None


def check_format_version(ds, path, expected=FORMAT_VERSION, what="scene file"):
    """Raise FormatError unless ``ds.attrs['format_version']`` has the expected major version."""
    found = ds.attrs.get("format_version")
    if found is None:
        raise FormatError(f"{what} {str(path)!r} has no format_version attribute; is it a surrogate3d file?")
    if str(found).split(".")[0] != str(expected).split(".")[0]:
        raise FormatError(f"{what} {str(path)!r} has format_version {found}; this version reads {expected}")


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
    check_format_version(ds, path)
    # NetCDF stores band names as variable-length strings; keep them as Python str.
    if "band" in ds.coords:
        ds = ds.assign_coords(band=[str(b) for b in ds["band"].values])
    annotate(ds)
    if validate:
        validate_scene(ds, label=str(path))
    return ds


def read_result_flags(path):
    """Only the stored-result flags of a scene file (``result_complete`` with its coordinates).

    Enough for :func:`surrogate3d.archive.results.completed` and ``has_result`` without reading
    the result fields; an empty Dataset when the file holds no results.
    """
    return open_dataset(path, what="scene file",
                        keep=lambda ds: ds[["result_complete"]] if "result_complete" in ds else xr.Dataset())


def scene_files(archive_dir):
    """Sorted scene files of an archive directory."""
    archive_dir = Path(archive_dir)
    if not archive_dir.is_dir():
        raise FormatError(f"archive directory {str(archive_dir)!r} does not exist")
    return sorted(p for p in archive_dir.glob(f"*{SCENE_SUFFIX}") if not p.name.startswith("."))
