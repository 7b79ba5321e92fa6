"""How much of the longwave 3D effect can a learned correction recover? An exploration.

Builds a small world of our own scenes, simulates it in the longwave and fits two off-the-shelf
regressors to the 1 km surface downward longwave target (3D minus independent column, W m-2),
scoring them on whole held-out scenes. It was written before `surrogate3d train` took longwave
pairs (recipe `spectrum = "longwave"`, training/longwave.toml, which `surrogate3d demo` runs);
it measures, independently of the package's models, whether the issue's target (">= 50 % of the independent-column RMSE of the surface
downward longwave flux removed at 1 km on held-out scenes") is within reach, and what the Monte
Carlo noise of the targets allows.

Steps (each timed, wall seconds and CPU seconds of the child processes):

1. ``surrogate3d scenes --config CONFIG --out WORKDIR/scenes`` (``--count`` / ``--regime``
   pass through for a subset);
2. a probe: one scene copied to ``WORKDIR/probe`` and run with the settings of step 3, then
   paired at 1 km: the per-scene cost and the noise (mean standard error of the 1 km surface
   downward target against its root mean square);
3. ``surrogate3d simulate WORKDIR/scenes --spectrum longwave --photons N
   --longwave-resolution R --jobs J``;
4. ``surrogate3d pairs WORKDIR/scenes --spectrum longwave --host-resolution 1000``;
5. the split of :func:`surrogate3d.learn.cv.split_scenes` (whole scenes, a quarter of the seeds
   of every regime held out, seed fixed; regimes with one seed stay in training), then
   scikit-learn ``Ridge`` on standardised features and ``HistGradientBoostingRegressor``
   (fixed modest setting) fitted on the training scenes.

Printed on the held-out scenes: RMSE of no correction (the target itself), of the training
mean, of ridge and of the boosted model; skill = 1 - RMSE / RMSE(no correction); the noise
floor ``sqrt(mean(se^2))`` and the best reachable skill ``1 - floor / RMSE(no correction)``;
the skill against the noise-free target estimated by removing the noise variance from both
mean squares (held-out noise is independent of the predictions of models trained on other
scenes); the domain-mean 3D-minus-independent-column signal per regime; the permutation
importances of the boosted model on the held-out scenes (top 8); the held-out RMSE per
regime; and, harder, the boosted model trained without each regime in turn and scored on
all scenes of that regime.

With ``--workdir`` the simulated scenes are kept: a second run reuses them (``simulate`` keeps finished
results), so the learning step can be repeated alone.

Measured on the demo's 32 scenes (80 x 80 x 30 cells of 100 m), 8e6 photons, 50 cm-1, 2 jobs
on 2 shared cores: simulate 402 s wall (about 13 s per scene); 1 km surface downward target
RMS 20.7 W m-2, mean standard error 2.6 W m-2. Held out (split seed 0, 10 scenes): RMSE 21.4
without correction, 5.8 ridge, 3.9 boosted (skill 0.73 and 0.82; noise floor 2.8, best
reachable 0.87); split seeds 1-4 gave boosted skills 0.82-0.83. Trained without a regime, the
boosted model fails on deep convection (skill -0.10: its 12 km towers are unlike any other
regime's) and adds about 7 W m-2 RMSE in the clear scene.

Usage:
    python benchmarks/bench_longwave_skill.py [--workdir DIR] [--count N] [--regime NAME ...]
        [--photons N] [--longwave-resolution R] [--jobs J] [--json FILE]
"""

import argparse
import json
import resource
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import xarray as xr
from sklearn.ensemble import HistGradientBoostingRegressor
from sklearn.inspection import permutation_importance
from sklearn.linear_model import Ridge
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler

from surrogate3d._atomic import write_text_atomic
from surrogate3d.learn.cv import split_scenes

REPOSITORY = Path(__file__).resolve().parents[1]
DEMO_CONFIG = REPOSITORY / "surrogate3d" / "data" / "demo-scenes.toml"
TARGET = "longwave_surface_downward_flux"
HOST_RESOLUTION = 1000


def run_cli(*arguments):
    """Run ``surrogate3d ARGUMENTS`` and return (wall seconds, CPU seconds of it and its workers)."""
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    start = time.perf_counter()
    subprocess.run([sys.executable, "-m", "surrogate3d", *map(str, arguments)], check=True)
    wall = time.perf_counter() - start
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    cpu = (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)
    return wall, cpu


def simulate_arguments(args):
    """The options of ``surrogate3d simulate`` shared by the probe and the whole archive."""
    return ["--spectrum", "longwave", "--photons", args.photons, "--longwave-resolution",
            args.longwave_resolution, "--jobs", args.jobs, "--quiet"]


