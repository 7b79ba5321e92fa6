"""The embedded default run: synthetic scenes -> benchmarks -> pairs -> models -> report -> export,
for the shortwave and then the longwave correction.

Every stage writes into one output directory and is skipped on a second run when its
output is already there and up to date, so an interrupted demo continues where it stopped.
The settings live in ``surrogate3d/data/demo*.toml``.
"""

import json
import os
import sys
import time
import tomllib
from dataclasses import dataclass
from importlib import resources
from pathlib import Path

from ._atomic import write_text_atomic
from ._outputs import staged_directory
from .core.data_model import (COEFFICIENT_FORMAT_VERSION, LONGWAVE_PAIRS_FORMAT_VERSION, MODEL_FORMAT_VERSION,
                              PAIRS_FORMAT_VERSION)
from .core.validation import check_integer
from .errors import Surrogate3DError

STAGES = ("scenes", "simulate", "pairs", "train", "evaluate", "export", "longwave")


@dataclass
class DemoPaths:
    """Where the demo writes each stage's output."""

    root: Path

    @property
    def archive(self):
        return self.root / "archive"

    @property
    def pairs(self):
        return self.root / "pairs.nc"

    @property
    def models(self):
        return self.root / "models"

    @property
    def report(self):
        return self.root / "report"

    @property
    def export(self):
        return self.root / "export"

    @property
    def formats(self):
        return self.root / "formats.txt"

    @property
    def recipe(self):
        return self.root / "recipe.toml"

    @property
    def summary(self):
        return self.root / "summary.md"

    def longwave(self, name):
        """The longwave counterpart of a stage's output: ``longwave/<name>``."""
        return self.root / "longwave" / name


def _data(name):
    return resources.files("surrogate3d").joinpath("data", name).read_text(encoding="utf-8")


def demo_settings(quick=False):
    """The demo's settings: scene set, simulate, pairs and evaluate options, recipe text."""
    from .pairs.recipe import FeatureRecipe
    from .scenes.config import parse_config

    settings = tomllib.loads(_data("demo.toml"))
    scenes = tomllib.loads(_data("demo-scenes.toml"))
    recipe = _data("demo-recipe.toml")
    if quick:
        q = settings["quick"]
        scenes["grid"] = dict(q["grid"])
        scenes["count"] = q["count"]
        scenes["regime"] = [{"name": name} for name in q["regimes"]]
        settings["simulate"].update(zeniths=q["zeniths"], photons=q["photons"])
        settings["pairs"]["host_resolutions"] = q["host_resolutions"]
        settings["evaluate"].update({k: q[k] for k in ("learning_curve_points", "importance_repeats", "map_scenes")})
        settings["longwave"].update(photons=q["longwave_photons"],
                                    spectral_resolution=q["longwave_spectral_resolution"],
                                    host_resolutions=q["host_resolutions"])
    settings["scenes"] = parse_config(scenes, source="demo-scenes.toml")
    settings["feature_recipe"] = FeatureRecipe.from_dict(tomllib.loads(_data("demo-features.toml")))
    settings["recipe"] = recipe
    settings["longwave_recipe"] = _data("demo-longwave-recipe.toml")
    return settings


class _Stages:
    """Prints one line per stage with its duration; tells whether a stage was reused."""

    def __init__(self, quiet):
        self.quiet = quiet
        self.started = time.perf_counter()

    def begin(self, number, name, text):
        self.t0 = time.perf_counter()
        if not self.quiet:
            print(f"[{number}/{len(STAGES)}] {name}: {text}", file=sys.stderr, flush=True)

    def end(self, text):
        if not self.quiet:
            print(f"      {text} ({time.perf_counter() - self.t0:.0f} s)", file=sys.stderr, flush=True)


def _make_scenes(cfg, archive, quiet):
    from tqdm.auto import tqdm

    from .archive import write_scene

    archive.mkdir(parents=True, exist_ok=True)
    jobs = cfg.scenes()
    made = 0
    for name, regime, seed in tqdm(jobs, desc="scenes", unit="scene", disable=quiet or None):
        path = archive / name
        if path.is_file():
            continue
        write_scene(cfg.generate(regime, seed), path, validate=False)
        made += 1
    return made, len(jobs)


