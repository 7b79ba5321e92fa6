"""The held-out skill report: metrics, figures and tables of trained models.

:func:`evaluate` scores every model of a model directory on the scenes the training run
held out (unseen seeds) and, if the run has regime-transfer models, on the held-out
regime; every model is compared on the same samples with no correction and the two
published baselines.  :func:`write_report` writes the tables (CSV and Markdown), the
figures (PNG) and one self-contained HTML page.
"""

import base64
import html
import json
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd
from tqdm import tqdm

from .. import __version__
from .._atomic import write_bytes_atomic, write_text_atomic
from ..errors import ValidationError
from ..learn.model_directory import file_sha256, load_training_run
from ..learn.pairs_table import read_pairs_table, scene_table, select_scenes, target_matrix
from . import figures
from .breakdown import BREAKDOWNS, metric_table
from .html_page import render_page
from .importance import permutation_importance
from .learning_curve import learning_curve
from .metrics import HEADLINE_UNITS, error_metrics
from .predictions import NO_CORRECTION, model_correction, reference_predictions
from .tables import breakdown_pivot, headline_table, to_html, to_markdown

HELD_OUT = "held-out scenes"
_SURFACE = "surface_downward_flux"


@dataclass
class EvaluationSet:
    """Predictions of every predictor on one set of samples."""

    label: str
    pairs: object
    predictions: dict
    outcomes: dict = field(default_factory=dict)
    raw: dict = field(default_factory=dict)

    @property
    def models(self):
        return [name for name in self.predictions if name in self.outcomes]


@dataclass
class Evaluation:
    """Everything the report shows."""

    record: dict
    targets: list
    sets: list
    table: pd.DataFrame
    importance: dict
    curve: pd.DataFrame | None
    curve_model: str | None
    consistency: bool
    notes: list
    pairs_path: str
    pairs_matches_training: bool
    model_dir: str


def _check_scenes(pairs, scenes, what):
    present = scene_table(pairs)
    missing = [s for s in scenes if s not in present]
    if missing:
        raise ValidationError(f"pairs table lacks the {what} {missing[:8]}"
                              f"{' ...' if len(missing) > 8 else ''} named in training.json")


def _evaluation_set(label, pairs, models, targets, consistency, suffix=""):
    predictions = reference_predictions(pairs, targets)
    outcomes, raw = {}, {}
    for name, model in models.items():
        correction, outcome = model_correction(model.estimator, pairs, targets, consistency)
        predictions[name + suffix] = correction
        outcomes[name + suffix] = outcome
        if consistency:
            raw[name + suffix] = model_correction(model.estimator, pairs, targets, consistency=False)[0]
    return EvaluationSet(label=label, pairs=pairs, predictions=predictions, outcomes=outcomes, raw=raw)


