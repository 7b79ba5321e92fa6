"""Reading and slicing training-pair tables for the learning and evaluation stages.

The table layout is fixed in ``docs/pairs-format.md`` and read by
:func:`surrogate3d.pairs.read_pairs`.  This module also checks the dimensions of every
variable learning and evaluation rely on, and turns a table into the plain arrays the
estimators take: the feature matrix (by feature name), target matrices (by target
name) and the group labels that keep whole scenes together.
"""

import json

import numpy as np

from ..errors import FormatError, ValidationError
from ..pairs import read_pairs
from ..core.data_model import TARGETS

#: Per-sample, per-target variables [1].
SAMPLE_TARGET_VARIABLES = ("target_value", "target_standard_error", "independent_column_flux",
                           "full_3d_flux", "baseline_tilted_independent_column",
                           "baseline_nonlocal_independent_pixel")

#: Per-sample labels and properties.
SAMPLE_VARIABLES = ("scene", "regime", "seed", "solar_zenith_angle", "solar_beam_azimuth",
                    "host_resolution", "host_ix", "host_iy", "host_nx", "host_ny", "cloud_fraction",
                    "surface_albedo", "incident_flux")

#: Published simple corrections stored in the table: display name -> variable.
BASELINES = {"tilted independent column": "baseline_tilted_independent_column",
             "non-local independent pixel": "baseline_nonlocal_independent_pixel"}

#: Labels that define one periodic domain (energy is conserved over it).
DOMAIN_LABELS = ("scene", "solar_zenith_angle", "solar_beam_azimuth", "host_resolution")

_STRING_LABELS = ("scene", "regime")


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
    expected = {"features": ("sample", "feature")}
    expected.update({name: ("sample", "target") for name in SAMPLE_TARGET_VARIABLES})
    expected.update({name: ("sample",) for name in SAMPLE_VARIABLES})
    missing = [name for name in expected if name not in ds.variables]
    if missing:
        raise FormatError(f"{label} lacks variables {missing}; see docs/pairs-format.md")
    for name, dims in expected.items():
        if tuple(ds[name].dims) != dims:
            raise FormatError(f"{label}: variable {name} has dimensions {tuple(ds[name].dims)}; expected {dims}")
    for coord in ("feature", "target"):
        if coord not in ds.coords:
            raise FormatError(f"{label} has no {coord!r} coordinate of names")
    unknown = [str(t) for t in ds["target"].values if str(t) not in TARGETS]
    if unknown:
        raise FormatError(f"{label} has unknown targets {unknown}; known: {list(TARGETS)}")
    feature_recipe(ds, label)
    ds = ds.assign_coords(feature=[str(f) for f in ds["feature"].values],
                          target=[str(t) for t in ds["target"].values])
    for name in _STRING_LABELS:
        ds[name] = ("sample", np.asarray([str(v) for v in ds[name].values], dtype=object), ds[name].attrs)
    return ds


def feature_recipe(ds, label="pairs table"):
    """The feature recipe stored in the ``feature_recipe`` attribute, parsed from JSON."""
    text = ds.attrs.get("feature_recipe")
    if text is None:
        raise FormatError(f"{label} has no feature_recipe attribute")
    try:
        return json.loads(text)
    except (TypeError, ValueError) as exc:
        raise FormatError(f"{label}: attribute feature_recipe is not valid JSON ({exc})") from None


def feature_names(ds):
    """Feature names of a pairs table, in recipe order."""
    return [str(f) for f in ds["feature"].values]


def target_names(ds):
    """Target names of a pairs table, in table order."""
    return [str(t) for t in ds["target"].values]


def check_has_features(ds, names, needed_by="the model"):
    """Raise ValidationError naming the features of ``names`` that the table lacks."""
    available = feature_names(ds)
    missing = [n for n in names if n not in available]
    if missing:
        raise ValidationError(f"pairs table lacks features {missing} needed by {needed_by}; "
                              f"it has {available}")


def feature_matrix(ds, names, needed_by="the model"):
    """Feature matrix (n_sample, len(names)) in the order of ``names``.

    Raises
    ------
    surrogate3d.errors.ValidationError
        A feature is missing from the table or has a non-finite value.
    """
    check_has_features(ds, names, needed_by)
    X = np.asarray(ds["features"].sel(feature=list(names)).values, dtype=np.float64)
    bad = ~np.isfinite(X)
    if bad.any():
        i, j = np.argwhere(bad)[0]
        raise ValidationError(f"feature {names[j]} is not finite at sample {i} (scene "
                              f"{str(ds['scene'].values[i])!r}): {float(X[i, j])} ({int(bad.sum())} values in all)")
    return X


def target_matrix(ds, targets, variable="target_value"):
    """A per-target variable as (n_sample, len(targets)) in the order of ``targets``.

    Raises
    ------
    surrogate3d.errors.ValidationError
        A target is missing from the table, or has a non-finite ``target_value`` (what
        models learn from and are scored against).
    """
    missing = [t for t in targets if t not in target_names(ds)]
    if missing:
        raise ValidationError(f"pairs table lacks targets {missing}; it has {target_names(ds)}")
    Y = np.asarray(ds[variable].sel(target=list(targets)).values, dtype=np.float64)
    bad = ~np.isfinite(Y) if variable == "target_value" else np.zeros(Y.shape, dtype=bool)
    if bad.any():
        i, j = np.argwhere(bad)[0]
        raise ValidationError(f"{variable} of target {targets[j]} is not finite at sample {i} (scene "
                              f"{str(ds['scene'].values[i])!r}): {float(Y[i, j])} ({int(bad.sum())} values in all)")
    return Y


def scene_labels(ds):
    """Scene label of every sample (str array)."""
    return np.asarray(ds["scene"].values).astype(str)


def domain_groups(ds):
    """Integer label of the periodic domain of every sample (scene, sun geometry, host resolution)."""
    keys = [np.asarray(ds[name].values).astype(str) if name == "scene" else np.asarray(ds[name].values)
            for name in DOMAIN_LABELS]
    scene_codes = np.unique(keys[0], return_inverse=True)[1]
    table = np.column_stack([scene_codes] + [k.astype(np.float64) for k in keys[1:]])
    return np.unique(table, axis=0, return_inverse=True)[1].ravel()


def select_scenes(ds, scenes):
    """The samples of ``scenes`` (all their sun geometries and host resolutions)."""
    keep = np.isin(scene_labels(ds), np.asarray(list(scenes), dtype=str))
    return ds.isel(sample=np.flatnonzero(keep))


def scene_table(ds):
    """One row per scene: ``{scene: (regime, seed)}``, sorted by scene label."""
    scenes = scene_labels(ds)
    regimes = np.asarray(ds["regime"].values).astype(str)
    seeds = np.asarray(ds["seed"].values).astype(np.int64)
    names, first, inverse = np.unique(scenes, return_index=True, return_inverse=True)
    bad = (regimes[first][inverse] != regimes) | (seeds[first][inverse] != seeds)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        k = inverse[i]
        known = (regimes[first[k]], int(seeds[first[k]]))
        raise ValidationError(f"scene {names[k]!r} has samples of regime/seed {known} and "
                              f"{(regimes[i], int(seeds[i]))} (sample {i})")
    return {str(n): (str(regimes[f]), int(seeds[f])) for n, f in zip(names, first)}
