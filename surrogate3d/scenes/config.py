"""Scene-set configuration files (TOML): which regimes, how many scenes, which grid and optics.

A configuration lists regimes with optional overrides, the seeds to use, the grid and
the optics; ``surrogate3d scenes --config FILE`` reads it and the command-line options
override it.  Every key is documented in ``docs/scene-generator.md``; a sample is
``training/scenes-demo.toml``.  Unknown keys are errors, so that a misspelt key is not
silently ignored.
"""

import tomllib
from dataclasses import dataclass, field, fields, replace
from pathlib import Path

from ..errors import FormatError, ParameterError
from .regimes import REGIMES, CloudLayer, get_regime
from .structures import structure_from_dict

TOP_KEYS = {"out", "seed", "count", "grid", "optics", "regime"}
GRID_KEYS = {"nx", "ny", "nz", "dx", "top", "z_edge"}
OPTICS_KEYS = {"bands", "surface_albedo", "surface_pressure", "gas_absorption"}
REGIME_KEYS = {"name", "label", "count", "seed", "cloud_fraction", "mean_optical_depth",
               "cloud_top_variability", "layers"}
LAYER_KEYS = {f.name for f in fields(CloudLayer)}


@dataclass(frozen=True)
class RegimeEntry:
    """One regime of a scene set: the (possibly changed) regime and its seeds.

    Attributes
    ----------
    regime : Regime
        The regime with its overrides applied.
    seeds : tuple of int
        Seeds of the scenes to generate.
    """

    regime: object
    seeds: tuple


@dataclass
class SceneSetConfig:
    """A parsed scene-set configuration.

    Attributes
    ----------
    out : str or None
        Output directory.
    seed : int
        First seed of each regime (default 0).
    count : int
        Scenes per regime (default 1).
    grid : dict
        Keyword arguments of :func:`surrogate3d.scenes.generate_scene` for the grid.
    optics : dict
        Keyword arguments of :func:`surrogate3d.scenes.generate_scene` for the optics.
    regimes : list of dict
        The ``[[regime]]`` tables as read (name, label, count, seed and overrides).
    source : str
        Where the configuration came from (for messages).
    """

    out: str | None = None
    seed: int = 0
    count: int = 1
    grid: dict = field(default_factory=dict)
    optics: dict = field(default_factory=dict)
    regimes: list = field(default_factory=list)
    source: str = "command line"

    def generator_options(self):
        """Keyword arguments for :func:`surrogate3d.scenes.generate_scene` (grid and optics)."""
        return {**self.grid, **self.optics}

    def entries(self):
        """The regimes to generate, with overrides applied and seeds expanded.

        Returns
        -------
        list of RegimeEntry
        """
        out = []
        for i, table in enumerate(self.regimes):
            where = (f"--regime {table['name']}" if self.source == "command line"
                     else f"{self.source}: regime[{i}]")
            names = list(REGIMES) if table["name"] == "all" else [table["name"]]
            if table["name"] == "all" and table.get("label"):
                raise ParameterError(f"{where}: label cannot be used with name = 'all'")
            for name in names:
                regime = _apply(get_regime(name), table, where, skip_cloud_overrides=table["name"] == "all")
                first = table.get("seed", self.seed)
                count = table.get("count", self.count)
                out.append(RegimeEntry(regime, tuple(range(first, first + count))))
        labels = [e.regime.name for e in out]
        twice = sorted({n for n in labels if labels.count(n) > 1})
        if twice:
            raise ParameterError(f"{self.source}: regime {twice[0]!r} is listed twice; give one of them a "
                                 "label so that their files do not overwrite each other")
        return out


def _apply(regime, table, where, skip_cloud_overrides):
    """The regime with a table's layer overrides, main-layer overrides and label applied."""
    layers = list(regime.layers)
    for j, changes in enumerate(table.get("layers", [])):
        if j >= len(layers):
            raise ParameterError(f"{where}: layers[{j}] does not exist; regime {regime.name!r} has "
                                 f"{len(layers)} layers")
        if "structure" in changes:
            changes = dict(changes)
            changes["structure"] = structure_from_dict(changes["structure"], layers[j].structure,
                                                       f"{where} layers[{j}] structure")
        layers[j] = replace(layers[j], **changes)
        layers[j].validate(f"{where} layers[{j}]")
    regime = replace(regime, layers=tuple(layers))
    overrides = {k: table[k] for k in ("cloud_fraction", "mean_optical_depth", "cloud_top_variability")
                 if k in table}
    if overrides and not (skip_cloud_overrides and not regime.layers):
        try:
            regime = regime.with_overrides(**overrides)
        except ParameterError as exc:
            raise ParameterError(f"{where}: {exc}") from None
    if table.get("label"):
        regime = replace(regime, name=table["label"]).validate()
    return regime


