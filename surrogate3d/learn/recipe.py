"""Training recipes: TOML files naming targets, features, the scene split, CV and models.

A recipe (see ``training/default.toml``) has these keys; every one is checked before
any training starts, and a wrong one is named in the error with the allowed values::

    name = "default"                       # optional, free text
    description = "..."                    # optional
    spectrum = "shortwave"                 # or "longwave": a longwave pair table and its targets
    targets = ["surface_downward_flux", ...]  # default: all five (longwave: all five longwave
                                           # fields), in the documented order
    features = "all"                       # or a list of feature names of the pairs table

    [split]
    held_out_scene_fraction = 0.25         # in [0, 1): share of seeds held out per regime
    left_out_families = "all"              # or a list of regimes, or []: the families (regimes)
                                           # that `evaluate` leaves out of training in turn
    seed = 1                               # which seeds are held out

``held_out_regime = "NAME"``, the spelling of earlier recipes, still reads as
``left_out_families = ["NAME"]``.

    [cross_validation]
    folds = 3                              # >= 2, scene-grouped folds for the search
    grouping = "scene"                     # or "family": every fold leaves out whole regimes, so
                                           # the search prefers what holds on families unseen

    [target_transforms.TARGET]             # optional, per target: learn a residual (transforms.py)
    scale_feature = "independent_column_atmosphere_absorption"
    scale_floor = 1e-4
    offset_features = {feature = 1.0, ...}
    outside_envelope = "learned" | "offset"  # "offset": outside the training envelope, the offset alone

    [models.NAME]                          # NAME: letters, digits, _ and -
    kind = "ridge" | "boosted"
    PARAMETER = value | [values]           # a list is a grid dimension
    interaction_features = ["a", "b", ...] # list-valued parameter: one value; a list of lists is a grid
    clear_sky_features = ["a", ...]        # list-valued too: the clear-sky gate (models.py)
    [models.NAME.target_transforms.TARGET] # optional: this model's own transforms, in place of
                                           # the recipe's [target_transforms] as a whole

    [profile]                              # optional: the heating-rate correction (profile_model.py;
    max_iter = 200                         # longwave: longwave_profile_model.py), fitted on the
    min_samples_leaf = 50                  # per-layer variables of the pairs table; its parameters
                                           # (single values, no search)
"""

import itertools
import re
import tomllib
from dataclasses import dataclass
from pathlib import Path

from ..errors import FormatError, ParameterError, ValidationError
from .models import MODEL_KINDS, make_estimator
from ..core.data_model import TARGETS
from ..core.data_model import LONGWAVE_COLUMN_FLUXES
from ..core.pairs_table import table_spectrum
from .pairs_table import check_has_features, feature_names
from .longwave_profile_model import LONGWAVE_LAYER_TARGET, LongwaveProfileCorrection
from .profile_model import LAYER_FIELDS, ProfileCorrection
from ..runtime.longwave_profile import LONGWAVE_LAYER_FIELDS
from .transforms import check_transform, transform_features

_TOP_KEYS = {"name", "description", "spectrum", "targets", "features", "split", "cross_validation", "models",
             "target_transforms", "profile"}
_SPLIT_KEYS = {"held_out_scene_fraction", "left_out_families", "held_out_regime", "seed"}
_CV_KEYS = {"folds", "grouping"}
#: What the folds of the hyperparameter search keep together.
GROUPINGS = ("scene", "family")
_MODEL_NAME = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_-]*$")

#: Model parameters whose value is itself a list: a list of lists is their grid dimension.
_LIST_PARAMETERS = {"interaction_features", "clear_sky_features"}


@dataclass(frozen=True)
class ModelSpec:
    """One model of a recipe: its name, kind and hyperparameter grid.

    Attributes
    ----------
    name : str
        Directory name of the trained model.
    kind : str
        Key of :data:`surrogate3d.learn.models.MODEL_KINDS`.
    grid : dict of str -> list
        Every parameter with its candidate values (one value for a fixed parameter).
    target_transforms : tuple or None
        The model's own target transforms in target order (``[models.NAME.target_transforms]``),
        or None for the recipe's.
    """

    name: str
    kind: str
    grid: dict
    target_transforms: tuple = None

    def candidates(self):
        """Every parameter combination of the grid, as dicts, in a fixed order."""
        keys = sorted(self.grid)
        return [dict(zip(keys, values)) for values in itertools.product(*(self.grid[k] for k in keys))]


