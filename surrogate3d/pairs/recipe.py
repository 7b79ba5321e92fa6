"""Feature recipes: which features, in which order, with which parameters (numpy-free, stdlib only).

A recipe is serializable to JSON and to plain dicts of strings, numbers and lists (so
it can be written into TOML training recipes and into coefficient files), and carries
a version so that a file written by a later, incompatible library is refused.
"""

import json
from pathlib import Path

from ..core.data_model import RECIPE_VERSION
from ..core.validation import check_number, check_option, fail
from ..errors import FormatError, ParameterError
from .features import DEFAULT_FEATURES, FEATURES, column_name


#: Parameters of the features and their defaults.
DEFAULT_PARAMETERS = {
    "neighbour_radii": [1000.0, 3000.0, 10000.0],
    "edge_cloud_fraction": 0.5,
    "edge_distance_cap": 10000.0,
    "layer_cloud_fraction_threshold": 0.0,
    "cloud_side_distance": 2000.0,
    "host_fluxes": "monte_carlo",
}

#: Kinds of independent-column fluxes a host passes (``docs/features.md``, "Host fluxes").
HOST_FLUX_KINDS = ("monte_carlo", "two_stream_host")

#: Declared ranges of the real feature parameters: name -> (low, high, low_open, high_open).
_PARAMETER_RANGES = {"edge_cloud_fraction": (0.0, 1.0, True, False), "edge_distance_cap": (0.0, None, True, False),
                     "layer_cloud_fraction_threshold": (0.0, 1.0, False, True),
                     "cloud_side_distance": (0.0, None, True, False)}


def _check_parameter(name, value):
    label = f"feature parameter {name}"
    if name == "host_fluxes":
        return check_option(label, value, HOST_FLUX_KINDS)
    if name == "neighbour_radii":
        if not isinstance(value, (list, tuple)) or not value:
            fail(label, "a non-empty list of distinct positive distances in m", value)
        radii = [check_number(f"{label}[{i}]", r, 0.0, None, low_open=True) for i, r in enumerate(value)]
        if len(set(radii)) != len(radii):
            fail(label, "a list of distinct distances in m", value)
        return radii
    return check_number(label, value, *_PARAMETER_RANGES[name])


