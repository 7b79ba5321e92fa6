"""Listing an archive directory: what each scene file is, which results it holds, and what is wrong."""

import contextlib

import pandas as pd

from ..errors import FormatError, Surrogate3DError
from .leftovers import find_leftovers, orphaned_pending_dirs
from .locking import archive_in_use
from .netcdf import read_result_flags, read_scene, scene_files
from .pending import pending_keys
from ..scenes.variables import missing_longwave_variables
from .longwave_results import completed_longwave
from .results import completed

COLUMNS = ["file", "regime", "seed", "nx", "ny", "nz", "dx_m", "bands", "longwave", "results", "pending", "status"]


def list_archive(archive_dir):
    """One row per scene file of ``archive_dir``, each file checked as ``simulate`` checks it.

    Returns
    -------
    pandas.DataFrame
        Columns: file, regime, seed, nx, ny, nz, dx_m, bands, longwave ("yes" when the scene
        has the fields of longwave radiation: temperatures, humidity, surface emissivity; "no"
        for files written before longwave support), results (shortwave solver@zenith/azimuth
        entries, then the longwave solver kinds stored, e.g. ``longwave_full_3d``, comma
        separated), pending (results of an interrupted run not yet merged:
        run ``surrogate3d simulate`` again to merge them), status ("ok", or "unreadable: ..."
        or "invalid: ..." with the first problem).
    """
    rows = []
    for path in scene_files(archive_dir):
        row = {"file": path.name}
        try:
            scene = read_scene(path, results=False, validate=False)
            row.update(regime=scene.attrs.get("regime", ""), seed=scene.attrs.get("seed", ""),
                       nx=scene.sizes.get("x"), ny=scene.sizes.get("y"), nz=scene.sizes.get("z"),
                       dx_m=scene.attrs.get("dx_m"), bands=scene.sizes.get("band"),
                       longwave="no" if missing_longwave_variables(scene) else "yes")
            flags = read_result_flags(path)
            entries = [f"{s}@{z:g}/{a:g}" for s, z, a in completed(flags)] + completed_longwave(flags)
            row.update(results=", ".join(entries), pending=len(pending_keys(path)))
        except (FormatError, OSError, ValueError, KeyError) as exc:
            row["status"] = f"unreadable: {exc}"
            rows.append(row)
            continue
        try:
            read_scene(path, results=False)  # the validation simulate and pairs apply
            row["status"] = "ok"
        except Surrogate3DError as exc:
            row["status"] = f"invalid: {exc}"
        rows.append(row)
    table = pd.DataFrame(rows, columns=COLUMNS)
    for column in ("seed", "nx", "ny", "nz", "bands", "pending"):
        with contextlib.suppress(TypeError, ValueError):  # a foreign archive may name its seeds
            table[column] = table[column].astype("Int64")  # whole numbers, also beside unreadable files
    return table


def archive_notes(archive_dir):
    """Lines about the archive directory itself: leftovers of killed runs, orphaned results, a run in progress."""
    notes = []
    in_use = archive_in_use(archive_dir)
    leftovers = find_leftovers(archive_dir)
    if leftovers and in_use:
        notes.append(f"{len(leftovers)} temporary entr{'y' if len(leftovers) == 1 else 'ies'} of the run now using "
                     "the archive")
    elif leftovers:
        names = ", ".join(str(p.relative_to(archive_dir)) for p in leftovers[:3])
        more = f" and {len(leftovers) - 3} more" if len(leftovers) > 3 else ""
        notes.append(f"{len(leftovers)} temporary entr{'y' if len(leftovers) == 1 else 'ies'} left by killed runs "
                     f"({names}{more}); the next 'surrogate3d simulate' removes them")
    elif in_use:
        notes.append("a run (simulate or scenes) is using the archive now")
    for directory in orphaned_pending_dirs(archive_dir):
        notes.append(f"{directory.name} holds results of a scene file that is not in the archive; restore the "
                     "scene file to merge them, or remove the directory")
    return notes