@dataclass(frozen=True)
class TrainingRecipe:
    """A parsed, checked training recipe (see the module docstring for the keys)."""

    name: str
    description: str
    targets: tuple
    features: tuple | None
    held_out_scene_fraction: float
    left_out_families: tuple | None
    split_seed: int
    folds: int
    models: tuple
    text: str
    source: str
    target_transforms: tuple = None
    grouping: str = "scene"
    profile: dict = None
    spectrum: str = "shortwave"

    def model_parameters(self, params=None, spec=None):
        """Constructor parameters of a model: ``params`` plus its target transforms (those of the
        model ``spec`` when it has its own, else the recipe's)."""
        params = dict(params or {})
        transforms = spec.target_transforms if spec is not None and spec.target_transforms is not None \
            else self.target_transforms
        if transforms is not None:
            params["target_transforms"] = list(transforms)
        return params

    def feature_list(self, pairs):
        """The recipe's features, or all features of ``pairs`` when the recipe says "all"."""
        return list(self.features) if self.features is not None else feature_names(pairs)

    def family_list(self, pairs):
        """The families (regimes) to leave out in turn: the recipe's list, or every regime of ``pairs``.

        "all" with a single regime in the table gives an empty list: nothing to train on
        without it.
        """
        if self.left_out_families is not None:
            return list(self.left_out_families)
        regimes = sorted({str(r) for r in pairs["regime"].values})
        return regimes if len(regimes) > 1 else []


def read_recipe(path):
    """Read and check a training recipe file.

    Parameters
    ----------
    path : str or Path

    Returns
    -------
    TrainingRecipe

    Raises
    ------
    surrogate3d.errors.FormatError
        The file is missing or not TOML.
    surrogate3d.errors.ParameterError
        A key or value is wrong (named in the message).
    """
    path = Path(path)
    if not path.is_file():
        raise FormatError(f"training recipe {str(path)!r} does not exist")
    return parse_recipe(path.read_text(encoding="utf-8"), source=str(path))


def _fail(source, where, text):
    raise ParameterError(f"training recipe {source!r}: {where} {text}")


def _check_keys(source, where, table, allowed):
    if not isinstance(table, dict):
        _fail(source, where, f"must be a table; got {table!r}")
    unknown = sorted(set(table) - allowed)
    if unknown:
        _fail(source, where, f"has unknown keys {unknown}; allowed: {sorted(allowed)}")


