"""Learning the 3D correction: estimators, scene-grouped validation, training recipes.

The correction of a target is the 3D minus the independent-column flux, as a fraction
of the incident flux on the horizontal.  :class:`RidgeCorrection` and
:class:`BoostedCorrection` learn it from host-column features; :func:`apply_correction`
makes a predicted correction physically consistent; :func:`train_models` runs a training
recipe and writes a model directory that :func:`load_model` and
:func:`load_training_run` read back.
"""

from .consistency import CorrectedFluxes, apply_correction, energy_residual
from .cv import SceneSplit, correction_skill, grid_search, scene_folds, split_scenes
from .model_directory import MODEL_FORMAT_VERSION, TrainedModel, TrainingRun, load_model, load_training_run
from .models import MODEL_KINDS, BoostedCorrection, RidgeCorrection, make_estimator
from ..core.data_model import TARGETS
from ..core.pairs_table import read_pairs_table
from .pairs_table import domain_groups
from .recipe import TrainingRecipe, parse_recipe, read_recipe
from .train import train_models

__all__ = ["BoostedCorrection", "CorrectedFluxes", "MODEL_FORMAT_VERSION", "MODEL_KINDS", "RidgeCorrection",
           "SceneSplit", "TARGETS", "TrainedModel", "TrainingRecipe", "TrainingRun", "apply_correction",
           "correction_skill", "domain_groups", "energy_residual", "grid_search", "load_model",
           "load_training_run", "make_estimator", "parse_recipe", "read_pairs_table", "read_recipe",
           "scene_folds", "split_scenes", "train_models"]