def _warm_up_compiled_kernels():
    # Compile (or load from cache) the Monte Carlo kernels once in this process, so that
    # parallel workers starting together find them in the cache instead of each compiling.
    import numpy as np

    from .scenes import make_scene
    from .solvers import solve_monte_carlo

    scene = make_scene(np.full((1, 2, 2, 2), 1e-3), 0.9, 0.8, [0.0, 500.0, 1000.0], 100.0, 100.0)
    solve_monte_carlo(scene, 30.0, photons=200, threads=1)
    solve_monte_carlo(scene, 30.0, photons=200, threads=1, independent_columns=True)


def _pairs_up_to_date(pairs, fingerprint, feature_recipe, format_version, resolutions):
    """Whether the stored pairs table is what building it again would give: the same
    archive, feature recipe, host resolutions and table format (a table written by an
    older format lacks variables that later stages read)."""
    import numpy as np

    from .core.netcdf import open_dataset

    if not pairs.is_file():
        return False
    try:
        attrs = open_dataset(pairs).attrs
    except Surrogate3DError:
        return False
    stored = attrs.get("host_resolutions", [])
    try:
        # Tables store the resolutions as JSON text; a number or a list of numbers is read too.
        stored = np.atleast_1d(np.asarray(json.loads(stored) if isinstance(stored, str) else stored, dtype=float))
    except (TypeError, ValueError):
        return False
    return (attrs.get("archive_fingerprint") == fingerprint and attrs.get("feature_recipe") == feature_recipe.to_json()
            and str(attrs.get("format_version")) == format_version
            and stored.shape == (len(resolutions),) and np.allclose(stored, resolutions, rtol=0.0, atol=1e-9))


def _training_up_to_date(models, pairs, recipe):
    from .learn.model_directory import file_sha256

    record = models / "training.json"
    if not record.is_file():
        return False
    try:
        provenance = json.loads(record.read_text())["provenance"]
    except (OSError, ValueError, KeyError):
        return False
    return provenance.get("pairs_sha256") == file_sha256(pairs) and provenance.get("recipe_text") == recipe.read_text()


#: The file formats of this version, written beside a finished demo: reports and exports made
#: under other formats (an older ridge evaluation, say) are made again instead of reused.
FORMATS = (f"pairs {PAIRS_FORMAT_VERSION}, longwave pairs {LONGWAVE_PAIRS_FORMAT_VERSION}, "
           f"models {MODEL_FORMAT_VERSION}, coefficients {COEFFICIENT_FORMAT_VERSION}\n")


def _same_formats(paths):
    return paths.formats.is_file() and paths.formats.read_text() == FORMATS


def _newer(target, source):
    return target.exists() and target.stat().st_mtime >= source.stat().st_mtime