def parse_recipe(text, source="<recipe>"):
    """Parse and check recipe text (TOML); see :func:`read_recipe`."""
    try:
        raw = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise FormatError(f"training recipe {source!r} is not valid TOML: {exc}") from None
    _check_keys(source, "the top level", raw, _TOP_KEYS)
    spectrum = raw.get("spectrum", "shortwave")
    if spectrum not in ("shortwave", "longwave"):
        _fail(source, "spectrum", f"must be 'shortwave' or 'longwave'; got {spectrum!r}")
    known = list(LONGWAVE_COLUMN_FLUXES) if spectrum == "longwave" else list(TARGETS)
    targets = raw.get("targets", known)
    if not isinstance(targets, list) or not targets or any(t not in known for t in targets) \
            or len(set(targets)) != len(targets):
        _fail(source, "targets", f"must be a non-empty list of distinct names from {known}; got {targets!r}")
    features = raw.get("features", "all")
    if features == "all":
        features = None
    elif not isinstance(features, list) or not features or not all(isinstance(f, str) for f in features) \
            or len(set(features)) != len(features):
        _fail(source, "features", f'must be "all" or a non-empty list of distinct feature names; got {features!r}')
    split = raw.get("split", {})
    _check_keys(source, "[split]", split, _SPLIT_KEYS)
    fraction = split.get("held_out_scene_fraction", 0.25)
    if isinstance(fraction, bool) or not isinstance(fraction, (int, float)) or not 0.0 <= fraction < 1.0:
        _fail(source, "split.held_out_scene_fraction", f"must be a number in [0, 1); got {fraction!r}")
    families = _families(source, split)
    split_seed = split.get("seed", 0)
    if isinstance(split_seed, bool) or not isinstance(split_seed, int) or split_seed < 0:
        _fail(source, "split.seed", f"must be an integer >= 0; got {split_seed!r}")
    cv = raw.get("cross_validation", {})
    _check_keys(source, "[cross_validation]", cv, _CV_KEYS)
    folds = cv.get("folds", 3)
    if isinstance(folds, bool) or not isinstance(folds, int) or folds < 2:
        _fail(source, "cross_validation.folds", f"must be an integer >= 2; got {folds!r}")
    grouping = cv.get("grouping", "scene")
    if grouping not in GROUPINGS:
        _fail(source, "cross_validation.grouping", f"must be one of {list(GROUPINGS)}; got {grouping!r}")
    models = raw.get("models")
    if not isinstance(models, dict) or not models:
        _fail(source, "[models]", "must define at least one model table, e.g. [models.ridge] with kind = \"ridge\"")
    specs = tuple(_model_spec(source, name, table, targets) for name, table in models.items())
    for label in ("name", "description"):
        if not isinstance(raw.get(label, ""), str):
            _fail(source, label, f"must be a string; got {raw[label]!r}")
    recipe = TrainingRecipe(name=raw.get("name", Path(source).stem), description=raw.get("description", ""),
                            targets=tuple(targets), features=None if features is None else tuple(features),
                            held_out_scene_fraction=float(fraction), left_out_families=families,
                            split_seed=split_seed, folds=folds, models=specs, text=text, source=source,
                            target_transforms=_transforms(source, raw.get("target_transforms"), targets),
                            grouping=grouping, profile=_profile(source, raw.get("profile"), spectrum),
                            spectrum=spectrum)
    return recipe


def profile_class(spectrum):
    """The profile model class of a spectrum: :class:`ProfileCorrection` or :class:`LongwaveProfileCorrection`."""
    return LongwaveProfileCorrection if spectrum == "longwave" else ProfileCorrection


def _profile(source, table, spectrum="shortwave"):
    """``[profile]``: the profile model's parameters, checked (None without the table)."""
    if table is None:
        return None
    cls = profile_class(spectrum)
    _check_keys(source, "[profile]" + (" of a longwave recipe" if spectrum == "longwave" else ""), table,
                set(cls().get_params()))
    for key, value in table.items():
        if isinstance(value, list):
            _fail(source, f"[profile] {key}", f"takes one value (the profile model has no search); got {value!r}")
    try:
        cls(**table)._boosted()
    except ParameterError as exc:
        _fail(source, "[profile]", str(exc))
    return dict(table)


def _transforms(source, table, targets, where="target_transforms"):
    """``[target_transforms.TARGET]`` tables (or those at ``where``) as a tuple in target order
    (None where a target has none), or None without any."""
    if table is None:
        return None
    if not isinstance(table, dict):
        _fail(source, f"[{where}]", f"must be a table of target names; got {table!r}")
    _check_keys(source, f"[{where}]", table, set(targets))
    for target, spec in table.items():
        try:
            check_transform(spec, f"[{where}.{target}]")
        except ParameterError as exc:
            raise ParameterError(f"training recipe {source!r}: {exc}") from None
    return tuple(table.get(target) for target in targets)


def _families(source, split):
    """``split.left_out_families`` (or the older ``held_out_regime``): a tuple of names, or None for all."""
    if "held_out_regime" in split:
        if "left_out_families" in split:
            _fail(source, "[split]", "has both held_out_regime (the older spelling) and left_out_families; keep "
                                     "left_out_families")
        regime = split["held_out_regime"]
        if not isinstance(regime, str) or not regime:
            _fail(source, "split.held_out_regime", f"must be a regime name; got {regime!r}")
        return (regime,)
    families = split.get("left_out_families", "all")
    if families == "all":
        return None
    if not isinstance(families, list) or not all(isinstance(f, str) and f for f in families) \
            or len(set(families)) != len(families):
        _fail(source, "split.left_out_families", f'must be "all" or a list of distinct regime names ([] for none); '
                                                 f"got {families!r}")
    return tuple(families)