def evaluate(model_dir, pairs_path, *, consistency=True, learning_curve_points=4, importance_repeats=3, seed=0,
             quiet=False):
    """Score the models of a model directory on its held-out scenes and held-out regime.

    Parameters
    ----------
    model_dir : str or Path
        Written by ``surrogate3d train``.
    pairs_path : str or Path
        Pairs table holding the held-out scenes (normally the training file).
    consistency : bool
        Score learned corrections after :func:`~surrogate3d.learn.consistency.apply_correction`
        (non-negative fluxes, energy balance), as a host model would apply them.
    learning_curve_points : int
        Subset sizes of the learning curve (0 skips it).
    importance_repeats : int
        Permutations per feature for the importance (0 skips it).
    seed : int
        Seed of the permutations and of the learning-curve scene order.
    quiet : bool
        Hide progress bars.

    Returns
    -------
    Evaluation

    Raises
    ------
    surrogate3d.errors.FormatError
        Unreadable model directory or pairs file.
    surrogate3d.errors.ValidationError
        The pairs table lacks held-out scenes or features the models need.
    """
    run = load_training_run(model_dir)
    pairs = read_pairs_table(pairs_path)
    record, targets = run.record, list(run.record["targets"])
    split = record["split"]
    if not split["held_out_scenes"]:
        raise ValidationError(f"model directory {str(model_dir)!r} held out no scenes "
                              "(split.held_out_scene_fraction = 0): nothing to evaluate")
    _check_scenes(pairs, split["held_out_scenes"], "held-out scenes")
    notes = []
    matches = file_sha256(pairs_path) == record["provenance"]["pairs_sha256"]
    if not matches:
        notes.append("The pairs file differs from the one the models were trained on (SHA-256); held-out scenes "
                     "are taken by name from training.json.")
    steps = tqdm(total=3, desc="evaluate", unit="step", disable=True if quiet else None)
    held = select_scenes(pairs, split["held_out_scenes"])
    sets = [_evaluation_set(HELD_OUT, held, run.models, targets, consistency)]
    if run.transfer_models:
        regime = split["held_out_regime"]
        _check_scenes(pairs, split["transfer_test_scenes"], "regime-transfer scenes")
        sets.append(_evaluation_set(f"held-out regime {regime}", select_scenes(pairs, split["transfer_test_scenes"]),
                                    run.transfer_models, targets, consistency,
                                    suffix=f" (trained without {regime})"))
    table = pd.concat([metric_table(s.pairs, s.predictions, targets, s.label, BREAKDOWNS) for s in sets],
                      ignore_index=True)
    steps.update()

    importance = {}
    if importance_repeats > 0:
        importance = {name: permutation_importance(model.estimator, held, targets, importance_repeats, seed)
                      for name, model in run.models.items()}
    steps.update()

    curve, curve_model = None, None
    if learning_curve_points > 0:
        kinds = {name: model.kind for name, model in run.models.items()}
        curve_model = next((n for n, k in kinds.items() if k == "boosted"), next(iter(kinds)))
        training = split["training_scenes"]
        present = scene_table(pairs)
        if all(s in present for s in training):
            model = run.models[curve_model]
            curve = learning_curve(model.kind, model.card["hyperparameters"], pairs, training, held,
                                   model.card["feature_names"], targets, points=learning_curve_points, seed=seed,
                                   consistency=consistency, quiet=quiet)
        else:
            notes.append("The learning curve is left out: the pairs file lacks some training scenes.")
    steps.update()
    steps.close()
    return Evaluation(record=record, targets=targets, sets=sets, table=table, importance=importance, curve=curve,
                      curve_model=curve_model, consistency=consistency, notes=notes, pairs_path=str(pairs_path),
                      pairs_matches_training=matches, model_dir=str(model_dir))


def _best_model(evaluation, eval_set):
    rows = evaluation.table[(evaluation.table["evaluation_set"] == eval_set.label)
                            & (evaluation.table["breakdown"] == "all")
                            & (evaluation.table["units"] == HEADLINE_UNITS)
                            & (evaluation.table["predictor"].isin(eval_set.models))]
    target = _SURFACE if _SURFACE in evaluation.targets else evaluation.targets[0]
    rows = rows[rows["target"] == target]
    return str(rows.sort_values("skill", ascending=False)["predictor"].iloc[0])


