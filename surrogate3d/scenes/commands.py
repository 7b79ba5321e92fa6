"""``surrogate3d scenes`` (generate scene files) and ``surrogate3d show`` (picture of a scene)."""

import sys
from pathlib import Path

from ..core.validation import check_integer, check_number, check_option
from ..errors import ParameterError, Surrogate3DError

#: Main-layer overrides: attribute, option, allowed range (low, high, low end open).
_OVERRIDES = (("cloud_fraction", "--cloud-fraction", (0.0, 1.0, False)),
              ("mean_optical_depth", "--optical-depth", (0.0, 10000.0, True)),
              ("cloud_top_variability", "--cloud-top-variability", (0.0, 5.0, False)))
_GRID_OPTIONS = (("nx", "--nx", int), ("ny", "--ny", int), ("nz", "--nz", int), ("dx", "--dx", float),
                 ("top", "--top", float))


def register(sub):
    from .regimes import REGIMES

    p = sub.add_parser(
        "scenes", help="generate synthetic 3D cloud scenes of named regimes",
        description="Generate scene files DIR/<regime>_<seed>.nc for seeds S, S+1, ... of each regime. "
                    "Command-line options override the configuration file. Regimes: " + ", ".join(REGIMES) + ".")
    p.add_argument("--out", metavar="DIR", help="output directory (created if missing)")
    p.add_argument("--regime", metavar="NAME", action="append",
                   help="regime to generate (repeatable), or 'all' for every regime")
    p.add_argument("--count", metavar="N", help="scenes per regime (default 1)")
    p.add_argument("--seed", metavar="S", help="first seed (default 0)")
    p.add_argument("--nx", metavar="N", help="columns in x (default 64)")
    p.add_argument("--ny", metavar="N", help="columns in y (default 64)")
    p.add_argument("--nz", metavar="N", help="layers (default 40)")
    p.add_argument("--dx", metavar="M", help="horizontal cell size in m (default 100)")
    p.add_argument("--top", metavar="M", help="domain top in m (default: the regime's, 4000 or 12000)")
    p.add_argument("--cloud-fraction", metavar="F",
                   help="cloud fraction of the main cloud layer, in [0, 1] (not applied to 'clear' under 'all')")
    p.add_argument("--optical-depth", metavar="TAU", dest="mean_optical_depth",
                   help="mean optical depth of the main layer's cloudy columns")
    p.add_argument("--cloud-top-variability", metavar="V",
                   help="coefficient of variation of the main layer's cloud thickness, in [0, 5]")
    p.add_argument("--config", metavar="FILE", help="scene-set configuration (TOML, see docs/scene-generator.md)")
    p.add_argument("--overwrite", action="store_true",
                   help="replace scene files that hold results (their results are dropped)")
    p.add_argument("--quiet", action="store_true", help="no progress bar and no per-file lines")
    p.set_defaults(func=run_scenes, interrupted="no scene file was written",
                   parameter_flags={key: option for key, option, _ in _GRID_OPTIONS})

    p = sub.add_parser("show", help="draw a scene file: column optical depth map and a vertical cross-section")
    p.add_argument("file", metavar="FILE", help="scene file (*.nc)")
    p.add_argument("--out", metavar="PNG", required=True, help="output picture (PNG)")
    p.add_argument("--row", metavar="R", help="y index of the cross-section (default: the cloudiest row)")
    p.add_argument("--band", metavar="NAME", help="band to draw (default: the first band)")
    p.set_defaults(func=run_show)


def _number(text, option, kind):
    """Convert an option's text to int or float, raising ParameterError naming the option."""
    if text is None:
        return None
    try:
        return kind(text)
    except (TypeError, ValueError):
        what = "an integer" if kind is int else "a number"
        raise ParameterError(f"{option} must be {what}; got {text!r}") from None


