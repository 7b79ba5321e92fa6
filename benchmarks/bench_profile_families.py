"""Heating-rate model on cloud families it never saw: each family left out of training in turn.

For every family (regime) of a pair table with per-layer variables except ``clear``, fits
the profile model (``training/default.toml``'s ``[profile]`` parameters) on the scenes of
the other families and scores it on that family's scenes, its layers summing to their
own column total: the share of the independent column's RMSE removed in the cloudy
columns for the layer absorption (fraction and W m-2) and the heating rate, and for the
column absorption of the profile's sum (cloudy columns, fractions; and all columns, W m-2).
Prints one line per family and writes them with ``--json FILE``.  About 1.5 to 4 minutes
of two cores per family on the 60-scene world.

    .venv/bin/python benchmarks/bench_profile_families.py PAIRS [--json FILE]
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
from surrogate3d.learn.pairs_table import feature_names, select_scenes  # noqa: E402
from surrogate3d.learn.profile_model import ProfileCorrection  # noqa: E402


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("pairs")
    parser.add_argument("--recipe", default=str(ROOT / "training" / "default.toml"))
    parser.add_argument("--json", metavar="FILE")
    args = parser.parse_args(argv)
    parameters = tomllib.loads(Path(args.recipe).read_text())["profile"]
    pairs = read_pairs(args.pairs)
    features = feature_names(pairs)
    regimes = sorted(set(pairs["regime"].values.tolist()))
    scenes = {r: sorted(set(pairs["scene"].values[pairs["regime"].values == r].tolist())) for r in regimes}
    out = {}
    for family in regimes:
        if family == "clear":
            continue
        start = time.process_time()
        training = select_scenes(pairs, [s for r in regimes if r != family for s in scenes[r]])
        model = ProfileCorrection(**parameters).fit_pairs(training, features)
        evaluation = score_profiles("profile", model, select_scenes(pairs, scenes[family]))
        table = evaluation.table[evaluation.table["predictor"] == "profile"]
        out[family] = {f"{r.quantity} [{r.units}]": round(float(r.rmse_reduction), 3) for r in table.itertuples()}
        out[family]["column absorption, cloudy columns [1]"] = round(evaluation.column_integral["rmse_reduction"], 3)
        out[family]["column absorption, all columns [W m-2]"] = round(
            evaluation.column_integral["rmse_reduction_matched_all_columns_w_m2"], 3)
        print(family, out[family], f"{time.process_time() - start:.0f} CPU s", flush=True)
    if args.json:
        Path(args.json).write_text(json.dumps(out, indent=2) + "\n")


if __name__ == "__main__":
    main()