def target_noise(pairs):
    """Mean standard error and root mean square of the surface downward target of a pair table."""
    value = pairs["target_value"].sel(target=TARGET).values
    error = pairs["target_standard_error"].sel(target=TARGET).values
    return {"mean_standard_error": float(error.mean()), "rms_standard_error": float(np.sqrt(np.mean(error ** 2))),
            "rms_target": float(np.sqrt(np.mean(value ** 2))), "mean_target": float(value.mean()),
            "samples": int(value.size)}


def make_scenes(args, scenes):
    """Generate the scene set into ``scenes`` unless it already holds scene files; (wall, CPU) seconds."""
    if scenes.is_dir() and any(scenes.glob("*.nc")):
        print(f"scenes: reusing {len(list(scenes.glob('*.nc')))} scene files in {scenes}")
        return 0.0, 0.0
    command = ["scenes", "--config", args.config, "--out", scenes, "--quiet"]
    if args.count is not None:
        command += ["--count", args.count]
    for name in args.regime or []:
        command += ["--regime", name]
    return run_cli(*command)


def probe(args, scenes, probe_dir):
    """Simulate one scene alone; its cost and the noise of its 1 km targets."""
    files = sorted(scenes.glob("*.nc"))
    chosen = [f for f in files if f.stem.startswith(args.probe_scene)] if args.probe_scene else files
    if not chosen:
        raise SystemExit(f"--probe-scene {args.probe_scene!r}: no scene file of that name in {scenes}")
    if probe_dir.exists():
        shutil.rmtree(probe_dir)
    probe_dir.mkdir(parents=True)
    shutil.copy2(chosen[0], probe_dir / chosen[0].name)
    wall, cpu = run_cli("simulate", probe_dir, *simulate_arguments(args))
    table = probe_dir / "pairs.nc"
    run_cli("pairs", probe_dir, "--out", table, "--spectrum", "longwave", "--host-resolution", HOST_RESOLUTION,
            "--quiet")
    with xr.open_dataset(table) as pairs:
        noise = target_noise(pairs)
    return {"scene": chosen[0].stem, "wall_seconds": wall, "cpu_seconds": cpu, **noise}


def rmse(values):
    """Root mean square of ``values``."""
    return float(np.sqrt(np.mean(np.square(values))))


def boosted_model(args):
    """The boosted-trees regressor with the fixed setting of ``args``."""
    return HistGradientBoostingRegressor(max_iter=args.max_iter, max_leaf_nodes=args.max_leaf_nodes,
                                         learning_rate=args.learning_rate, random_state=0)


def learn(pairs, args):
    """Fit ridge and boosted trees on the training scenes; figures on the held-out scenes."""
    split = split_scenes(pairs, args.held_out_fraction, seed=args.split_seed)
    scene = pairs["scene"].values.astype(str)
    held = np.isin(scene, split.held_out_scenes)
    features = pairs["features"].values.astype(np.float64)
    names = [str(n) for n in pairs["feature"].values]
    target = pairs["target_value"].sel(target=TARGET).values.astype(np.float64)
    error = pairs["target_standard_error"].sel(target=TARGET).values.astype(np.float64)
    x_train, y_train, x_test, y_test = features[~held], target[~held], features[held], target[held]

    ridge = make_pipeline(StandardScaler(), Ridge(alpha=args.ridge_alpha)).fit(x_train, y_train)
    boosted = boosted_model(args).fit(x_train, y_train)
    floor = rmse(error[held])
    none = rmse(y_test)
    results = {"no_correction": none, "training_mean": rmse(y_test - y_train.mean()),
               "ridge": rmse(y_test - ridge.predict(x_test)), "boosted": rmse(y_test - boosted.predict(x_test))}
    # Held-out noise is independent of predictions made from other scenes, so it adds its
    # variance to every mean square alike; removing it estimates the score on the true target.
    true_none = np.sqrt(max(none ** 2 - floor ** 2, 0.0))
    skill = {k: 1.0 - v / none for k, v in results.items()}
    noise_free_skill = {k: (1.0 - np.sqrt(max(v ** 2 - floor ** 2, 0.0)) / true_none if true_none > 0 else float("nan"))
                        for k, v in results.items()}
    importance = permutation_importance(boosted, x_test, y_test, scoring="neg_root_mean_squared_error",
                                        n_repeats=args.permutation_repeats, random_state=0)
    order = np.argsort(importance.importances_mean)[::-1][:8]
    regime = pairs["regime"].values.astype(str)[held]
    residual = y_test - boosted.predict(x_test)
    per_regime = {name: {"no_correction": rmse(y_test[regime == name]), "boosted": rmse(residual[regime == name]),
                         "noise_floor": rmse(error[held][regime == name])} for name in sorted(set(regime))}
    return {"per_regime": per_regime, "training_scenes": len(split.training_scenes), "held_out_scenes": split.held_out_scenes,
            "training_samples": int((~held).sum()), "held_out_samples": int(held.sum()), "features": names,
            "rmse": results, "skill": skill, "noise_floor": floor, "best_reachable_skill": 1.0 - floor / none,
            "noise_free_rmse_no_correction": float(true_none), "noise_free_skill": noise_free_skill,
            "permutation_importance_top8": [{"feature": names[i], "rmse_increase": float(importance.importances_mean[i]),
                                             "std": float(importance.importances_std[i])} for i in order]}