def _scene_set(args):
    """The scene-set configuration: the config file (if any) overridden by the options."""
    from .config import COUNT_RANGE, SEED_RANGE, SceneSetConfig, load_config
    from .regimes import REGIMES

    cfg = load_config(args.config) if args.config else SceneSetConfig()
    if args.out:
        cfg.out = args.out
    if not cfg.out:
        raise ParameterError("--out is required (or set out in the configuration file)")
    for key, option, kind in _GRID_OPTIONS:
        value = _number(getattr(args, key), option, kind)
        if value is not None:
            cfg.grid[key] = value
    if args.nz is not None or args.top is not None:
        # Explicit layer edges of the configuration give way to --nz/--top.
        cfg.grid.pop("z_edge", None)
    count = _number(args.count, "--count", int)
    seed = _number(args.seed, "--seed", int)
    if count is not None:
        check_integer("--count", count, *COUNT_RANGE)
    if seed is not None:
        check_integer("--seed", seed, *SEED_RANGE)
    if args.regime:
        for name in args.regime:
            check_option("--regime", name, (*REGIMES, "all"))
        cfg.regimes = [{"name": name} for name in dict.fromkeys(args.regime)]
        if "all" in args.regime:
            cfg.regimes = [{"name": "all"}]
    if not cfg.regimes:
        raise ParameterError("no regime given: use --regime NAME (or 'all'), or a configuration with "
                             "[[regime]] tables")
    overrides = {}
    for key, option, (low, high, low_open) in _OVERRIDES:
        value = _number(getattr(args, key), option, float)
        if value is None:
            continue
        overrides[key] = check_number(option, value, low, high, low_open=low_open)
    for table in cfg.regimes:
        table.update(overrides)
        if count is not None:
            table["count"] = count
        if seed is not None:
            table["seed"] = seed
    return cfg


def _stored_results(path):
    """Results a scene file holds (stored and pending), or None if it cannot be read."""
    from ..archive.longwave_results import completed_longwave
    from ..archive.netcdf import read_result_flags
    from ..archive.pending import pending_keys
    from ..archive.results import completed
    from ..errors import FormatError

    try:
        flags = read_result_flags(path)
        return len(completed(flags)) + len(completed_longwave(flags)) + len(pending_keys(path))
    except FormatError:
        return None


def _check_replacements(paths, overwrite):
    """Refuse to replace scene files holding results unless ``overwrite``; returns the lines saying what is dropped."""
    held = {path: _stored_results(path) for path in paths if path.exists()}
    held = {path: n for path, n in held.items() if n != 0}
    describe = {path: ("cannot be read" if n is None else f"holds {n} result{'s' if n != 1 else ''}")
                for path, n in held.items()}
    if held and not overwrite:
        first = ", ".join(f"{path.name} {text}" for path, text in list(describe.items())[:3])
        more = f" and {len(held) - 3} more" if len(held) > 3 else ""
        raise Surrogate3DError(f"{len(held)} existing scene file{'s' if len(held) != 1 else ''} would be replaced "
                               f"({first}{more}); use --overwrite to replace them and drop their results, or "
                               "choose another --out")
    return [f"replaced {path}: it {text.replace('holds', 'held')}, now dropped" for path, text in describe.items()]


def run_scenes(args):
    import shutil
    from contextlib import ExitStack

    from tqdm import tqdm

    from .._outputs import check_output_directory, staged_directory
    from ..archive import write_scene
    from ..archive.locking import ArchiveLock
    from ..archive.pending import pending_dir

    cfg = _scene_set(args)
    jobs = cfg.scenes()
    out = check_output_directory(cfg.out, "--out")
    targets = [out / name for name, _, _ in jobs]
    written = []
    with ExitStack() as stack:
        if out.is_dir():
            # No simulate run may merge results into a file this run replaces.
            lock = stack.enter_context(ArchiveLock(out))
            lock.hold_archive(exclusive=True, what="scenes")
        dropped = _check_replacements(targets, args.overwrite)
        bar = stack.enter_context(tqdm(total=len(jobs), desc="scenes", unit="scene", file=sys.stderr,
                                       disable=True if args.quiet else None))
        with staged_directory(out) as staging:
            for (_, regime, seed), path in zip(jobs, targets):
                scene = cfg.generate(regime, seed)
                write_scene(scene, staging / path.name, validate=False)
                written.append((path, scene.attrs["total_cloud_fraction"]))
                bar.update(1)
            for path in targets:
                # Results of a replaced file must not be merged into the new scene.
                shutil.rmtree(pending_dir(path), ignore_errors=True)
    for line in dropped:
        print(line, file=sys.stderr)
    if not args.quiet:
        for path, fraction in written:
            print(f"wrote {path}  (cloud fraction {fraction:.3f})")
    print(f"wrote {len(written)} scene file{'s' if len(written) != 1 else ''} to {out}")


def run_show(args):
    from ..archive import read_scene
    from .plotting import plot_scene

    scene = read_scene(args.file)
    row = _number(args.row, "--row", int)
    target = Path(args.out)
    if target.suffix.lower() != ".png":
        raise ParameterError(f"--out must name a .png file; got {args.out!r}")
    target.parent.mkdir(parents=True, exist_ok=True)
    plot_scene(scene, target, row=row, band=args.band)
    print(f"wrote {target}")