def run_demo(out, quick=False, jobs=None, quiet=False):
    """Run the whole pipeline on the embedded default and write a summary.

    Parameters
    ----------
    out : str or Path
        Output directory (created); holds ``archive/``, ``pairs.nc``, ``models/``,
        ``report/``, ``export/`` and ``summary.md``.
    quick : bool
        A tiny version of the same pipeline (a minute or two; for tests and a first look).
    jobs : int, optional
        Worker processes for the benchmarks (default: all cores).
    quiet : bool
        No progress output.

    Returns
    -------
    dict
        The summary: skill of every model and baseline on held-out scenes and the paths.
    """
    from .evaluation.report import evaluate, write_report
    from .export.exporter import export_training_run
    from .learn.train import train_models
    from .pairs.build import build_pairs
    from .archive.simulate import simulate_archive

    paths = DemoPaths(Path(out))
    paths.root.mkdir(parents=True, exist_ok=True)
    settings = demo_settings(quick)
    jobs = jobs or os.cpu_count() or 1
    stages = _Stages(quiet)

    stages.begin(1, "scenes", f"synthetic cloud scenes in {paths.archive}")
    made, total = _make_scenes(settings["scenes"], paths.archive, quiet)
    stages.end(f"{made} generated, {total - made} reused")

    sim = settings["simulate"]
    stages.begin(2, "simulate", f"3D, independent-column and two-stream runs at solar zenith {sim['zeniths']} deg, "
                                f"{sim['photons']} photons each, {jobs} workers")
    _warm_up_compiled_kernels()
    done = simulate_archive(paths.archive, sim["zeniths"], sim["azimuths"], photons=sim["photons"], seed=sim["seed"],
                            n_jobs=jobs, quiet=quiet)
    stages.end(f"{done['computed']} runs computed, {done['skipped']} reused")

    resolutions = settings["pairs"]["host_resolutions"]
    stages.begin(3, "pairs", f"training pairs at host resolution {', '.join(f'{r:g}' for r in resolutions)} m")
    from .pairs.build import archive_fingerprint

    if _pairs_up_to_date(paths.pairs, archive_fingerprint(paths.archive), settings["feature_recipe"],
                         PAIRS_FORMAT_VERSION, resolutions):
        stages.end(f"reused {paths.pairs}")
    else:
        from .core.netcdf import write_dataset

        write_dataset(build_pairs(paths.archive, resolutions, recipe=settings["feature_recipe"], quiet=quiet),
                      paths.pairs)
        stages.end(f"wrote {paths.pairs}")

    stages.begin(4, "train", "ridge and gradient-boosted corrections, scene-grouped cross-validation")
    if not (paths.recipe.is_file() and paths.recipe.read_text() == settings["recipe"]):
        write_text_atomic(paths.recipe, settings["recipe"])
    if _training_up_to_date(paths.models, paths.pairs, paths.recipe):
        stages.end(f"reused {paths.models}")
    else:
        with staged_directory(paths.models, replace=True, marker="training.json") as staging:
            train_models(paths.pairs, paths.recipe, staging, quiet=quiet)
        stages.end(f"wrote {paths.models}")

    ev = settings["evaluate"]
    stages.begin(5, "evaluate", "skill on held-out scenes and on every family left out of training")
    page = paths.report / "report.html"
    same_formats = _same_formats(paths)
    if same_formats and _newer(page, paths.models / "training.json"):
        stages.end(f"reused {paths.report}")
    else:
        evaluation = evaluate(paths.models, paths.pairs, learning_curve_points=ev["learning_curve_points"],
                              importance_repeats=ev["importance_repeats"], quiet=quiet)
        with staged_directory(paths.report, marker="report.html") as staging:
            page = paths.report / write_report(evaluation, staging, map_scenes=ev["map_scenes"]).relative_to(staging)
        stages.end(f"wrote {page}")

    stages.begin(6, "export", "coefficient files and the Fortran module")
    marker = paths.export / "README.txt"
    if same_formats and _newer(marker, page):
        stages.end(f"reused {paths.export}")
    else:
        with staged_directory(paths.export, marker=marker.name) as staging:
            export_training_run(paths.models, staging, report_dir=paths.report, fortran=True, pairs_path=paths.pairs)
            write_text_atomic(staging / marker.name,
                              f"Exported from {paths.models} with the skill table of {paths.report}.\n")
        stages.end(f"wrote {paths.export}")

    longwave_page = _longwave_stages(paths, settings, jobs, quiet, stages, same_formats)

    summary = summarize(paths, Path(page), longwave_page)
    write_text_atomic(paths.summary, summary["markdown"])
    if not same_formats:
        write_text_atomic(paths.formats, FORMATS)
    if not quiet:
        print(summary["markdown"])
        print(f"demo finished in {time.perf_counter() - stages.started:.0f} s", file=sys.stderr)
    return summary