def leave_one_regime_out(pairs, args):
    """Boosted model trained without each regime in turn and scored on that regime (all its scenes)."""
    regime = pairs["regime"].values.astype(str)
    features = pairs["features"].values.astype(np.float64)
    target = pairs["target_value"].sel(target=TARGET).values.astype(np.float64)
    error = pairs["target_standard_error"].sel(target=TARGET).values.astype(np.float64)
    out = {}
    for name in sorted(set(regime)):
        test = regime == name
        model = boosted_model(args).fit(features[~test], target[~test])
        none = rmse(target[test])
        boosted = rmse(target[test] - model.predict(features[test]))
        out[name] = {"no_correction": none, "boosted": boosted, "skill": 1.0 - boosted / none,
                     "noise_floor": rmse(error[test])}
    return out


def domain_means(pairs):
    """Domain-mean surface downward target per scene, averaged per regime (W m-2)."""
    value = pairs["target_value"].sel(target=TARGET).values
    scene = pairs["scene"].values.astype(str)
    regime = pairs["regime"].values.astype(str)
    per_scene = {s: (regime[scene == s][0], float(value[scene == s].mean())) for s in sorted(set(scene))}
    per_regime = {}
    for name in sorted(set(regime)):
        means = [m for r, m in per_scene.values() if r == name]
        per_regime[name] = {"scenes": len(means), "mean": float(np.mean(means))}
    all_means = [m for _, m in per_scene.values()]
    return {"all_scenes_mean": float(np.mean(all_means)), "scene_std": float(np.std(all_means)),
            "per_regime": per_regime}


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--workdir", type=Path,
                        help="scenes, probe and pair table go here, kept for reuse (default: a temporary directory)")
    parser.add_argument("--config", type=Path, default=DEMO_CONFIG, help="scene-set configuration (default: demo's)")
    parser.add_argument("--count", type=int, help="scenes per regime (overrides the configuration)")
    parser.add_argument("--regime", action="append", help="regime subset (repeatable)")
    parser.add_argument("--photons", type=int, default=8_000_000)
    parser.add_argument("--longwave-resolution", type=float, default=50.0, help="cm-1")
    parser.add_argument("--jobs", type=int, default=2)
    parser.add_argument("--probe-scene", help="file-name prefix of the probe scene (default: the first file)")
    parser.add_argument("--no-probe", action="store_true", help="skip the one-scene probe")
    parser.add_argument("--held-out-fraction", type=float, default=0.25)
    parser.add_argument("--split-seed", type=int, default=0)
    parser.add_argument("--ridge-alpha", type=float, default=1.0)
    parser.add_argument("--max-iter", type=int, default=200)
    parser.add_argument("--max-leaf-nodes", type=int, default=15)
    parser.add_argument("--learning-rate", type=float, default=0.1)
    parser.add_argument("--permutation-repeats", type=int, default=10)
    parser.add_argument("--json", metavar="FILE")
    args = parser.parse_args(argv)
    if args.workdir is None:
        with tempfile.TemporaryDirectory() as tmp:
            run(args, Path(tmp))
    else:
        run(args, args.workdir.resolve())


