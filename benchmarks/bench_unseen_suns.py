"""Skill at sun angles a model was not trained at, by solar zenith bin.

The shipped shortwave model was trained at four zeniths (10, 35, 55 and 75 degrees).  To
see whether it holds at the angles between them, simulate the same scene set again with
every sun drawn near those zeniths (``surrogate3d simulate ... --zenith-jitter 12``), make
its pairs, and score exported coefficient files or model directories on the held-out
scenes of a training run on those pairs.  Prints the skill (``1 - RMSE / RMSE(no
correction)`` of the errors in W m-2, after the consistency step) of one target per
zenith bin, next to no correction, the baselines and the direct-beam prior.

Usage::

    python benchmarks/bench_unseen_suns.py --pairs PAIRS --run MODEL_DIR \
        --model models/default/boosted.coefficients.json models/default/ridge.coefficients.json MODEL_DIR

``--run`` names the training run whose held-out scenes are scored (its ``training.json``);
every ``--model`` is scored on them, a model directory with each of its models.
"""

import argparse
import json
from pathlib import Path

import numpy as np
import xarray as xr

from surrogate3d.core.data_model import TARGETS
from surrogate3d.evaluation.evaluation_sets import score_set
from surrogate3d.evaluation.metrics import error_metrics
from surrogate3d.evaluation.scoring import load_scored_models
from surrogate3d.learn.pairs_table import select_scenes

BINS = ((0.0, 30.0), (30.0, 45.0), (45.0, 65.0), (65.0, 90.0), (0.0, 90.0))


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--pairs", required=True, help="pairs table of the scenes at the new sun angles")
    parser.add_argument("--run", required=True, help="training run whose held-out scenes are scored")
    parser.add_argument("--model", nargs="+", required=True, help="coefficient files or model directories")
    parser.add_argument("--target", default="surface_downward_flux", choices=TARGETS)
    parser.add_argument("--json", help="write the figures to this file")
    args = parser.parse_args(argv)

    pairs = xr.open_dataset(args.pairs)
    record = json.loads((Path(args.run) / "training.json").read_text())
    held = select_scenes(pairs, record["split"]["held_out_scenes"])
    models = {}
    for source in args.model:
        loaded, _, _ = load_scored_models(source)
        for name, model in loaded.items():
            models[f"{name} ({source})"] = model
    scored = score_set("held-out scenes", held, models, TARGETS, consistency=True)
    k = TARGETS.index(args.target)
    zenith = held["solar_zenith_angle"].values
    truth = held["target_value"].sel(target=list(TARGETS)).values
    error = held["target_standard_error"].sel(target=list(TARGETS)).values
    incident = held["incident_flux"].values
    print(f"{args.target}: skill of the W m-2 errors on {len(record['split']['held_out_scenes'])} held-out scenes "
          f"of {args.run}")
    header = ["predictor"] + [f"{lo:g}-{hi:g} deg (n={int(((zenith >= lo) & (zenith < hi)).sum())})"
                              for lo, hi in BINS]
    print(" | ".join(header))
    figures = {}
    for name, correction in scored.predictions.items():
        figures[name] = {}
        for lo, hi in BINS:
            sel = (zenith >= lo) & (zenith < hi)
            skill = error_metrics(correction[sel, k], truth[sel, k], error[sel, k], incident[sel])["skill"]
            figures[name][f"{lo:g}-{hi:g}"] = skill
        print(" | ".join([name, *(f"{v:.3f}" for v in figures[name].values())]))
    if args.json:
        Path(args.json).write_text(json.dumps({args.target: figures}, indent=1))


if __name__ == "__main__":
    main()