def _map_domains(eval_set, targets, model, n_scenes):
    """Up to ``n_scenes`` held-out domains (one per regime first), finest resolution, lowest sun."""
    pairs = eval_set.pairs
    m = targets.index(_SURFACE)
    table = scene_table(pairs)
    by_regime = {}
    for scene, (regime, _) in table.items():
        by_regime.setdefault(regime, []).append(scene)
    chosen = []
    while len(chosen) < n_scenes and any(by_regime.values()):
        for scenes in by_regime.values():
            if scenes and len(chosen) < n_scenes:
                chosen.append(scenes.pop(0))
    ica = target_matrix(pairs, targets, "independent_column_flux")[:, m]
    full = target_matrix(pairs, targets, "full_3d_flux")[:, m]
    flux = np.asarray(pairs["incident_flux"].values)
    scene_of = np.asarray(pairs["scene"].values).astype(str)
    resolution = np.asarray(pairs["host_resolution"].values)
    zenith = np.asarray(pairs["solar_zenith_angle"].values)
    azimuth = np.asarray(pairs["solar_beam_azimuth"].values)
    domains = []
    for scene in chosen:
        here = scene_of == scene
        finest = resolution[here].min()
        here &= resolution == finest
        lowest = zenith[here].max()
        here &= zenith == lowest
        here &= azimuth == azimuth[here][0]
        idx = np.flatnonzero(here)
        sub = pairs.isel(sample=idx)
        title = (f"{scene}: sun zenith {lowest:g} deg, beam toward {azimuth[idx[0]]:g} deg "
                 f"(ccw from +x), {finest / 1000:g} km host columns")
        domains.append({
            "title": title, "resolution": float(finest),
            "ica": figures.host_map(sub, ica[idx] * flux[idx]),
            "full_3d": figures.host_map(sub, full[idx] * flux[idx]),
            "corrected": figures.host_map(sub, (ica[idx] + eval_set.predictions[model][idx, m]) * flux[idx]),
        })
    return domains


def _figure_set(evaluation, map_scenes):
    """All figures as (file stem, caption, PNG bytes), in report order."""
    out = []
    targets = evaluation.targets
    for k, eval_set in enumerate(evaluation.sets):
        stem = "held_out" if k == 0 else "regime_transfer"
        predictors = list(eval_set.predictions)
        overall = evaluation.table[(evaluation.table["evaluation_set"] == eval_set.label)
                                   & (evaluation.table["breakdown"] == "all")
                                   & (evaluation.table["units"] == HEADLINE_UNITS)]
        out.append((f"{stem}_skill", f"Skill of every predictor on the {eval_set.label}, per target; dotted: the "
                    "noise floor, the skill a perfect model would reach given the Monte Carlo noise of the targets.",
                    figures.to_png(figures.skill_bars(overall, targets, predictors,
                                                      f"Skill on the {eval_set.label}"))))
        by_zenith = evaluation.table[(evaluation.table["evaluation_set"] == eval_set.label)
                                     & (evaluation.table["breakdown"] == "solar_zenith")
                                     & (evaluation.table["units"] == HEADLINE_UNITS)]
        out.append((f"{stem}_skill_vs_zenith", f"Skill against solar zenith angle (bin centres) on the "
                    f"{eval_set.label}.", figures.to_png(figures.skill_vs_zenith(
                        by_zenith, targets, predictors, f"Skill against solar zenith angle, {eval_set.label}"))))
        if k > 0:
            continue
        best = _best_model(evaluation, eval_set)
        if _SURFACE in targets and map_scenes > 0:
            out.append(("maps", f"Surface downward flux of sample held-out scenes at the finest host resolution "
                        f"and lowest sun: independent column, 3D benchmark, corrected by {best} (the model with the "
                        "best skill for this flux), and the errors of the corrected and uncorrected fluxes.",
                        figures.to_png(figures.flux_maps(_map_domains(eval_set, targets, best, map_scenes), best))))
        flux = np.asarray(eval_set.pairs["incident_flux"].values)[:, None]
        true = target_matrix(eval_set.pairs, targets)
        out.append(("scatter", "Predicted against true (3D minus independent column) correction on the held-out "
                    "scenes; the true values carry Monte Carlo noise.",
                    figures.to_png(figures.correction_scatter(true * flux, {n: eval_set.predictions[n] * flux
                                                                            for n in eval_set.models}, targets))))
        errors = {name: (p - true) * flux for name, p in eval_set.predictions.items()}
        out.append(("error_histograms", "Distribution of the corrected minus 3D flux on the held-out scenes "
                    f"(logarithmic counts); '{NO_CORRECTION}' is the independent-column error.",
                    figures.to_png(figures.error_histograms(errors, targets))))
        if evaluation.importance:
            out.append(("importance", "Permutation importance on the held-out scenes: the drop in target-averaged "
                        "skill when a feature is shuffled among the samples of each scene; bars: mean over scenes, "
                        "whiskers: standard error over scenes.",
                        figures.to_png(figures.importance_bars(evaluation.importance))))
        if evaluation.curve is not None:
            full = overall[overall["predictor"] == evaluation.curve_model]["skill"].mean()
            out.append(("learning_curve", f"Held-out skill of {evaluation.curve_model} refitted on growing subsets "
                        "of the training scenes (regimes interleaved), per target and averaged over targets.",
                        figures.to_png(figures.learning_curve_plot(evaluation.curve, evaluation.curve_model,
                                                                   full_skill=float(full)))))
    return out


