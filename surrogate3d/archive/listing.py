"""Listing an archive directory: what each scene file is and which results it holds."""

import pandas as pd
import xarray as xr

from ..errors import FormatError
from .netcdf import ENGINE, read_result_flags, scene_files
from .pending import pending_keys
from .results import completed


def list_archive(archive_dir):
    """One row per scene file of ``archive_dir``.

    Returns
    -------
    pandas.DataFrame
        Columns: file, regime, seed, nx, ny, nz, dx_m, bands, results (solver@zenith/azimuth
        entries, comma separated), pending (results of an interrupted run not yet merged:
        run ``surrogate3d simulate`` again to merge them), status ("ok" or the reason it
        cannot be read).
    """
    rows = []
    for path in scene_files(archive_dir):
        row = {"file": path.name}
        try:
            done = completed(read_result_flags(path))
            with xr.open_dataset(path, engine=ENGINE) as ds:
                row.update(regime=ds.attrs.get("regime", ""), seed=ds.attrs.get("seed", ""),
                           nx=ds.sizes.get("x"), ny=ds.sizes.get("y"), nz=ds.sizes.get("z"),
                           dx_m=ds.attrs.get("dx_m"), bands=ds.sizes.get("band"),
                           results=", ".join(f"{s}@{z:g}/{a:g}" for s, z, a in done),
                           pending=len(pending_keys(path)), status="ok")
        except (OSError, ValueError, KeyError, FormatError) as exc:
            row["status"] = f"unreadable: {exc}"
        rows.append(row)
    return pd.DataFrame(rows, columns=["file", "regime", "seed", "nx", "ny", "nz", "dx_m", "bands",
                                       "results", "pending", "status"])
