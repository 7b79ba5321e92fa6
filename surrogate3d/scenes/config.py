"""Scene-set configuration files (TOML): which regimes, how many scenes, which grid and optics.

A configuration lists regimes with optional overrides, the seeds to use, the grid and
the optics; ``surrogate3d scenes --config FILE`` reads it and the command-line options
override it.  Every key is documented in ``docs/scene-generator.md``; a sample is
``training/scenes-demo.toml``.  Unknown keys are errors, so that a misspelt key is not
silently ignored.  Optics values may be drawn per scene from a range or a list
(:mod:`surrogate3d.scenes.draws`); :meth:`SceneSetConfig.scene_options` gives the
options of one scene.
"""

import tomllib
from dataclasses import dataclass, field, fields, replace
from pathlib import Path

from ..core.validation import check_integer, check_option
from ..errors import FormatError, ParameterError
from .draws import check_draws, contains_draw, draw_stream, is_draw, resolve
from .generator import SURFACE_TEMPERATURE_RANGE, generate_scene
from .optics import BANDS
from .optics_sets import OPTICS_SETS, get_optics_set
from .regimes import REGIMES, CloudLayer, get_regime
from .structures import structure_from_dict
from .surface import SURFACE_LONGWAVE_EMISSIVITY, SURFACE_PATTERNS, SurfacePattern

TOP_KEYS = {"out", "seed", "count", "grid", "optics", "regime"}
GRID_KEYS = {"nx", "ny", "nz", "dx", "top", "z_edge"}
OPTICS_KEYS = {"bands", "surface_albedo", "surface_pressure", "gas_absorption", "optics_set", "surface_pattern",
               "surface_temperature", "surface_longwave_emissivity", "surface_relative_humidity"}
SURFACE_PATTERN_KEYS = {f.name for f in fields(SurfacePattern)}
#: Declared ranges of the scenes per regime and of the first seed.
COUNT_RANGE = (1, 100_000)
SEED_RANGE = (0, 2**62)

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
        """Keyword arguments for :func:`surrogate3d.scenes.generate_scene` (grid and optics).

        Raises
        ------
        surrogate3d.errors.ParameterError
            When the optics hold per-scene draws: use :meth:`scene_options`.
        """
        if contains_draw(self.optics):
            raise ParameterError(f"{self.source}: [optics] draws values per scene; use scene_options(regime, seed)")
        return self.scene_options(None, None)

    def scene_options(self, regime_name, seed):
        """Keyword arguments for :func:`surrogate3d.scenes.generate_scene` for one scene.

        Draws in the optics are made with the scene's seed (:mod:`surrogate3d.scenes.draws`).
        With an ``optics_set``, entries of per-band albedo tables for bands the set does
        not use are dropped, so that one table serves every set.

        Parameters
        ----------
        regime_name : str or None
            The regime's name (after any label); ``None`` only without draws.
        seed : int or None
            The scene's seed; ``None`` only without draws.

        Returns
        -------
        dict
        """
        optics = {key: resolve(value, draw_stream(seed, regime_name, key)) if contains_draw(value) else value
                  for key, value in self.optics.items()}
        if "bands" in optics:
            optics["bands"] = tuple(optics["bands"])
        if optics.get("optics_set") is not None:
            used = set(get_optics_set(optics["optics_set"]).bands)
            if "surface_albedo" in optics:
                optics["surface_albedo"] = _only_bands(optics["surface_albedo"], used)
            if isinstance(optics.get("surface_pattern"), dict) and "contrast_albedo" in optics["surface_pattern"]:
                pattern = dict(optics["surface_pattern"])
                pattern["contrast_albedo"] = _only_bands(pattern["contrast_albedo"], used)
                optics["surface_pattern"] = pattern
        return {**self.grid, **optics}

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

    def scenes(self):
        """Every scene of the set, in order, as ``(file name, regime, seed)``.

        The file name, ``<regime>_<seed:05d>.nc``, is the scene's label in the archive.

        Raises
        ------
        surrogate3d.errors.ParameterError
            As :meth:`entries`.
        """
        return [(f"{entry.regime.name}_{seed:05d}.nc", entry.regime, seed) for entry in self.entries()
                for seed in entry.seeds]

    def generate(self, regime, seed):
        """One scene of the set (an xarray Dataset), with its grid, optics and draws.

        Parameters
        ----------
        regime : surrogate3d.scenes.Regime
            From :meth:`scenes`.
        seed : int
        """
        return generate_scene(regime, seed, **self.scene_options(regime.name, seed))


def _only_bands(value, bands):
    """A per-band table restricted to ``bands``; any other value unchanged."""
    if isinstance(value, dict) and value and set(value) <= set(BANDS):
        return {band: v for band, v in value.items() if band in bands}
    return value


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


