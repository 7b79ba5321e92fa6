"""Exporting trained corrections for host models: coefficient files and a Fortran module.

:func:`export_training_run` (``surrogate3d export``) writes, per model, a NetCDF
coefficient file and its JSON twin (read by the numpy-only :mod:`surrogate3d.runtime`)
and optionally a Fortran 2008 module with a driver program.  ``docs/export-format.md``
documents the files; ``docs/host-model-guide.md`` shows how a host model uses them.
"""

from ..core.coefficient_file import read_coefficients
from .coefficients import build_document, write_coefficients
from .exporter import (export_model, export_training_run, refresh_fortran, refresh_host_fortran, regenerated_fortran,
                       sample_features)
from .fortran_host import host_files
from .fortran_longwave import longwave_host_files
from .flatten import flatten, ridge_arrays, tree_arrays
from .fortran import fortran_name, fortran_sources, write_fortran

__all__ = ["build_document", "export_model", "export_training_run", "flatten", "fortran_name", "fortran_sources",
           "host_files", "longwave_host_files", "read_coefficients", "refresh_fortran", "refresh_host_fortran",
           "regenerated_fortran", "ridge_arrays", "sample_features", "tree_arrays", "write_coefficients",
           "write_fortran"]