def _consistency_effect(evaluation):
    """Skill of every learned model as predicted and after the consistency step, per target."""
    rows = []
    for eval_set in evaluation.sets:
        true = target_matrix(eval_set.pairs, evaluation.targets)
        flux = eval_set.pairs["incident_flux"].values
        for name, raw in eval_set.raw.items():
            for m, target in enumerate(evaluation.targets):
                rows.append({"evaluation set": eval_set.label, "model": name, "target": target,
                             "skill as predicted": error_metrics(raw[:, m], true[:, m], scale=flux)["skill"],
                             "skill after consistency": error_metrics(eval_set.predictions[name][:, m],
                                                                      true[:, m], scale=flux)["skill"]})
    return pd.DataFrame(rows)


def _consistency_table(evaluation):
    rows = []
    for eval_set in evaluation.sets:
        for name, outcome in eval_set.outcomes.items():
            if outcome is None:
                continue
            row = {"evaluation set": eval_set.label, "model": name, "samples": outcome.flux.shape[0]}
            row.update({f"clipped {t}": c for t, c in outcome.clipped.items()})
            row.update({"clipped fraction": outcome.clipped_fraction,
                        "mean abs. balance shift [1]": float(np.mean(np.abs(outcome.balance_shift)))
                        if outcome.balance_shift.size else 0.0,
                        "rescaled domains": outcome.rescaled_domains, "unbalanced domains": outcome.unbalanced_domains})
            rows.append(row)
    return pd.DataFrame(rows)


_DEFINITIONS = """
<p>A correction <i>p</i> of a target with benchmark value <i>t</i> (3D minus independent column, as a fraction of
the incident flux) gives the corrected flux ICA + <i>p</i>, whose error against the 3D benchmark is
<i>e</i> = <i>p</i> &minus; <i>t</i>; <i>s</i> is the Monte Carlo standard error of <i>t</i>.</p>
<ul>
<li>RMSE = sqrt(mean(<i>e</i>&sup2;)), MAE = mean(|<i>e</i>|), bias = mean(<i>e</i>),
R2 = 1 &minus; &Sigma;<i>e</i>&sup2; / &Sigma;(<i>t</i> &minus; mean <i>t</i>)&sup2;.</li>
<li>skill = 1 &minus; RMSE / RMSE(no correction), with RMSE(no correction) = sqrt(mean(<i>t</i>&sup2;)):
1 is perfect, 0 is no better than the independent column, below 0 is worse. <b>Every skill in this report is
the skill of the errors in W m-2</b> (the headline skill, also quoted by summary.md, the model card and the
README), except the column "skill of fractions" (errors in fractions of the incident flux, every sun weighted
alike) and the rows of units "1" in metrics.csv.</li>
<li>noise floor = 1 &minus; sqrt(mean(<i>s</i>&sup2;)) / RMSE(no correction): the skill of a perfect model scored
against noisy benchmarks.</li>
<li>noise-corrected RMSE = sqrt(max(mean(<i>e</i>&sup2;) &minus; mean(<i>s</i>&sup2;), 0)): the RMSE against the
noise-free 3D flux, for errors independent of the benchmark noise (held-out scenes); the noise-corrected skill
uses it with sqrt(max(mean(<i>t</i>&sup2;) &minus; mean(<i>s</i>&sup2;), 0)) as reference.</li>
<li>W m-2 values multiply <i>e</i>, <i>t</i> and <i>s</i> sample by sample by the incident flux
S0 cos(&theta;0).</li>
</ul>
<p>Details and references: docs/methods/models-and-metrics.md.</p>
"""


