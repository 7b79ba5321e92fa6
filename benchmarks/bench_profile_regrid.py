"""Heating-rate model on another vertical grid: skill on the training grid and on a host grid unlike it.

Trains the profile model (``training/default.toml``'s ``[profile]`` parameters) on the
training scenes of a pair table built on the scenes' own layers, then scores it on the
held-out scenes of that table and of a second table of the same scenes built on another
host grid (``surrogate3d pairs --host-layer-edges``; e.g. a stretched grid of 60 layers),
and prints the share of the independent column's RMSE each removes in the cloudy columns
(layer absorption and heating rate) and the loss of skill.  Both tables must be built
from the same archive with the same feature recipe.

Usage: python benchmarks/bench_profile_regrid.py TRAINING_GRID_PAIRS OTHER_GRID_PAIRS [--json FILE]
"""

import argparse
import json
import sys
import time
import tomllib
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from surrogate3d.core.pairs_table import read_pairs  # noqa: E402
from surrogate3d.evaluation.profile_skill import score_profiles  # noqa: E402
from surrogate3d.learn.cv import split_scenes  # noqa: E402
from surrogate3d.learn.pairs_table import feature_names, select_scenes  # noqa: E402
from surrogate3d.learn.profile_model import ProfileCorrection  # noqa: E402


def reductions(evaluation):
    table = evaluation.table[evaluation.table["predictor"] == evaluation.model]
    return {f"{r.quantity} [{r.units}]": round(float(r.rmse_reduction), 4) for r in table.itertuples()}


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("training_grid_pairs")
    parser.add_argument("other_grid_pairs")
    parser.add_argument("--recipe", default=str(ROOT / "training" / "default.toml"))
    parser.add_argument("--json", metavar="FILE")
    args = parser.parse_args(argv)
    recipe = tomllib.loads(Path(args.recipe).read_text())
    split = recipe.get("split", {})
    own, other = read_pairs(args.training_grid_pairs), read_pairs(args.other_grid_pairs)
    scenes = split_scenes(own, split.get("held_out_scene_fraction", 0.25), split.get("seed", 0))
    start = time.process_time()
    model = ProfileCorrection(**recipe["profile"]).fit_pairs(select_scenes(own, scenes.training_scenes),
                                                             feature_names(own))
    fit = time.process_time() - start
    out = {"training_grid_layers": int(own.sizes["host_layer"]), "other_grid_layers": int(other.sizes["host_layer"]),
           "held_out_scenes": len(scenes.held_out_scenes), "fit_cpu_seconds": round(fit, 1)}
    for label, table in (("training grid", own), ("other grid", other)):
        out[label] = reductions(score_profiles("profile", model, select_scenes(table, scenes.held_out_scenes)))
    out["loss"] = {key: round(out["training grid"][key] - out["other grid"][key], 4) for key in out["training grid"]}
    print(json.dumps(out, indent=2))
    if args.json:
        Path(args.json).write_text(json.dumps(out, indent=2) + "\n")


if __name__ == "__main__":
    main()