class FeatureRecipe:
    """An ordered list of feature names plus their parameters.

    Parameters
    ----------
    features : sequence of str
        Feature names from :data:`surrogate3d.pairs.features.FEATURES`, in column order.
    parameters : dict, optional
        Overrides of :data:`DEFAULT_PARAMETERS` (radii and distances in m).
    name : str
        A label for the recipe.
    version : int
        Recipe layout version; only :data:`RECIPE_VERSION` is accepted.

    Raises
    ------
    surrogate3d.errors.ParameterError
        Unknown feature or parameter names (listing the known ones), duplicates, or a
        parameter outside its allowed range.

    Examples
    --------
    >>> r = FeatureRecipe(["cloud_fraction", "neighbour_mean_cloud_fraction"],
    ...                   {"neighbour_radii": [2000.0]})
    >>> r.column_names()
    ['cloud_fraction', 'neighbour_mean_cloud_fraction_2000m']
    >>> FeatureRecipe.from_json(r.to_json()) == r
    True
    """

    def __init__(self, features, parameters=None, name="custom", version=RECIPE_VERSION):
        if isinstance(features, str) or not all(isinstance(f, str) for f in features):
            raise ParameterError(f"features must be a list of feature names; got {features!r}")
        features = list(features)
        unknown = [f for f in features if f not in FEATURES]
        if unknown:
            raise ParameterError(f"unknown feature name(s) {unknown}; known features: {', '.join(FEATURES)}")
        duplicates = sorted({f for f in features if features.count(f) > 1})
        if duplicates:
            raise ParameterError(f"features lists {duplicates} more than once")
        if version != RECIPE_VERSION:
            raise ParameterError(f"recipe version must be {RECIPE_VERSION}; got {version!r}")
        given = dict(parameters or {})
        unknown = sorted(set(given) - set(DEFAULT_PARAMETERS))
        if unknown:
            raise ParameterError(f"unknown feature parameter(s) {unknown}; known parameters: "
                                 f"{', '.join(DEFAULT_PARAMETERS)}")
        merged = {}
        for key, default in DEFAULT_PARAMETERS.items():
            merged[key] = _check_parameter(key, given.get(key, default))
        self.features = tuple(features)
        self.parameters = merged
        self.name = str(name)
        self.version = int(version)

    def __eq__(self, other):
        return isinstance(other, FeatureRecipe) and self.to_dict() == other.to_dict()

    def __repr__(self):
        return f"FeatureRecipe(name={self.name!r}, features={len(self.features)}, columns={len(self.column_names())})"

    def column_names(self):
        """Names of the feature-matrix columns: per-radius features expand to one column per radius."""
        names = []
        for f in self.features:
            radii = self.parameters["neighbour_radii"] if FEATURES[f].per_radius else [None]
            names.extend(column_name(f, r) for r in radii)
        return names

    def column_features(self):
        """The feature that makes each feature-matrix column, in the order of :meth:`column_names`."""
        out = []
        for f in self.features:
            out.extend([f] * (len(self.parameters["neighbour_radii"]) if FEATURES[f].per_radius else 1))
        return out

    def column_units(self):
        """Units of each feature-matrix column, in the order of :meth:`column_names`."""
        units = []
        for f in self.features:
            count = len(self.parameters["neighbour_radii"]) if FEATURES[f].per_radius else 1
            units.extend([FEATURES[f].units] * count)
        return units

    def to_dict(self):
        """Plain dict (strings, numbers and lists only: JSON- and TOML-friendly)."""
        return {"name": self.name, "version": self.version, "features": list(self.features),
                "parameters": {k: (list(v) if isinstance(v, list) else v) for k, v in self.parameters.items()}}

    @classmethod
    def from_dict(cls, data):
        """Recipe from :meth:`to_dict` output (for example a ``[features]`` table of a TOML file)."""
        if not isinstance(data, dict) or "features" not in data:
            raise ParameterError(f"a feature recipe must be a mapping with a 'features' list; got {data!r}")
        unknown = sorted(set(data) - {"name", "version", "features", "parameters"})
        if unknown:
            raise ParameterError(f"unknown recipe key(s) {unknown}; known keys: name, version, features, parameters")
        return cls(data["features"], data.get("parameters"), name=data.get("name", "custom"),
                   version=data.get("version", RECIPE_VERSION))

    def to_json(self):
        """The recipe as a JSON string."""
        return json.dumps(self.to_dict(), sort_keys=False)

    @classmethod
    def from_json(cls, text):
        """Recipe from a JSON string."""
        try:
            data = json.loads(text)
        except json.JSONDecodeError as exc:
            raise FormatError(f"feature recipe is not valid JSON: {exc}") from None
        return cls.from_dict(data)

    @classmethod
    def read(cls, path):
        """Read a recipe from a ``.json`` or ``.toml`` file.

        A TOML file holds the recipe at its top level or in a ``[feature_recipe]`` table.

        Raises
        ------
        surrogate3d.errors.FormatError
            Missing, unreadable or malformed file.
        """
        path = Path(path)
        if not path.is_file():
            raise FormatError(f"feature recipe file {str(path)!r} does not exist")
        text = path.read_text(encoding="utf-8")
        if path.suffix.lower() == ".toml":
            import tomllib

            try:
                data = tomllib.loads(text)
            except tomllib.TOMLDecodeError as exc:
                raise FormatError(f"feature recipe file {str(path)!r} is not valid TOML: {exc}") from None
            return cls.from_dict(data.get("feature_recipe", data))
        try:
            return cls.from_json(text)
        except FormatError as exc:
            raise FormatError(f"feature recipe file {str(path)!r}: {exc}") from None

    def write(self, path):
        """Write the recipe as JSON (atomically)."""
        from .._atomic import write_text_atomic

        write_text_atomic(path, json.dumps(self.to_dict(), indent=2) + "\n")


def default_recipe():
    """The default recipe: every registered feature but the physical priors, in registry order, default parameters.

    The priors (``direct_beam_prior`` and its two corrections) are opt-in: list them in
    a recipe (``docs/features.md``).

    Returns
    -------
    FeatureRecipe
    """
    return FeatureRecipe(list(DEFAULT_FEATURES), name="default")
