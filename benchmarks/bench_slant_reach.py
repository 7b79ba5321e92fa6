"""What a cap on the slant paths' reach costs in skill, and the halo it saves.

At low sun the path toward the sun crosses many host columns (``z_top tan(theta0)``), so
a decomposed host needs a wide halo (``docs/host-model-guide.md``).  The host can cap the
path's horizontal travel (host field ``slant_path_reach``: beyond it the path rises
vertically through the column it has reached).  This benchmark scores an exported
column model on the held-out scenes of its training archive with the slant-path
features computed under several caps, and prints, per solar zenith angle, the skill
(``1 - RMSE / RMSE(no correction)`` of the errors in W m-2, after the consistency step)
of the total and direct surface downward flux and the halo the model then needs.

Usage::

    python benchmarks/bench_slant_reach.py --archive ARCHIVE --model models/default/boosted.coefficients.json \
        --reach 0 3000 5000 10000 none
"""

import argparse
import ast
import json
import math
import time
from pathlib import Path

import numpy as np

from surrogate3d.archive import completed, read_scene, select_result
from surrogate3d.core.data_model import TARGETS
from surrogate3d.learn import apply_correction
from surrogate3d.pairs.coarsen import coarsen_result, host_factors
from surrogate3d.pairs.host_fields import assemble_host_fields
from surrogate3d.runtime import load_coefficients
from surrogate3d.runtime.halo import halo_width

SOLAR_CONSTANT = 1361.0     # W m-2 (Kopp and Lean 2011)


def _held_out(model_path):
    """The held-out scenes recorded in the coefficient file's provenance (read from its JSON twin)."""
    provenance = json.loads(Path(model_path).with_suffix(".json").read_text())["provenance"]
    scenes = provenance["held_out_scenes"]
    return ast.literal_eval(scenes) if isinstance(scenes, str) else list(scenes)


def _cases(archive, scenes, host_resolution):
    """Host fields, independent-column and 3D host fluxes of every held-out scene and sun."""
    for name in scenes:
        scene = read_scene(Path(archive) / f"{name}.nc")
        fy, fx = host_factors(scene, host_resolution)
        for solver, zenith, azimuth in completed(scene):
            if solver != "full_3d":
                continue
            ica = select_result(scene, "independent_column", zenith, azimuth)
            full = coarsen_result(select_result(scene, "full_3d", zenith, azimuth), fy, fx)
            fields = assemble_host_fields(scene, ica, host_resolution)
            yield name, zenith, fields, full


def _skill(truth, predicted):
    return 1.0 - math.sqrt(np.mean((predicted - truth) ** 2)) / math.sqrt(np.mean(truth ** 2))


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--archive", required=True, help="the model's training archive (scene files)")
    parser.add_argument("--model", required=True, help="exported column model (.coefficients.json)")
    parser.add_argument("--reach", nargs="+", default=["0", "3000", "5000", "10000", "none"],
                        help="caps in m ('none': uncapped)")
    parser.add_argument("--host-resolution", type=float, default=1000.0)
    parser.add_argument("--json", help="write the figures to this file")
    args = parser.parse_args(argv)
    model = load_coefficients(args.model)
    reaches = [None if r == "none" else float(r) for r in args.reach]
    total, direct = TARGETS.index("surface_downward_flux"), TARGETS.index("surface_downward_direct_flux")
    rows = {}
    start = time.perf_counter()
    for name, zenith, fields, full in _cases(args.archive, _held_out(args.model), args.host_resolution):
        ica = np.stack([fields[f"independent_column_{t}"].reshape(-1) for t in TARGETS], axis=1)
        truth = np.stack([full[t].reshape(-1) for t in TARGETS], axis=1) - ica
        incident = SOLAR_CONSTANT * math.cos(math.radians(zenith))
        for reach in reaches:
            capped = dict(fields) if reach is None else dict(fields, slant_path_reach=reach)
            features = model.host_features(capped)
            correction = model.predict(features, check_envelope=False)
            gated = model.clear_sky_mask(features)
            applied = apply_correction(ica, correction, fields["surface_albedo"].reshape(-1),
                                       np.zeros(ica.shape[0], dtype=int), clear_sky=gated).correction
            halo = halo_width(model.recipe, fields["z_edge"], fields["dx"], fields["dy"], zenith,
                              fields["solar_beam_azimuth"], reach)
            key = (zenith, "none" if reach is None else f"{reach:g}")
            entry = rows.setdefault(key, {"truth": [], "predicted": [], "halo": 0})
            entry["truth"].append(truth[:, [total, direct]] * incident)
            entry["predicted"].append(applied[:, [total, direct]] * incident)
            entry["halo"] = max(entry["halo"], *halo)
    print(f"held-out scenes of {args.model}, {time.perf_counter() - start:.0f} s")
    print("| zenith [deg] | reach cap [m] | largest halo [columns] | skill, total surface flux | skill, direct |")
    print("| --- | --- | --- | --- | --- |")
    figures = []
    for (zenith, reach), entry in sorted(rows.items(), key=lambda item: (item[0][0], item[0][1] != "none",
                                                                          float(item[0][1]) if item[0][1] != "none"
                                                                          else 0.0)):
        truth, predicted = np.concatenate(entry["truth"]), np.concatenate(entry["predicted"])
        skill = [_skill(truth[:, m], predicted[:, m]) for m in range(2)]
        figures.append({"zenith": zenith, "reach": reach, "halo": entry["halo"], "skill_total": skill[0],
                        "skill_direct": skill[1], "columns": int(truth.shape[0])})
        print(f"| {zenith:g} | {reach} | {entry['halo']} | {skill[0]:.3f} | {skill[1]:.3f} |")
    if args.json:
        Path(args.json).write_text(json.dumps(figures, indent=1))


if __name__ == "__main__":
    main()
