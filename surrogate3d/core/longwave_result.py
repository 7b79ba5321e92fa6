"""Longwave run results: what one thermal solver run returns for one scene.

A longwave run result is an xarray Dataset holding the broadband column fluxes of
:data:`LONGWAVE_COLUMN_FLUXES` on ``(y, x)`` in W m-2, their standard errors per column
and for the domain mean, the net absorption per cell (and its standard error) on
``(z, y, x)``, optionally the heating rate, and scalar run metadata.  Every name starts with
``longwave_`` and is the same in a run result and in a scene file, where the results of
the longwave solver kinds are stacked along ``longwave_solver`` beside the shortwave
results (:mod:`surrogate3d.archive.longwave_results`, ``docs/archive-format.md``).
Longwave radiation does not depend on the sun: a result has no sun geometry.
"""

import numpy as np
import xarray as xr

from ..errors import ValidationError
from .data_model import LONGWAVE_COLUMN_FLUXES, LONGWAVE_SOLVERS
from .run_result import add_run_metadata
from .validation import check_option

#: Per-cell fields: name -> (units, long_name); the heating rate is optional.
LONGWAVE_CELL_FIELDS = {
    "longwave_net_absorption": ("W m-2", "longwave flux absorbed minus emitted in the cell, per unit column area"),
    "longwave_heating_rate": ("K day-1", "longwave heating rate"),
}
#: Scalar metadata of each longwave run: name -> (dtype, units, long_name).
LONGWAVE_RUN_METADATA = {
    "longwave_run_photons": (np.int64, "1", "number of photons traced (0 for the two-stream solver)"),
    "longwave_run_seed": (np.int64, "1", "random seed of the run (0 for the two-stream solver)"),
    "longwave_run_scattering_events": (np.int64, "1", "number of scattering events traced"),
    "longwave_run_wall_time": (np.float64, "s", "wall-clock time of the run"),
    "longwave_run_spectral_resolution": (np.float64, "m-1", "widest spectral interval of the gas absorption"),
    "longwave_run_package_version": (object, "", "surrogate3d version that computed the result"),
}
#: Metadata a longwave run result may leave out (its default then): name -> (dtype, units, long_name, default).
LONGWAVE_OPTIONAL_RUN_METADATA = {
    "longwave_run_batches": (np.int64, "1", "independent batches the standard errors come from (0: no standard "
                                            "errors from batches)", 0),
    "longwave_run_boundary_rays": (np.int64, "1", "rays per cell column of the backward estimate of the surface "
                                                  "fields and the top upward flux (0: forward tallies)", 0),
}


def longwave_stderr_name(name):
    """Name of the standard-error variable of a longwave column flux or cell field."""
    return f"{name}_standard_error"


def longwave_domain_stderr_name(name):
    """Name of the standard error of a longwave column flux's domain mean (a scalar per run)."""
    return f"{name}_domain_mean_standard_error"


def longwave_result_variables():
    """Every variable name a longwave run result may hold, in a fixed order."""
    names = []
    for name in LONGWAVE_COLUMN_FLUXES:
        names += [name, longwave_stderr_name(name), longwave_domain_stderr_name(name)]
    for name in LONGWAVE_CELL_FIELDS:
        names += [name, longwave_stderr_name(name)]
    return names + list(LONGWAVE_RUN_METADATA) + list(LONGWAVE_OPTIONAL_RUN_METADATA)


def is_longwave_result(result):
    """True if ``result`` is a longwave run result (its ``solver`` attribute is a longwave kind)."""
    return str(result.attrs.get("solver", "")) in LONGWAVE_SOLVERS


