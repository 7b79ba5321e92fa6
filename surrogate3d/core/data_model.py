"""The names every stage shares: solver kinds, fluxes, correction targets, baselines, and
the version of every file format (standard library only).

Fluxes are fractions of the incident flux on the horizontal, ``S0 cos(theta0)``; a
correction target is the 3D minus the independent-column value of one of them.  A
reader accepts a file whose version has its own major number.

Examples
--------
>>> TARGETS[0], SOLVERS[:2]
('surface_downward_flux', ('full_3d', 'independent_column'))
>>> BASELINES["tilted_independent_column"].variable
'baseline_tilted_independent_column'
"""

from collections import namedtuple

#: The solver kinds, in the order results are stored.
SOLVERS = ("full_3d", "independent_column", "two_stream")

#: The longwave (thermal) solver kinds, in the order results are stored: the longwave
#: counterpart of each of :data:`SOLVERS` (``docs/archive-format.md``).
LONGWAVE_SOLVERS = tuple(f"longwave_{solver}" for solver in SOLVERS)
#: Column fields of every longwave run result [W m-2] and their long names.
LONGWAVE_COLUMN_FLUXES = {
    "longwave_surface_downward_flux": "downward longwave flux at the surface",
    "longwave_surface_upward_flux": "upward longwave flux at the surface (emitted and reflected)",
    "longwave_toa_upward_flux": "upward longwave flux at the top of the domain",
    "longwave_atmosphere_net_absorption": "longwave flux absorbed minus emitted by the air of the column",
    "longwave_surface_net_absorption": "longwave flux absorbed minus emitted by the surface",
}
#: What ``simulate`` runs: the solar spectrum, the thermal one, or both.
SPECTRA = ("shortwave", "longwave", "both")

#: Column fluxes every run result holds (positive magnitudes) and their long names.
COLUMN_FLUXES = {
    "toa_upward_flux": "upward shortwave flux at the top of the domain",
    "surface_downward_direct_flux": "downward direct (unscattered) shortwave flux at the surface",
    "surface_downward_diffuse_flux": "downward diffuse (scattered) shortwave flux at the surface",
    "surface_upward_flux": "upward shortwave flux at the surface (reflected)",
    "atmosphere_absorption": "shortwave flux absorbed in the atmospheric column",
}
#: Column fluxes a run result may hold besides :data:`COLUMN_FLUXES`.
OPTIONAL_COLUMN_FLUXES = {
    "surface_absorption": "shortwave flux absorbed by the surface",
}

#: The correction targets, in pair-table order (``docs/pairs-format.md``).
TARGETS = ("surface_downward_flux", "surface_downward_direct_flux", "surface_downward_diffuse_flux",
           "toa_upward_flux", "atmosphere_absorption")

Baseline = namedtuple("Baseline", ["label", "variable"])
Baseline.__doc__ = """A published simple correction: its label in reports and the pair-table
variable holding its predictions (``docs/methods/baselines.md``)."""

#: The published simple corrections the pair table carries, by name
#: (:mod:`surrogate3d.baselines` computes them).
BASELINES = {
    "tilted_independent_column": Baseline("tilted independent column", "baseline_tilted_independent_column"),
    "nonlocal_independent_pixel": Baseline("non-local independent pixel", "baseline_nonlocal_independent_pixel"),
}

#: The published simple longwave corrections the longwave pair table carries, by name
#: (:mod:`surrogate3d.baselines.effective_cloud_fraction`).
LONGWAVE_BASELINES = {
    "effective_cloud_fraction": Baseline("effective cloud fraction", "baseline_effective_cloud_fraction"),
}

#: Scene files (``docs/archive-format.md``).  1.2 added the optional longwave fields
#: (``specific_humidity``, ``surface_temperature``, ``surface_longwave_emissivity``) and
#: ``air_temperature`` per cell; a 1.1 file's layer profile of ``air_temperature`` still reads.
#: 1.3 added the optional longwave results (``longwave_*`` on ``longwave_solver``).
SCENE_FORMAT_VERSION = "1.3"
#: Pair tables (``docs/pairs-format.md``).
PAIRS_FORMAT_VERSION = "1.1"
#: Longwave pair tables (``docs/pairs-format.md``, "Longwave pairs"; attribute
#: ``spectrum = "longwave"``).  1.1 added the ``feature_recipe`` attribute.
LONGWAVE_PAIRS_FORMAT_VERSION = "1.1"
#: Feature recipes (and the feature definitions they name).
RECIPE_VERSION = 1
#: Model directories and their ``model.json``.
MODEL_FORMAT_VERSION = "1.0"
#: The ``format`` field of every coefficient file (``docs/export-format.md``).
COEFFICIENT_FORMAT_NAME = "surrogate3d-correction-coefficients"
#: Coefficient files.  1.1 added the optional ``clear_sky_gate`` (a 1.0 file has none: no
#: gate); 1.2 added the optional ``training_envelope`` (an older file has none: no column
#: is flagged) and stores scale 1 for a ridge feature constant up to round-off (readers
#: clip the standardized value of such a feature in older files,
#: :mod:`surrogate3d.runtime.ridge`); 1.3 added the optional ``target_transforms`` (an
#: older file has none: the model predicts corrections); 1.4 added the optional
#: ``profile`` (a heating-rate model's layer features; an older file is a column model);
#: from 1.5 a ridge clips its features to the envelope's ranges; 1.6 added the optional
#: ``outside_envelope`` of a target transform (an older file has none: every column gets
#: the learned correction).
COEFFICIENT_FORMAT_VERSION = "1.6"
