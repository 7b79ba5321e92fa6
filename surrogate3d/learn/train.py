"""Training every model of a recipe on the training scenes of a pairs table.

For each model of the recipe: a scene-grouped K-fold search over its hyperparameter
grid on the training scenes, then a refit of the best candidate on all training scenes.
The record names the families (regimes) that ``surrogate3d evaluate`` leaves out of
training in turn (:mod:`surrogate3d.evaluation.family_transfer`).  The output is a model
directory (see :mod:`surrogate3d.learn.model_directory`).
"""

from pathlib import Path

import numpy as np
import sklearn
from tqdm import tqdm

from .. import __version__
from .cv import grid_search, split_scenes
from .model_directory import MODEL_FORMAT_VERSION, PROFILE_KINDS, PROFILE_MODEL, file_sha256, write_model, \
    write_training_record
from .models import make_estimator
from ..core.pairs_table import feature_recipe, read_pairs_table
from .pairs_table import feature_matrix, scene_labels, select_scenes, target_matrix
from .recipe import check_recipe_against_pairs, profile_class, read_recipe


def train_models(pairs_path, recipe_path, out_dir, quiet=False):
    """Train the models of a recipe and write a model directory.

    Parameters
    ----------
    pairs_path : str or Path
        Training-pair table (``docs/pairs-format.md``).
    recipe_path : str or Path
        Training recipe (TOML; see :mod:`surrogate3d.learn.recipe`).
    out_dir : str or Path
        Model directory; created if missing.  Each file is written atomically and
        ``training.json`` last, so a directory without it is an unfinished run.
    quiet : bool
        Hide progress bars.

    Returns
    -------
    dict
        The training record written to ``training.json``.

    Raises
    ------
    surrogate3d.errors.FormatError
        Unreadable pairs file or recipe.
    surrogate3d.errors.ParameterError
        Bad recipe key or value.
    surrogate3d.errors.ValidationError
        The pairs table lacks features, targets or the regime the recipe names.
    """
    pairs_path, out_dir = Path(pairs_path), Path(out_dir)
    recipe = read_recipe(recipe_path)
    pairs = read_pairs_table(pairs_path)
    check_recipe_against_pairs(recipe, pairs)
    features, targets = recipe.feature_list(pairs), list(recipe.targets)
    split = split_scenes(pairs, recipe.held_out_scene_fraction, recipe.split_seed)
    provenance = {
        "pairs_file": str(pairs_path.resolve()),
        "pairs_sha256": file_sha256(pairs_path),
        "archive_fingerprint": str(pairs.attrs.get("archive_fingerprint", "")),
        "recipe_file": str(Path(recipe_path).resolve()),
        "recipe_text": recipe.text,
        "package_version": __version__,
        "scikit_learn_version": sklearn.__version__,
        "numpy_version": np.__version__,
    }
    shared = {"targets": targets, "feature_names": features, "feature_recipe": feature_recipe(pairs)}
    out_dir.mkdir(parents=True, exist_ok=True)

    training = select_scenes(pairs, split.training_scenes)
    X, Y = feature_matrix(training, features, "the training recipe"), target_matrix(training, targets)
    # The search's folds keep scenes together, or whole families (regimes) with grouping "family".
    groups = scene_labels(training) if recipe.grouping == "scene" else np.asarray(training["regime"].values).astype(str)
    searches = {}
    for spec in tqdm(recipe.models, desc="train", unit="model", disable=True if quiet else None):
        search = grid_search(make_estimator(spec.kind, recipe.model_parameters(spec=spec)), spec.candidates(), X, Y,
                             groups, recipe.folds, quiet=quiet, label=f"search {spec.name}", feature_names=features,
                             incident_flux=_incident_flux(training))
        searches[spec.name] = search
        estimator = make_estimator(spec.kind, recipe.model_parameters(search.best_params, spec)).fit_pairs(
            training, features, targets)
        card = dict(format_version=MODEL_FORMAT_VERSION, name=spec.name, kind=spec.kind,
                    hyperparameters=estimator.get_params(), **shared,
                    cross_validation={"grouping": recipe.grouping, "grid": spec.grid, **search.as_dict()},
                    provenance={**provenance, "training_scenes": list(split.training_scenes),
                                "held_out_scenes": list(split.held_out_scenes), "excluded_regime": None})
        write_model(out_dir / spec.name, estimator, card)
    if recipe.profile is not None:
        if not quiet:
            print(f"profile model on {training.sizes['sample']} columns x {training.sizes['host_layer']} layers",
                  flush=True)
        profile = profile_class(recipe.spectrum)(**recipe.profile).fit_pairs(training, features)
        write_model(out_dir / PROFILE_MODEL, profile, dict(
            format_version=MODEL_FORMAT_VERSION, name=PROFILE_MODEL, kind=PROFILE_KINDS[recipe.spectrum],
            hyperparameters=profile.get_params(), targets=profile.target_names_, feature_names=features,
            feature_recipe=shared["feature_recipe"], cross_validation=None,
            provenance={**provenance, "training_scenes": list(split.training_scenes),
                        "held_out_scenes": list(split.held_out_scenes), "excluded_regime": None}))

    record = {
        "format_version": MODEL_FORMAT_VERSION,
        "recipe_name": recipe.name,
        "spectrum": recipe.spectrum,
        "models": [spec.name for spec in recipe.models],
        "profile_model": PROFILE_MODEL if recipe.profile is not None else None,
        "kinds": {spec.name: spec.kind for spec in recipe.models},
        "targets": targets,
        "feature_names": features,
        "split": {**split.as_dict(), "left_out_families": recipe.family_list(pairs),
                  "held_out_scene_fraction": recipe.held_out_scene_fraction,
                  "seed": recipe.split_seed, "n_training_samples": int(training.sizes["sample"])},
        "cross_validation": {name: {"best_params": s.best_params, "best_score": s.best_score, "folds": s.folds,
                                    "grouping": recipe.grouping} for name, s in searches.items()},
        "provenance": provenance,
    }
    write_training_record(out_dir, record)
    return record


def _incident_flux(pairs):
    """S0 cos(theta0) of every sample [W m-2], for the search's skill in W m-2; None for a
    longwave table, whose targets are in W m-2 already."""
    if "incident_flux" not in pairs:
        return None
    return np.asarray(pairs["incident_flux"].values, dtype=np.float64)