def make_longwave_result(fluxes, standard_errors, domain_standard_errors, net_absorption, *, solver, metadata,
                         net_absorption_standard_error=None, heating_rate=None, heating_rate_standard_error=None):
    """Assemble a longwave run-result Dataset.

    Parameters
    ----------
    fluxes, standard_errors : dict of str -> ndarray (ny, nx)
        Every key of :data:`LONGWAVE_COLUMN_FLUXES` [W m-2] and its standard error per
        column [W m-2] (zeros for a deterministic solver).
    domain_standard_errors : dict of str -> float
        Standard error of the domain mean of each column flux [W m-2] (not derivable from
        the columns' errors, which are correlated).
    net_absorption : ndarray (nz, ny, nx)
        Absorbed minus emitted longwave flux of every cell per unit column area [W m-2].
    solver : str
        One of :data:`~surrogate3d.core.data_model.LONGWAVE_SOLVERS`.
    metadata : dict
        Keys of :data:`LONGWAVE_RUN_METADATA`, optionally of :data:`LONGWAVE_OPTIONAL_RUN_METADATA`.
    net_absorption_standard_error : ndarray (nz, ny, nx), optional
        [W m-2]; default zeros.
    heating_rate, heating_rate_standard_error : ndarray (nz, ny, nx), optional
        [K day-1]; the standard error defaults to zeros when the heating rate is given.

    Returns
    -------
    xarray.Dataset

    Raises
    ------
    surrogate3d.errors.ValidationError
        ``solver`` is not a longwave solver kind, or a field is missing.

    Examples
    --------
    >>> zero = np.zeros((2, 3))
    >>> result = make_longwave_result(
    ...     dict.fromkeys(LONGWAVE_COLUMN_FLUXES, zero), dict.fromkeys(LONGWAVE_COLUMN_FLUXES, zero),
    ...     dict.fromkeys(LONGWAVE_COLUMN_FLUXES, 0.0), np.zeros((4, 2, 3)), solver="longwave_two_stream",
    ...     metadata={"longwave_run_photons": 0, "longwave_run_seed": 0, "longwave_run_scattering_events": 0,
    ...               "longwave_run_wall_time": 0.1, "longwave_run_spectral_resolution": 1000.0,
    ...               "longwave_run_package_version": "0"})
    >>> result["longwave_net_absorption"].dims, result.attrs["solver"]
    (('z', 'y', 'x'), 'longwave_two_stream')
    """
    check_option("solver", solver, LONGWAVE_SOLVERS, ValidationError)
    missing = [n for n in LONGWAVE_COLUMN_FLUXES if n not in fluxes or n not in standard_errors
               or n not in domain_standard_errors]
    missing += [k for k in LONGWAVE_RUN_METADATA if k not in metadata]
    if missing:
        raise ValidationError(f"longwave result of {solver} lacks {', '.join(missing)}")
    ds = xr.Dataset()
    for name, long_name in LONGWAVE_COLUMN_FLUXES.items():
        ds[name] = (("y", "x"), np.asarray(fluxes[name], dtype=np.float64), {"units": "W m-2", "long_name": long_name})
        ds[longwave_stderr_name(name)] = (("y", "x"), np.asarray(standard_errors[name], dtype=np.float64),
                                          {"units": "W m-2", "long_name": "Monte Carlo standard error of " + name})
        ds[longwave_domain_stderr_name(name)] = ((), float(domain_standard_errors[name]),
                                                 {"units": "W m-2", "long_name": "Monte Carlo standard error of "
                                                  "the domain mean of " + name})
    cells = {"longwave_net_absorption": (net_absorption, net_absorption_standard_error)}
    if heating_rate is not None:
        cells["longwave_heating_rate"] = (heating_rate, heating_rate_standard_error)
    for name, (value, error) in cells.items():
        value = np.asarray(value, dtype=np.float64)
        units, long_name = LONGWAVE_CELL_FIELDS[name]
        ds[name] = (("z", "y", "x"), value, {"units": units, "long_name": long_name})
        ds[longwave_stderr_name(name)] = (("z", "y", "x"),
                                          np.zeros_like(value) if error is None else np.asarray(error, np.float64),
                                          {"units": units, "long_name": "Monte Carlo standard error of " + name})
    add_run_metadata(ds, metadata, LONGWAVE_RUN_METADATA, LONGWAVE_OPTIONAL_RUN_METADATA)
    ds.attrs.update(solver=solver)
    return ds
