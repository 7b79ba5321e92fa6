"""The training-pair table: the variables every table holds and the one reader of it.

``docs/pairs-format.md`` documents every variable; :mod:`surrogate3d.pairs.build` writes
the table, the learning and evaluation stages read it with :func:`read_pairs_table`.

Examples
--------
>>> REQUIRED_VARIABLES[:2]
('features', 'target_value')
"""

import json

import numpy as np

from ..errors import FormatError
from .data_model import BASELINES, LONGWAVE_PAIRS_FORMAT_VERSION, TARGETS
from .data_model import PAIRS_FORMAT_VERSION as FORMAT_VERSION
from .data_model import LONGWAVE_COLUMN_FLUXES
from .netcdf import check_format_version, open_dataset

#: Per-sample, per-target variables [1].
SAMPLE_TARGET_VARIABLES = ("target_value", "target_standard_error", "independent_column_flux", "full_3d_flux",
                           *(baseline.variable for baseline in BASELINES.values()))

#: Per-sample labels and properties.
SAMPLE_VARIABLES = ("scene", "regime", "seed", "solar_zenith_angle", "solar_beam_azimuth",
                    "host_resolution", "host_ix", "host_iy", "host_nx", "host_ny", "cloud_fraction",
                    "surface_albedo", "incident_flux")

#: Variables every pair table holds.
REQUIRED_VARIABLES = ("features", *SAMPLE_TARGET_VARIABLES, *SAMPLE_VARIABLES)

#: The per-sample, per-target and per-sample variables of a longwave table
#: (attribute ``spectrum = "longwave"``; no sun, targets in W m-2).
LONGWAVE_SAMPLE_TARGET_VARIABLES = ("target_value", "target_standard_error", "independent_column_flux", "full_3d_flux")
LONGWAVE_SAMPLE_VARIABLES = ("scene", "regime", "seed", "host_resolution", "host_ix", "host_iy", "host_nx",
                             "host_ny", "cloud_fraction")

#: Labels that define one periodic domain (energy is conserved over it).
DOMAIN_LABELS = ("scene", "solar_zenith_angle", "solar_beam_azimuth", "host_resolution")

_STRING_LABELS = ("scene", "regime")


def read_pairs(path):
    """Read a pair table written by ``surrogate3d pairs`` (or :func:`build_pairs` + write_dataset).

    Parameters
    ----------
    path : str or Path

    Returns
    -------
    xarray.Dataset
        Loaded into memory; string coordinates and labels as Python ``str``.

    Raises
    ------
    surrogate3d.errors.FormatError
        The file is missing or unreadable, of another format version, or lacks variables.
    """
    ds = open_dataset(path, what="pair table")
    longwave = table_spectrum(ds) == "longwave"
    check_format_version(ds, path, expected=LONGWAVE_PAIRS_FORMAT_VERSION if longwave else FORMAT_VERSION,
                         what="longwave pair table" if longwave else "pair table")
    required = ("features", *LONGWAVE_SAMPLE_TARGET_VARIABLES, *LONGWAVE_SAMPLE_VARIABLES) if longwave \
        else REQUIRED_VARIABLES
    missing = [v for v in required if v not in ds.variables]
    missing += [c for c in ("feature", "target") if c not in ds.coords]
    if missing:
        raise FormatError(f"pair table {str(path)!r} lacks variable(s) {', '.join(missing)}")
    ds = ds.assign_coords(feature=[str(f) for f in ds["feature"].values],
                          target=[str(t) for t in ds["target"].values])
    for name in ("scene", "regime"):
        ds[name] = ("sample", np.array([str(v) for v in ds[name].values], dtype=object), ds[name].attrs)
    return ds


def read_pairs_table(path):
    """Read a training-pair table and check that it has what learning and evaluation need.

    Parameters
    ----------
    path : str or Path
        NetCDF file written by ``surrogate3d pairs``.

    Returns
    -------
    xarray.Dataset
        The table in memory, with ``feature``, ``target``, ``scene`` and ``regime`` as str.

    Raises
    ------
    surrogate3d.errors.FormatError
        The file is missing, unreadable, of another format version, or lacks variables.
    """
    return check_pairs_table(read_pairs(path), label=f"pairs file {str(path)!r}")


def check_pairs_table(ds, label="pairs table"):
    """Check variables and dimensions of a pairs table; return it with string labels as str.

    Parameters
    ----------
    ds : xarray.Dataset
    label : str
        How to name the table in error messages.

    Returns
    -------
    xarray.Dataset

    Raises
    ------
    surrogate3d.errors.FormatError
        A variable is missing or has the wrong dimensions, or ``feature_recipe`` is not JSON.
    """
    longwave = table_spectrum(ds) == "longwave"
    expected = {"features": ("sample", "feature")}
    expected.update({name: ("sample", "target")
                     for name in (LONGWAVE_SAMPLE_TARGET_VARIABLES if longwave else SAMPLE_TARGET_VARIABLES)})
    expected.update({name: ("sample",) for name in (LONGWAVE_SAMPLE_VARIABLES if longwave else SAMPLE_VARIABLES)})
    missing = [name for name in expected if name not in ds.variables]
    if missing:
        raise FormatError(f"{label} lacks variables {missing}; see docs/pairs-format.md")
    for name, dims in expected.items():
        if tuple(ds[name].dims) != dims:
            raise FormatError(f"{label}: variable {name} has dimensions {tuple(ds[name].dims)}; expected {dims}")
    for coord in ("feature", "target"):
        if coord not in ds.coords:
            raise FormatError(f"{label} has no {coord!r} coordinate of names")
    known = list(LONGWAVE_COLUMN_FLUXES) if longwave else list(TARGETS)
    unknown = [str(t) for t in ds["target"].values if str(t) not in known]
    if unknown:
        raise FormatError(f"{label} has unknown targets {unknown}; known: {known}")
    feature_recipe(ds, label)
    ds = ds.assign_coords(feature=[str(f) for f in ds["feature"].values],
                          target=[str(t) for t in ds["target"].values])
    for name in _STRING_LABELS:
        ds[name] = ("sample", np.asarray([str(v) for v in ds[name].values], dtype=object), ds[name].attrs)
    return ds


def table_spectrum(ds):
    """``"longwave"`` for a longwave pair table, ``"shortwave"`` otherwise (the ``spectrum`` attribute)."""
    return "longwave" if ds.attrs.get("spectrum") == "longwave" else "shortwave"


def feature_recipe(ds, label="pairs table"):
    """The feature recipe stored in the ``feature_recipe`` attribute, parsed from JSON."""
    text = ds.attrs.get("feature_recipe")
    if text is None:
        raise FormatError(f"{label} has no feature_recipe attribute")
    try:
        return json.loads(text)
    except (TypeError, ValueError) as exc:
        raise FormatError(f"{label}: attribute feature_recipe is not valid JSON ({exc})") from None
