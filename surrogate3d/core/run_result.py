"""Run results: what one solver run returns for one scene and one sun geometry.

A run result is an xarray Dataset with the column fluxes on ``(y, x)``
(:data:`~surrogate3d.core.data_model.COLUMN_FLUXES`), their standard errors, the
absorption per cell on ``(z, y, x)``, optional per-band column fluxes on
``(band, y, x)``, and scalar run metadata.  Fluxes are fractions of the incident solar
flux on the horizontal (``S0 cos(theta0)``); see ``docs/archive-format.md``, which also
says how a scene file stacks the results of many runs (:mod:`surrogate3d.archive.results`).
"""

import numpy as np
import xarray as xr

from ..errors import ValidationError
from .data_model import COLUMN_FLUXES, OPTIONAL_COLUMN_FLUXES, SOLVERS
from .validation import check_option

CELL_FIELDS = {
    "absorption": ("1", "shortwave flux absorbed in the cell per unit column area, as a fraction of the "
                        "incident flux on the horizontal"),
    "heating_rate": ("K day-1", "shortwave heating rate"),
}
#: Scalar metadata of each run, under the same names in a run result and a scene file:
#: name -> (dtype, units, long_name)
RUN_METADATA = {
    "run_photons": (np.int64, "1", "number of photons traced (0 for the two-stream solver)"),
    "run_seed": (np.int64, "1", "random seed of the run"),
    "run_scattering_events": (np.int64, "1", "number of scattering events traced"),
    "run_wall_time": (np.float64, "s", "wall-clock time of the run"),
    "run_solar_constant": (np.float64, "W m-2", "solar constant used for the W m-2 fields"),
    "run_package_version": (object, "", "surrogate3d version that computed the result"),
}
#: Metadata a run result may leave out (its default then): name -> (dtype, units, long_name, default).
OPTIONAL_RUN_METADATA = {
    "run_batches": (np.int64, "1", "independent batches the standard errors come from (0: no standard errors "
                                   "from batches)", 0),
}


def add_run_metadata(ds, metadata, required, optional):
    """Store a run's scalar metadata in ``ds`` as 0-d variables with units and long names.

    ``required``: name -> (dtype, units, long_name), every name a key of ``metadata``;
    ``optional``: name -> (dtype, units, long_name, default), ``default`` where
    ``metadata`` lacks the name.
    """
    specs = {**{key: (*spec, None) for key, spec in required.items()}, **optional}
    for key, (dtype, units, long_name, default) in specs.items():
        value = metadata[key] if key in metadata or default is None else default
        ds[key] = ((), np.array(value, dtype=dtype), {"units": units, "long_name": long_name} if units
                   else {"long_name": long_name})


def stderr_name(flux):
    """Name of the standard-error variable of a column flux."""
    return f"{flux}_standard_error"


def domain_stderr_name(flux):
    """Name of the standard error of a column flux's domain mean (a scalar per run)."""
    return f"{flux}_domain_mean_standard_error"


def per_band_name(flux):
    """Name of the per-band variable of a column flux."""
    return f"{flux}_per_band"


def make_run_result(fluxes, standard_errors, absorption, *, solver, solar_zenith_angle,
                    solar_beam_azimuth, metadata, per_band=None, heating_rate=None, band=None,
                    domain_standard_errors=None):
    """Assemble a run-result Dataset.

    Parameters
    ----------
    fluxes, standard_errors : dict of str -> ndarray (ny, nx)
        Column fluxes (every key of :data:`COLUMN_FLUXES`, optionally those of
        :data:`OPTIONAL_COLUMN_FLUXES`) and their standard errors [1].
    absorption : ndarray (nz, ny, nx)
        Absorbed fraction per cell [1].
    solver : str
        One of :data:`SOLVERS`.
    solar_zenith_angle : float
        [degree], in [0, 90).
    solar_beam_azimuth : float
        Horizontal direction of travel of the direct beam [degree], counterclockwise from +x.
    metadata : dict
        Keys of :data:`RUN_METADATA`, optionally of :data:`OPTIONAL_RUN_METADATA`.
    per_band : dict of str -> ndarray (nband, ny, nx), optional
    heating_rate : ndarray (nz, ny, nx), optional
        [K day-1].
    band : sequence of str, optional
        Band names for ``per_band``.
    domain_standard_errors : dict of str -> float, optional
        Standard error of the domain mean of each column flux [1] (the standard error of
        a mean of correlated columns is not the columns' errors combined).

    Returns
    -------
    xarray.Dataset
    """
    check_option("solver", solver, SOLVERS, ValidationError)
    ds = xr.Dataset()
    present = {**COLUMN_FLUXES, **{k: v for k, v in OPTIONAL_COLUMN_FLUXES.items() if k in fluxes}}
    for name, long_name in present.items():
        ds[name] = (("y", "x"), np.asarray(fluxes[name], dtype=np.float64),
                    {"units": "1", "long_name": long_name + " / incident flux"})
        ds[stderr_name(name)] = (("y", "x"), np.asarray(standard_errors[name], dtype=np.float64),
                                 {"units": "1", "long_name": "Monte Carlo standard error of " + name})
        if domain_standard_errors and name in domain_standard_errors:
            ds[domain_stderr_name(name)] = ((), float(domain_standard_errors[name]),
                                            {"units": "1", "long_name": "Monte Carlo standard error of the domain "
                                             "mean of " + name})
    ds["absorption"] = (("z", "y", "x"), np.asarray(absorption, dtype=np.float64),
                        {"units": CELL_FIELDS["absorption"][0], "long_name": CELL_FIELDS["absorption"][1]})
    if heating_rate is not None:
        ds["heating_rate"] = (("z", "y", "x"), np.asarray(heating_rate, dtype=np.float64),
                              {"units": "K day-1", "long_name": "shortwave heating rate"})
    if per_band:
        for name, value in per_band.items():
            ds[per_band_name(name)] = (("band", "y", "x"), np.asarray(value, dtype=np.float64),
                                       {"units": "1", "long_name": present[name] + " in the band / "
                                        "incident flux in the band"})
        if band is not None:
            ds = ds.assign_coords(band=list(band))
    add_run_metadata(ds, metadata, RUN_METADATA, OPTIONAL_RUN_METADATA)
    ds.attrs.update(solver=solver, solar_zenith_angle=float(solar_zenith_angle),
                    solar_beam_azimuth=float(solar_beam_azimuth) % 360.0)
    return ds


def run_key(result):
    """``(solver, solar_zenith_angle, solar_beam_azimuth)`` of a run result."""
    return (str(result.attrs["solver"]), float(result.attrs["solar_zenith_angle"]),
            float(result.attrs["solar_beam_azimuth"]) % 360.0)


def in_watts(result, name):
    """A flux of a run result in W m-2 (fraction times ``S0 cos(theta0)``)."""
    mu0 = np.cos(np.radians(result.attrs["solar_zenith_angle"]))
    out = result[name] * float(result["run_solar_constant"]) * mu0
    out.attrs.update(units="W m-2", long_name=result[name].attrs.get("long_name", name).replace(" / incident flux", ""))
    return out