def _warm_up_thermal_kernels():
    # As _warm_up_compiled_kernels, for the thermal Monte Carlo.
    from .scenes.generator import generate_scene
    from .solvers.longwave_scene import solve_longwave_scene

    scene = generate_scene("scattered_cumulus", 0, nx=2, ny=2, nz=2)
    for kind in ("longwave_full_3d", "longwave_independent_column"):
        solve_longwave_scene(scene, kind, photons=200, resolution=50000.0)


def _longwave_stages(paths, settings, jobs, quiet, stages, same_formats):
    """The longwave part of the demo: benchmarks, pairs, models, report and export; returns the report page."""
    from .archive.simulate import simulate_archive
    from .core.netcdf import write_dataset
    from .evaluation.report import evaluate, write_report
    from .export.exporter import export_training_run
    from .learn.train import train_models
    from .pairs.longwave_features import LongwaveFeatureRecipe
    from .pairs.longwave_pairs import build_longwave_pairs, longwave_fingerprint
    from .scenes.longwave_optics import PER_CM

    lw = settings["longwave"]
    stages.begin(7, "longwave", f"thermal benchmarks ({lw['photons']} photons, {lw['spectral_resolution']:g} cm-1 "
                                f"intervals), pairs, models, report and export in {paths.longwave('')}")
    paths.longwave("").mkdir(parents=True, exist_ok=True)
    _warm_up_thermal_kernels()
    done = simulate_archive(paths.archive, spectrum="longwave", photons=lw["photons"], seed=settings["simulate"]["seed"],
                            n_jobs=jobs, quiet=quiet, longwave_resolution=lw["spectral_resolution"] * PER_CM)
    pairs, models, report, export = (paths.longwave(n) for n in ("pairs.nc", "models", "report", "export"))
    recipe = paths.longwave("recipe.toml")
    steps = [f"{done['computed']} runs computed, {done['skipped']} reused"]
    if _pairs_up_to_date(pairs, longwave_fingerprint(paths.archive), LongwaveFeatureRecipe(),
                         LONGWAVE_PAIRS_FORMAT_VERSION, lw["host_resolutions"]):
        steps.append("pairs reused")
    else:
        write_dataset(build_longwave_pairs(paths.archive, lw["host_resolutions"], quiet=quiet), pairs)
        steps.append("pairs written")
    if not (recipe.is_file() and recipe.read_text() == settings["longwave_recipe"]):
        write_text_atomic(recipe, settings["longwave_recipe"])
    if _training_up_to_date(models, pairs, recipe):
        steps.append("models reused")
    else:
        with staged_directory(models, replace=True, marker="training.json") as staging:
            train_models(pairs, recipe, staging, quiet=quiet)
        steps.append("models trained")
    page = report / "report.html"
    if same_formats and _newer(page, models / "training.json"):
        steps.append("report reused")
    else:
        ev = settings["evaluate"]
        evaluation = evaluate(models, pairs, learning_curve_points=ev["learning_curve_points"],
                              importance_repeats=ev["importance_repeats"], quiet=quiet)
        with staged_directory(report, marker="report.html") as staging:
            write_report(evaluation, staging, map_scenes=ev["map_scenes"])
        steps.append("report written")
    marker = export / "README.txt"
    if same_formats and _newer(marker, page):
        steps.append("export reused")
    else:
        with staged_directory(export, marker=marker.name) as staging:
            export_training_run(models, staging, report_dir=report, fortran=True, pairs_path=pairs)
            write_text_atomic(staging / marker.name, f"Exported from {models} with the skill table of {report}.\n")
        steps.append("export written")
    stages.end(", ".join(steps))
    return page