def _check_albedo(value, where):
    """Albedo values (possibly drawn, possibly per band) in [0, 1], band tables naming known bands."""
    check_draws(value, where, 0.0, 1.0)
    if is_draw(value):
        kind, arg = next(iter(value.items()))
        for i, option in enumerate(arg if kind == "choice" else []):
            _check_albedo(option, f"{where} choice[{i}]")
    elif isinstance(value, dict):
        unknown = sorted(set(value) - set(BANDS))
        if unknown:
            raise ParameterError(f"{where} names band {unknown[0]!r}; bands are {', '.join(BANDS)}")


def _check_emissivity(value, where):
    """An emissivity setting (possibly drawn): numbers in [0, 1] or kinds of surface."""
    check_draws(value, where, 0.0, 1.0)
    for option in _choices(value):
        if isinstance(option, str):
            check_option(where, option, SURFACE_LONGWAVE_EMISSIVITY)


def _choices(value):
    """The values a (possibly drawn) setting can take."""
    if is_draw(value) and "choice" in value:
        return [c for option in value["choice"] for c in _choices(option)]
    return [value]


def _check_optics(optics, where):
    """Check the [optics] table up front: draws, ranges, optics-set names, surface pattern keys."""
    for key, value in optics.items():
        if key not in ("surface_albedo", "surface_pressure", "surface_pattern", "surface_temperature",
                       "surface_longwave_emissivity", "surface_relative_humidity"):
            check_draws(value, f"{where} {key}")
    if "surface_albedo" in optics:
        _check_albedo(optics["surface_albedo"], f"{where} surface_albedo")
    if "surface_pressure" in optics:
        check_draws(optics["surface_pressure"], f"{where} surface_pressure", 10000.0, 120000.0)
    if "surface_temperature" in optics:
        check_draws(optics["surface_temperature"], f"{where} surface_temperature", *SURFACE_TEMPERATURE_RANGE)
    if "surface_relative_humidity" in optics:
        check_draws(optics["surface_relative_humidity"], f"{where} surface_relative_humidity", 0.0, 1.0)
    if "surface_longwave_emissivity" in optics:
        _check_emissivity(optics["surface_longwave_emissivity"], f"{where} surface_longwave_emissivity")
    if "optics_set" in optics:
        for name in _choices(optics["optics_set"]):
            check_option(f"{where} optics_set", name, OPTICS_SETS)
        both = sorted({"bands", "gas_absorption"} & set(optics))
        if both:
            raise ParameterError(f"{where}: optics_set sets bands and gas_absorption; remove {both[0]}")
    if "surface_pattern" in optics:
        pattern = optics["surface_pattern"]
        _check_keys(pattern, SURFACE_PATTERN_KEYS, f"{where} surface_pattern")
        for kind in _choices(pattern.get("kind", "uniform")):
            check_option(f"{where} surface_pattern kind", kind, SURFACE_PATTERNS)
        if "contrast_albedo" in pattern:
            _check_albedo(pattern["contrast_albedo"], f"{where} surface_pattern contrast_albedo")
        if "contrast_emissivity" in pattern:
            _check_emissivity(pattern["contrast_emissivity"], f"{where} surface_pattern contrast_emissivity")
        check_draws(pattern.get("scale", 1.0), f"{where} surface_pattern scale", 1e-9, 1e7)
        check_draws(pattern.get("fraction", 0.5), f"{where} surface_pattern fraction", 0.0, 1.0)


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
    cfg.seed = check_integer(f"{source}: seed", data.get("seed", 0), *SEED_RANGE)
    cfg.count = check_integer(f"{source}: count", data.get("count", 1), *COUNT_RANGE)
    grid = data.get("grid", {})
    _check_keys(grid, GRID_KEYS, f"{source}: [grid]")
    cfg.grid = dict(grid)
    optics = data.get("optics", {})
    _check_keys(optics, OPTICS_KEYS, f"{source}: [optics]")
    _check_optics(optics, f"{source}: [optics]")
    cfg.optics = dict(optics)
    if "bands" in cfg.optics and not contains_draw(cfg.optics["bands"]):
        cfg.optics["bands"] = tuple(cfg.optics["bands"])
    tables = data.get("regime", [])
    if not isinstance(tables, list):
        raise ParameterError(f"{source}: regime must be an array of tables ([[regime]]); got {tables!r}")
    for i, table in enumerate(tables):
        where = f"{source}: regime[{i}]"
        _check_keys(table, REGIME_KEYS, where)
        if "name" not in table:
            raise ParameterError(f"{where} needs a name (one of {', '.join(REGIMES)}, or 'all')")
        check_option(f"{where}: name", table["name"], (*REGIMES, "all"))
        if "count" in table:
            check_integer(f"{where} count", table["count"], *COUNT_RANGE)
        if "seed" in table:
            check_integer(f"{where} seed", table["seed"], *SEED_RANGE)
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
    >>> cfg = load_config("training/scenes-demo.toml")
    >>> [e.regime.name for e in cfg.entries()][:3]
    ['scattered_cumulus', 'broken_stratocumulus', 'deep_convection']
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