def run(args, work):
    """All five steps in ``work``; prints the figures and writes them to ``args.json`` if given."""
    scenes = work / "scenes"
    figures = {"settings": {"config": str(args.config), "count": args.count, "regime": args.regime,
                            "photons": args.photons, "longwave_resolution_cm-1": args.longwave_resolution,
                            "jobs": args.jobs, "host_resolution_m": HOST_RESOLUTION,
                            "held_out_fraction": args.held_out_fraction, "split_seed": args.split_seed,
                            "boosted": {"max_iter": args.max_iter, "max_leaf_nodes": args.max_leaf_nodes,
                                        "learning_rate": args.learning_rate}, "ridge_alpha": args.ridge_alpha},
               "seconds": {}}

    wall, cpu = make_scenes(args, scenes)
    n_scenes = len(list(scenes.glob("*.nc")))
    figures["scenes"] = n_scenes
    figures["seconds"]["scenes"] = {"wall": wall, "cpu": cpu}
    print(f"1. scenes: {n_scenes} files, {wall:.1f} s wall, {cpu:.1f} s CPU")

    if not args.no_probe:
        p = probe(args, scenes, work / "probe")
        figures["probe"] = p
        print(f"2. probe {p['scene']}: {p['wall_seconds']:.1f} s wall, {p['cpu_seconds']:.1f} s CPU for one scene "
              f"(3 solvers); 1 km surface downward target: mean standard error {p['mean_standard_error']:.2f}, "
              f"RMS {p['rms_target']:.2f}, mean {p['mean_target']:.2f} W m-2")

    wall, cpu = run_cli("simulate", scenes, *simulate_arguments(args))
    figures["seconds"]["simulate"] = {"wall": wall, "cpu": cpu, "cpu_per_scene": cpu / max(n_scenes, 1)}
    print(f"3. simulate: {wall:.1f} s wall, {cpu:.1f} s CPU ({cpu / max(n_scenes, 1):.1f} s CPU per scene)")

    table = work / "pairs-longwave-1km.nc"
    wall, cpu = run_cli("pairs", scenes, "--out", table, "--spectrum", "longwave", "--host-resolution",
                        HOST_RESOLUTION, "--quiet")
    figures["seconds"]["pairs"] = {"wall": wall, "cpu": cpu}
    print(f"4. pairs: {wall:.1f} s wall, {cpu:.1f} s CPU")

    start = time.perf_counter()
    with xr.open_dataset(table) as pairs:
        pairs = pairs.load()
    figures["noise"] = target_noise(pairs)
    figures["domain_mean_signal"] = domain_means(pairs)
    skill = learn(pairs, args)
    figures["held_out"] = skill
    figures["leave_one_regime_out"] = leave_one_regime_out(pairs, args)
    figures["seconds"]["learn"] = {"wall": time.perf_counter() - start}

    n = figures["noise"]
    print(f"   all {n['samples']} samples: target mean {n['mean_target']:.2f}, RMS {n['rms_target']:.2f}, "
          f"mean standard error {n['mean_standard_error']:.2f}, RMS standard error {n['rms_standard_error']:.2f} W m-2")
    print(f"5. learn ({figures['seconds']['learn']['wall']:.1f} s): {skill['training_scenes']} training scenes "
          f"({skill['training_samples']} samples), {len(skill['held_out_scenes'])} held out "
          f"({skill['held_out_samples']} samples): {', '.join(skill['held_out_scenes'])}")
    print(f"   held-out surface downward longwave, 1 km, W m-2:  {'RMSE':>7} {'skill':>7} {'noise-free skill':>17}")
    for name, value in skill["rmse"].items():
        print(f"   {name:<47} {value:7.2f} {skill['skill'][name]:7.3f} {skill['noise_free_skill'][name]:17.3f}")
    print(f"   noise floor {skill['noise_floor']:.2f} W m-2; best reachable skill {skill['best_reachable_skill']:.3f}; "
          f"noise-free RMSE of no correction {skill['noise_free_rmse_no_correction']:.2f} W m-2")
    d = figures["domain_mean_signal"]
    print(f"   domain-mean 3D minus independent column: {d['all_scenes_mean']:.2f} W m-2 over scenes "
          f"(scene-to-scene std {d['scene_std']:.2f})")
    for name, v in d["per_regime"].items():
        print(f"     {name:<28} {v['mean']:7.2f} ({v['scenes']} scenes)")
    print("   per regime of the held-out scenes, RMSE W m-2 (no correction / boosted / noise floor):")
    for name, v in skill["per_regime"].items():
        print(f"     {name:<28} {v['no_correction']:6.2f} {v['boosted']:6.2f} {v['noise_floor']:6.2f}")
    print("   boosted model trained without a regime, scored on all its scenes, RMSE W m-2 "
          "(no correction / boosted / skill / noise floor):")
    for name, v in figures["leave_one_regime_out"].items():
        print(f"     {name:<28} {v['no_correction']:6.2f} {v['boosted']:6.2f} {v['skill']:7.3f} {v['noise_floor']:6.2f}")
    print("   permutation importance of the boosted model on held-out scenes (RMSE increase, W m-2):")
    for item in skill["permutation_importance_top8"]:
        print(f"     {item['feature']:<42} {item['rmse_increase']:6.2f} +- {item['std']:.2f}")
    if args.json:
        write_text_atomic(args.json, json.dumps(figures, indent=1) + "\n")


if __name__ == "__main__":
    main()
