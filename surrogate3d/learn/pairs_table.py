"""Slicing training-pair tables for the learning and evaluation stages.

:mod:`surrogate3d.core.pairs_table` holds the table's layout and reads it; this module
turns a table into the plain arrays the estimators take: the feature matrix (by feature
name), target matrices (by target name) and the group labels that keep whole scenes
together.
"""

import numpy as np

from ..core.pairs_table import DOMAIN_LABELS
from ..core.validation import fail, first_nonfinite
from ..errors import ValidationError


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
    _check_finite_samples(ds, X, [f"feature {name}" for name in names])
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
    if variable == "target_value":
        _check_finite_samples(ds, Y, [f"{variable} of target {target}" for target in targets])
    return Y


def _check_finite_samples(ds, matrix, column_names):
    """ValidationError at the first non-finite value of a (sample, column) matrix, naming its sample and scene."""
    found = first_nonfinite(matrix)
    if found is not None:
        (i, j), count = found
        fail(column_names[j], "finite", matrix[i, j], f"sample {i}, scene {str(ds['scene'].values[i])!r}", count,
             ValidationError)


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