def _skill_table(table, lines, level="## ", note=()):
    """Markdown lines of the skill table (headline units) of every evaluation set of a metric table.

    Returns the rows of the table in the headline units.
    """
    from .evaluation.metrics import HEADLINE_UNITS

    held = table[(table["breakdown"] == "all") & (table["units"] == HEADLINE_UNITS)]
    for name in dict.fromkeys(held["evaluation_set"]):
        part = held[held["evaluation_set"] == name]
        targets = list(dict.fromkeys(part["target"]))
        lines += [f"{level}{name}", "", *note]
        lines.append("| predictor | " + " | ".join(targets) + " |")
        lines.append("|---|" + "---|" * len(targets))
        for predictor in dict.fromkeys(part["predictor"]):
            rows = part[part["predictor"] == predictor].set_index("target")
            cells = [f"{rows.loc[t, 'skill']:.2f} ({rows.loc[t, 'rmse']:.1f})" if t in rows.index else "-"
                     for t in targets]
            lines.append(f"| {predictor} | " + " | ".join(cells) + " |")
        lines.append("")
    return held


def _profile_table(path, lines, level="## "):
    """Markdown lines of a report's heating-rate table (``profile_metrics.csv``), if it has one."""
    import pandas as pd

    if not path.is_file():
        return
    rows = pd.read_csv(path)
    lines += [f"{level}heating-rate profiles (held-out scenes, cloudy columns, pooled over layers)", "",
              "share of the independent column's RMSE removed (RMSE in brackets)", "",
              "| predictor | quantity | units | skill (RMSE) |", "|---|---|---|---|"]
    lines += [f"| {r.predictor} | {r.quantity} | {r.units} | {r.rmse_reduction:.2f} ({r.rmse:.3g}) |"
              for r in rows.itertuples()]
    lines.append("")


def summarize(paths, page, longwave_page=None):
    """The summary tables (held-out skill of every model and baseline, shortwave and longwave) and the output paths."""
    import pandas as pd

    lines = ["# surrogate3d demo summary", ""]
    held = _skill_table(pd.read_csv(paths.report / "metrics.csv"), lines, note=(
        "skill = 1 - RMSE(corrected) / RMSE(independent column) of the errors in W m-2 (the headline skill of the "
        "report, the model card and the README); RMSE in W m-2 in brackets", ""))
    _profile_table(paths.report / "profile_metrics.csv", lines)
    if longwave_page is not None:
        lines += ["## longwave", "", "skill = 1 - RMSE(corrected) / RMSE(independent column) of the longwave fields "
                  "in W m-2, the share of the independent column's RMSE removed; RMSE in W m-2 in brackets", ""]
        _skill_table(pd.read_csv(longwave_page.parent / "metrics.csv"), lines, level="### ")
        _profile_table(longwave_page.parent / "profile_metrics.csv", lines, "### ")
    lines += ["## outputs", "",
              f"- archive (scenes and benchmark results): `{paths.archive}`",
              f"- training pairs: `{paths.pairs}`",
              f"- trained models: `{paths.models}`",
              f"- report: `{page}`",
              f"- coefficient files and Fortran module: `{paths.export}`",
              *([f"- longwave pairs, models, report and export: `{longwave_page.parents[1]}`"]
                if longwave_page is not None else []),
              ""]
    return {"markdown": "\n".join(lines), "table": held}


def register(sub):
    p = sub.add_parser(
        "demo", help="the whole job on the embedded default: scenes, benchmarks, training, report, export",
        description="Generates synthetic scenes of our own regimes, runs the 3D, independent-column and "
                    "two-stream benchmarks, builds training pairs at 1 km host columns, trains ridge and "
                    "gradient-boosted corrections, evaluates them on held-out scenes against the published "
                    "baselines, writes the HTML report and exports the coefficients and a Fortran module; "
                    "then the same for the longwave (thermal) correction. A second run reuses finished work.")
    p.add_argument("--out", required=True, metavar="DIR", help="output directory")
    p.add_argument("--quick", action="store_true", help="a tiny version of the same pipeline (about a minute)")
    p.add_argument("--jobs", type=int, metavar="N", help="worker processes for the benchmarks (default: all cores)")
    p.add_argument("--quiet", action="store_true", help="no progress output")
    p.set_defaults(func=_run_command)


def _run_command(args):
    if args.jobs is not None:
        check_integer("--jobs", args.jobs, 1)
    run_demo(args.out, quick=args.quick, jobs=args.jobs, quiet=args.quiet)