def _image(png, caption):
    data = base64.b64encode(png).decode("ascii")
    return (f'<figure><img alt="{html.escape(caption[:80])}" src="data:image/png;base64,{data}">'
            f"<figcaption>{html.escape(caption)}</figcaption></figure>")


def write_report(evaluation, out_dir, map_scenes=2):
    """Write the report files of an evaluation.

    Files (each written atomically): ``report.html`` (self-contained, figures embedded as
    base64 PNG), ``metrics.csv`` and ``metrics.md`` (whole evaluation sets),
    ``breakdown_<name>.csv`` and ``.md`` (by regime, solar zenith, cloud fraction, host
    resolution), ``importance.csv``, ``learning_curve.csv``, ``consistency.csv`` (clipping
    and balance counts), ``consistency_skill.csv`` (skill before and after the
    consistency step), ``summary.json`` and ``figures/*.png``.

    Parameters
    ----------
    evaluation : Evaluation
    out_dir : str or Path
        Created if missing.
    map_scenes : int
        Held-out scenes shown in the maps.

    Returns
    -------
    Path
        The HTML report.
    """
    out_dir = Path(out_dir)
    (out_dir / "figures").mkdir(parents=True, exist_ok=True)
    table = evaluation.table
    write_text_atomic(out_dir / "metrics.csv", table[table["breakdown"] == "all"].to_csv(index=False))
    md = ["# Skill on held-out data\n"]
    for eval_set in evaluation.sets:
        md += [f"\n## {eval_set.label}\n\n", to_markdown(headline_table(table, eval_set.label))]
    write_text_atomic(out_dir / "metrics.md", "".join(md))
    for breakdown in BREAKDOWNS[1:]:
        rows = table[table["breakdown"] == breakdown]
        write_text_atomic(out_dir / f"breakdown_{breakdown}.csv", rows.to_csv(index=False))
        md = [f"# Skill by {breakdown.replace('_', ' ')}\n"]
        for eval_set in evaluation.sets:
            md += [f"\n## {eval_set.label}: skill (errors in W m-2)\n\n",
                   to_markdown(breakdown_pivot(table, eval_set.label, breakdown)),
                   f"\n## {eval_set.label}: RMSE [W m-2]\n\n",
                   to_markdown(breakdown_pivot(table, eval_set.label, breakdown, "rmse", "W m-2"))]
        write_text_atomic(out_dir / f"breakdown_{breakdown}.md", "".join(md))
    if evaluation.importance:
        importance = pd.concat([t.assign(model=name) for name, t in evaluation.importance.items()], ignore_index=True)
        write_text_atomic(out_dir / "importance.csv", importance.to_csv(index=False))
    if evaluation.curve is not None:
        write_text_atomic(out_dir / "learning_curve.csv",
                          evaluation.curve.assign(model=evaluation.curve_model).to_csv(index=False))
    consistency = _consistency_table(evaluation)
    effect = _consistency_effect(evaluation)
    write_text_atomic(out_dir / "consistency.csv", consistency.to_csv(index=False))
    write_text_atomic(out_dir / "consistency_skill.csv", effect.to_csv(index=False))

    figure_set = _figure_set(evaluation, map_scenes)
    for stem, _, png in figure_set:
        write_bytes_atomic(out_dir / "figures" / f"{stem}.png", png)
    images = {stem: _image(png, caption) for stem, caption, png in figure_set}

    split = evaluation.record["split"]
    provenance = evaluation.record["provenance"]
    held = evaluation.sets[0]
    summary = {
        "package_version": __version__, "model_dir": evaluation.model_dir, "pairs_file": evaluation.pairs_path,
        "pairs_matches_training": evaluation.pairs_matches_training, "consistency": evaluation.consistency,
        "evaluation_sets": {s.label: int(s.pairs.sizes["sample"]) for s in evaluation.sets},
        "skill": {s.label: {f"{r.predictor} | {r.target}": r.skill for r in
                            table[(table["evaluation_set"] == s.label) & (table["breakdown"] == "all")
                                  & (table["units"] == HEADLINE_UNITS)].itertuples()} for s in evaluation.sets},
        "skill_units": HEADLINE_UNITS,
        "notes": evaluation.notes,
    }
    write_text_atomic(out_dir / "summary.json", json.dumps(summary, indent=2) + "\n")

    sections = []
    intro = (f"<p>Models of <code>{evaluation.model_dir}</code> (recipe <code>{evaluation.record.get('recipe_name')}"
             f"</code>) scored on {len(split['held_out_scenes'])} held-out scenes of unseen seeds "
             f"({held.pairs.sizes['sample']} samples)")
    if len(evaluation.sets) > 1:
        intro += f" and on the held-out regime <code>{split['held_out_regime']}</code>"
    intro += (f", against no correction and the two published baselines on the same samples. Pairs file "
              f"<code>{evaluation.pairs_path}</code>"
              f"{' (the training file)' if evaluation.pairs_matches_training else ' (not the training file)'}. "
              + ("Learned corrections are scored after the consistency step (non-negative fluxes, direct + diffuse = "
                 "total, energy balance per domain)." if evaluation.consistency
                 else "Learned corrections are scored as predicted (no consistency step).") + "</p>")
    intro += "".join(f"<p class='note'>{n}</p>" for n in evaluation.notes)
    sections.append(("Summary", intro + images["held_out_skill"] + to_html(headline_table(table, HELD_OUT))))
    sections.append(("Skill against solar zenith angle", images["held_out_skill_vs_zenith"]))
    for stem, title in (("maps", "Maps of sample held-out scenes"), ("scatter", "Predicted against true correction"),
                        ("error_histograms", "Error distributions"), ("importance", "Feature importance"),
                        ("learning_curve", "Learning curve")):
        if stem in images:
            sections.append((title, images[stem]))
    for breakdown in BREAKDOWNS[1:]:
        sections.append((f"Skill by {breakdown.replace('_', ' ')}",
                         to_html(breakdown_pivot(table, HELD_OUT, breakdown))))
    if len(evaluation.sets) > 1:
        transfer = evaluation.sets[1]
        sections.append((f"Regime transfer: {split['held_out_regime']}",
                         f"<p>Models trained on the training scenes of the other regimes only "
                         f"({len(split['transfer_training_scenes'])} scenes, same hyperparameters), scored on every "
                         f"scene of <code>{split['held_out_regime']}</code> ({transfer.pairs.sizes['sample']} "
                         "samples).</p>" + images["regime_transfer_skill"]
                         + to_html(headline_table(table, transfer.label)) + images["regime_transfer_skill_vs_zenith"]))
    sections.append(("Physical consistency", "<p>How often the consistency step had to clip a negative corrected "
                     "flux, and the domain-mean shift of the absorption correction that closed the energy "
                     "budget, and what the step does to the skill.</p>" + to_html(consistency) + to_html(effect)))
    sections.append(("Definitions", _DEFINITIONS))
    sections.append(("Provenance", to_html(pd.DataFrame(
        [{"item": k, "value": v} for k, v in provenance.items() if k != "recipe_text"]
        + [{"item": "training scenes", "value": ", ".join(split["training_scenes"])},
           {"item": "held-out scenes", "value": ", ".join(split["held_out_scenes"])}]))
        + f"<h3>Training recipe</h3><pre>{html.escape(provenance['recipe_text'])}</pre>"))
    page = render_page("Held-out skill of the 3D corrections", sections, footer=f"surrogate3d {__version__}")
    write_text_atomic(out_dir / "report.html", page)
    return out_dir / "report.html"
