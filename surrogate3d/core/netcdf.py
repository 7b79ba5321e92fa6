"""NetCDF-4 files of any Dataset: read whole or in part, written atomically, versions checked.

Every file surrogate3d writes (scene files, pair tables, coefficient files) goes through
here; what each holds is the business of its own module (``archive.netcdf`` for scene
files, :mod:`surrogate3d.core.pairs_table`, :mod:`surrogate3d.core.coefficient_files`).
"""

from pathlib import Path

import numpy as np
import xarray as xr

from .._atomic import atomic_path
from ..errors import FormatError

ENGINE = "netcdf4"


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


def check_format_version(ds, path, expected, what="file"):
    """Raise FormatError unless ``ds.attrs['format_version']`` has the major version of ``expected``."""
    found = ds.attrs.get("format_version")
    if found is None:
        raise FormatError(f"{what} {str(path)!r} has no format_version attribute; is it a surrogate3d file?")
    if str(found).split(".")[0] != str(expected).split(".")[0]:
        raise FormatError(f"{what} {str(path)!r} has format_version {found}; this version reads {expected}")
