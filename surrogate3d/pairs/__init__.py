"""Training pairs at host-model resolution: coarse-graining, the feature library, feature recipes.

``features`` and ``recipe`` import only numpy and the standard library
(the numpy-only runtime imports them), so this package loads the xarray-based parts
(coarse-graining, the pair table) only when they are first used.
"""

from .features import FEATURES, compute_features, validate_host_fields
from .recipe import RECIPE_VERSION, FeatureRecipe, default_recipe

_LAZY = {
    "build_pairs": "build", "TARGETS": "build", "FORMAT_VERSION": "build",
    "assemble_host_fields": "host_fields", "scene_host_fields": "coarsen", "coarsen_result": "coarsen",
    "host_factors": "coarsen", "allowed_host_resolutions": "coarsen", "build_longwave_pairs": "longwave_pairs",
}

__all__ = ["FEATURES", "RECIPE_VERSION", "FeatureRecipe", "compute_features", "default_recipe",
           "validate_host_fields", *_LAZY]


def __getattr__(name):
    if name in _LAZY:
        import importlib

        return getattr(importlib.import_module(f".{_LAZY[name]}", __name__), name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
