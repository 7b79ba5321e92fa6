"""The benchmark archive: one NetCDF file per scene holding the scene and its results, filled by
:func:`~surrogate3d.archive.simulate.simulate_archive` (``surrogate3d simulate``)."""

from ..core.data_model import COLUMN_FLUXES, LONGWAVE_SOLVERS, SOLVERS
from ..core.longwave_result import LONGWAVE_COLUMN_FLUXES, make_longwave_result
from ..core.netcdf import open_dataset, write_dataset
from ..core.run_result import in_watts, make_run_result
from .listing import list_archive
from .longwave_results import (completed_longwave, has_longwave_result, insert_longwave_result,
                               insert_longwave_results, select_longwave_result)
from .netcdf import read_scene, scene_files, write_scene
from .results import completed, has_result, insert_result, select_result, strip_results

__all__ = ["COLUMN_FLUXES", "LONGWAVE_COLUMN_FLUXES", "LONGWAVE_SOLVERS", "SOLVERS", "completed",
           "completed_longwave", "has_longwave_result", "has_result", "in_watts", "insert_longwave_result",
           "insert_longwave_results", "insert_result", "list_archive", "make_longwave_result", "make_run_result",
           "open_dataset", "read_scene", "scene_files", "select_longwave_result", "select_result",
           "strip_results", "write_dataset", "write_scene"]