def _model_spec(source, name, table, targets):
    where = f"[models.{name}]"
    if not _MODEL_NAME.match(name):
        _fail(source, where, "name must start with a letter or digit and hold only letters, digits, _ and -")
    if not isinstance(table, dict):
        _fail(source, where, f"must be a table; got {table!r}")
    table = dict(table)
    transforms = _transforms(source, table.pop("target_transforms", None), targets,
                             f"models.{name}.target_transforms")
    kind = table.get("kind")
    if kind not in MODEL_KINDS:
        _fail(source, f"{where} kind", f"must be one of {sorted(MODEL_KINDS)}; got {kind!r}")
    grid = {}
    for key, value in table.items():
        if key == "kind":
            continue
        if key in _LIST_PARAMETERS:
            values = value if isinstance(value, list) and value and all(isinstance(v, list) for v in value) \
                else [value]
        else:
            values = value if isinstance(value, list) else [value]
        if not values:
            _fail(source, f"{where} {key}", "is an empty list; give at least one value")
        grid[key] = values
    spec = ModelSpec(name=name, kind=kind, grid=grid, target_transforms=transforms)
    for params in spec.candidates():
        try:
            make_estimator(kind, params)
        except ParameterError as exc:
            _fail(source, where, str(exc))
    return spec


def check_recipe_against_pairs(recipe, pairs):
    """Check that a pairs table has the recipe's features, targets and left-out families.

    Raises
    ------
    surrogate3d.errors.ValidationError
        Naming the missing features or targets, or the unknown regime.
    """
    if table_spectrum(pairs) != recipe.spectrum:
        raise ValidationError(f"training recipe {recipe.source!r} is for the {recipe.spectrum}; the pairs table is "
                              f"a {table_spectrum(pairs)} table (set spectrum = \"{table_spectrum(pairs)}\" in the "
                              "recipe, or give the other table)")
    features = recipe.feature_list(pairs)
    check_has_features(pairs, features, needed_by=f"training recipe {recipe.source!r}")
    owners = [("target_transforms", recipe.target_transforms)] + [
        (f"models.{m.name}.target_transforms", m.target_transforms) for m in recipe.models]
    for where, transforms in owners:
        for target, spec in zip(recipe.targets, transforms or ()):
            unused = [f for f in transform_features(spec or {}) if f not in features]
            if unused:
                raise ValidationError(f"training recipe {recipe.source!r}: [{where}.{target}] reads {unused}, "
                                      "which are not among the recipe's features")
    for spec in recipe.models:
        for parameter in sorted(_LIST_PARAMETERS):
            for chosen in spec.grid.get(parameter, []):
                names = [c for c in (chosen or []) if isinstance(c, str)]
                missing = [c for c in names if c not in features]
                if missing:
                    raise ValidationError(f"training recipe {recipe.source!r}: [models.{spec.name}] {parameter} "
                                          f"names {missing}, which are not among the recipe's features")
    missing = [t for t in recipe.targets if t not in [str(v) for v in pairs["target"].values]]
    if missing:
        raise ValidationError(f"pairs table lacks targets {missing} named by training recipe {recipe.source!r}")
    if recipe.profile is not None:
        needed = list(LONGWAVE_LAYER_FIELDS.values()) + [LONGWAVE_LAYER_TARGET] if recipe.spectrum == "longwave" \
            else list(LAYER_FIELDS.values()) + ["layer_absorption_target"]
        lacking = [v for v in needed if v not in pairs]
        if lacking:
            raise ValidationError(f"training recipe {recipe.source!r} has a [profile] model but the pairs table has "
                                  f"no per-layer variables ({', '.join(lacking)}); build it from results with "
                                  "per-cell absorption (docs/pairs-format.md)")
    if recipe.left_out_families:
        regimes = sorted({str(r) for r in pairs["regime"].values})
        unknown = [f for f in recipe.left_out_families if f not in regimes]
        if unknown:
            raise ValidationError(f"training recipe {recipe.source!r}: split.left_out_families names "
                                  f"{unknown[0]!r}, which is not a regime of the pairs table; it has {regimes}")
        if len(regimes) < 2:
            raise ValidationError(f"training recipe {recipe.source!r}: split.left_out_families needs at least two "
                                  f"regimes in the pairs table; it has {regimes}")
