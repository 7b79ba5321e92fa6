"""The benchmark archive: one NetCDF file per scene holding the scene and its results."""

from .listing import list_archive
from .netcdf import open_dataset, read_scene, scene_files, write_dataset, write_scene
from .results import (COLUMN_FLUXES, SOLVERS, completed, has_result, in_watts, insert_result,
                      make_run_result, select_result, strip_results)

__all__ = ["COLUMN_FLUXES", "SOLVERS", "completed", "has_result", "in_watts", "insert_result",
           "list_archive", "make_run_result", "open_dataset", "read_scene", "scene_files",
           "select_result", "strip_results", "write_dataset", "write_scene"]