def _check_keys(table, allowed, where):
    if not isinstance(table, dict):
        raise ParameterError(f"{where} must be a table; got {table!r}")
    unknown = sorted(set(table) - allowed)
    if unknown:
        raise ParameterError(f"{where} has unknown key {unknown[0]!r}; allowed: {', '.join(sorted(allowed))}")


def _check_int(value, where, low, high):
    if isinstance(value, bool) or not isinstance(value, int) or not low <= value <= high:
        raise ParameterError(f"{where} must be an integer in [{low}, {high}]; got {value!r}")
    return value


def parse_config(data, source="configuration"):
    """Check a configuration mapping (as read from TOML) and return a :class:`SceneSetConfig`.

    Parameters
    ----------
    data : dict
        The parsed TOML document.
    source : str
        Name used in messages (usually the file name).

    Returns
    -------
    SceneSetConfig

    Raises
    ------
    surrogate3d.errors.ParameterError
        Unknown keys or values of the wrong kind, naming the key.
    """
    _check_keys(data, TOP_KEYS, source)
    cfg = SceneSetConfig(source=source)
    if "out" in data:
        if not isinstance(data["out"], str) or not data["out"]:
            raise ParameterError(f"{source}: out must be a directory name; got {data['out']!r}")
        cfg.out = data["out"]
    cfg.seed = _check_int(data.get("seed", 0), f"{source}: seed", 0, 2 ** 62)
    cfg.count = _check_int(data.get("count", 1), f"{source}: count", 1, 100000)
    grid = data.get("grid", {})
    _check_keys(grid, GRID_KEYS, f"{source}: [grid]")
    cfg.grid = dict(grid)
    optics = data.get("optics", {})
    _check_keys(optics, OPTICS_KEYS, f"{source}: [optics]")
    cfg.optics = dict(optics)
    if "bands" in cfg.optics:
        cfg.optics["bands"] = tuple(cfg.optics["bands"])
    tables = data.get("regime", [])
    if not isinstance(tables, list):
        raise ParameterError(f"{source}: regime must be an array of tables ([[regime]]); got {tables!r}")
    for i, table in enumerate(tables):
        where = f"{source}: regime[{i}]"
        _check_keys(table, REGIME_KEYS, where)
        if "name" not in table:
            raise ParameterError(f"{where} needs a name (one of {', '.join(REGIMES)}, or 'all')")
        if table["name"] != "all" and table["name"] not in REGIMES:
            raise ParameterError(f"{where}: name must be one of {', '.join(REGIMES)} or 'all'; got {table['name']!r}")
        if "count" in table:
            _check_int(table["count"], f"{where} count", 1, 100000)
        if "seed" in table:
            _check_int(table["seed"], f"{where} seed", 0, 2 ** 62)
        layers = table.get("layers", [])
        if not isinstance(layers, list):
            raise ParameterError(f"{where} layers must be an array of tables; got {layers!r}")
        for j, layer in enumerate(layers):
            _check_keys(layer, LAYER_KEYS, f"{where} layers[{j}]")
            if "structure" in layer and not isinstance(layer["structure"], dict):
                raise ParameterError(f"{where} layers[{j}] structure must be a table (kind and parameters); "
                                     f"got {layer['structure']!r}")
    cfg.regimes = [dict(t) for t in tables]
    return cfg


def load_config(path):
    """Read a scene-set configuration file (TOML).

    Parameters
    ----------
    path : str or Path

    Returns
    -------
    SceneSetConfig

    Raises
    ------
    surrogate3d.errors.FormatError
        The file is missing or not valid TOML.
    surrogate3d.errors.ParameterError
        Unknown keys or bad values.

    Examples
    --------
    >>> cfg = load_config("training/scenes-demo.toml")        # doctest: +SKIP
    >>> [e.regime.name for e in cfg.entries()]                 # doctest: +SKIP
    """
    path = Path(path)
    if not path.is_file():
        raise FormatError(f"configuration file {str(path)!r} does not exist")
    try:
        with path.open("rb") as fh:
            data = tomllib.load(fh)
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise FormatError(f"configuration file {str(path)!r} is not valid TOML: {exc}") from None
    return parse_config(data, source=str(path))
