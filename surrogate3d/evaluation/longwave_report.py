"""The report files of a longwave evaluation (``surrogate3d evaluate`` on longwave models).

The longwave targets are in W m-2 and have no sun, no consistency step and one published
baseline, the effective cloud fraction of broken clouds (``docs/methods/longwave.md``), so
the page is the shortwave report's shape cut to what applies: the skill of every model
next to no correction and that baseline (the share of the independent column's RMSE each
removes), broken down by regime, cloud fraction and host
resolution, the leave-one-family-out set, maps, scatter, error histograms, importance,
learning curve, the training envelope and, with a longwave profile model, its heating-rate
skill (:mod:`surrogate3d.evaluation.longwave_profile_skill`).
"""

import html
import json
from pathlib import Path

import numpy as np

from .._atomic import write_text_atomic
from ..learn.pairs_table import scene_table, target_matrix
from . import figures
from .breakdown import LONGWAVE_BREAKDOWNS
from .family_transfer import LEFT_OUT
from .longwave_profile_skill import longwave_profile_panels
from .predictions import NO_CORRECTION
from .report_parts import (analysis_figures, family_figure, figure_sections, profile_section, report_summary,
                           summary_section, write_figures, write_metric_tables, write_page)
from .tables import breakdown_pivot, to_html

#: The flux the summary, the maps and the family figure show.
HEADLINE_TARGET = "longwave_surface_downward_flux"

#: Metric columns of the headline table and their titles (all of the W m-2 errors).
_HEADLINE = {"n": "n", "skill": "skill (share of the ICA RMSE removed)", "noise_floor_skill": "noise floor",
             "noise_corrected_skill": "noise-corrected skill", "rmse": "RMSE [W m-2]",
             "rmse_no_correction": "RMSE no correction [W m-2]", "mae": "MAE [W m-2]", "bias": "bias [W m-2]",
             "r2": "R2"}

_DEFINITIONS = """
<p>A correction <i>p</i> of a target with benchmark value <i>t</i> (3D minus independent column of a longwave
field, host-column mean, W m-2) gives the corrected field ICA + <i>p</i>, whose error against the 3D benchmark is
<i>e</i> = <i>p</i> &minus; <i>t</i>; <i>s</i> is the Monte Carlo standard error of <i>t</i>.</p>
<ul>
<li>RMSE = sqrt(mean(<i>e</i>&sup2;)), MAE = mean(|<i>e</i>|), bias = mean(<i>e</i>),
R2 = 1 &minus; &Sigma;<i>e</i>&sup2; / &Sigma;(<i>t</i> &minus; mean <i>t</i>)&sup2;.</li>
<li>skill = 1 &minus; RMSE / RMSE(no correction), with RMSE(no correction) = sqrt(mean(<i>t</i>&sup2;)): the
share of the independent column's RMSE the correction removes; 1 is perfect, 0 no better than the independent
column, below 0 worse.</li>
<li>noise floor = 1 &minus; sqrt(mean(<i>s</i>&sup2;)) / RMSE(no correction): the skill of a perfect model scored
against noisy benchmarks; the noise-corrected skill removes the benchmark noise from both mean squares.</li>
<li>Training envelope: a column is flagged when a feature lies outside its training range or its Mahalanobis
distance from the model's training columns exceeds the distance 99 % of them stay within.</li>
</ul>
<p>Details and references: docs/methods/models-and-metrics.md and docs/methods/longwave.md.</p>
"""


def _headline_target(targets):
    return HEADLINE_TARGET if HEADLINE_TARGET in targets else targets[0]


def _rows(table, label, breakdown="all"):
    return table[(table["evaluation_set"] == label) & (table["breakdown"] == breakdown)]


def headline_table(table, label):
    """One row per (target, predictor) of an evaluation set with the metrics of :data:`_HEADLINE`."""
    rows = _rows(table, label)
    return rows[["target", "predictor", *_HEADLINE]].rename(columns=_HEADLINE).reset_index(drop=True)


def _map_domains(eval_set, targets, model, n_scenes):
    """Up to ``n_scenes`` domains of the set (one per regime first, the cloudiest scene of each), finest resolution."""
    pairs = eval_set.pairs
    m = targets.index(HEADLINE_TARGET)
    scene_of = np.asarray(pairs["scene"].values).astype(str)
    resolution = np.asarray(pairs["host_resolution"].values)
    cloud = np.asarray(pairs["cloud_fraction"].values)
    by_regime = {}
    for scene, (regime, _) in scene_table(pairs).items():
        by_regime.setdefault(regime, []).append(scene)
    ranked = sorted((sorted(scenes, key=lambda s: -cloud[scene_of == s].mean()) for scenes in by_regime.values()),
                    key=lambda scenes: -cloud[scene_of == scenes[0]].mean())
    chosen = [scenes[0] for scenes in ranked if cloud[scene_of == scenes[0]].mean() > 0][:n_scenes]
    ica = target_matrix(pairs, targets, "independent_column_flux")[:, m]
    full = target_matrix(pairs, targets, "full_3d_flux")[:, m]
    domains = []
    for scene in chosen:
        here = scene_of == scene
        finest = resolution[here].min()
        idx = np.flatnonzero(here & (resolution == finest))
        sub = pairs.isel(sample=idx)
        domains.append({"title": f"{scene}: longwave, {finest / 1000:g} km host columns", "resolution": float(finest),
                        "ica": figures.host_map(sub, ica[idx]), "full_3d": figures.host_map(sub, full[idx]),
                        "corrected": figures.host_map(sub, ica[idx] + eval_set.predictions[model][idx, m])})
    return domains


def _figures(evaluation, map_scenes):
    """All figures as (file stem, caption, PNG bytes), in report order."""
    out = []
    targets = evaluation.targets
    table = evaluation.table
    target = _headline_target(targets)
    for k, eval_set in enumerate(evaluation.sets):
        stem = "main" if k == 0 else "left_out_families"
        predictors = list(eval_set.predictions)
        out.append((f"{stem}_skill", f"Skill (share of the independent column's RMSE removed) of every predictor on the "
                    f"{eval_set.label}, per longwave target; dotted: the noise floor.",
                    figures.to_png(figures.skill_bars(_rows(table, eval_set.label), targets, predictors,
                                                      f"Longwave skill on the {eval_set.label}"))))
        if eval_set.label == LEFT_OUT:
            out.append(family_figure(_rows(table, LEFT_OUT, "regime"), target, predictors, caption_end="."))
        if k > 0:
            continue
        overall = _rows(table, eval_set.label)
        best_rows = overall[overall["predictor"].isin(eval_set.models) & (overall["target"] == target)]
        best = str(best_rows.sort_values("skill", ascending=False)["predictor"].iloc[0])
        domains = _map_domains(eval_set, targets, best, map_scenes) if HEADLINE_TARGET in targets else []
        if domains:
            out.append(("maps", f"Surface downward longwave flux of the cloudiest held-out scenes: independent column, "
                        f"3D benchmark, corrected by {best}, and the errors of the corrected and uncorrected fluxes.",
                        figures.to_png(figures.flux_maps(domains, best))))
        true = target_matrix(eval_set.pairs, targets)
        out.append(("scatter", f"Predicted against true (3D minus independent column) longwave correction on the "
                    f"{eval_set.label} [W m-2]; the true values carry Monte Carlo noise.",
                    figures.to_png(figures.correction_scatter(true, {n: eval_set.predictions[n]
                                                                     for n in eval_set.models}, targets))))
        errors = {name: p - true for name, p in eval_set.predictions.items()}
        out.append(("error_histograms", f"Distribution of the corrected minus 3D longwave field on the "
                    f"{eval_set.label} [W m-2] (logarithmic counts); '{NO_CORRECTION}' is the independent-column "
                    "error.", figures.to_png(figures.error_histograms(errors, targets))))
        out += analysis_figures(evaluation, eval_set.label, overall)
    return out


def _summary(evaluation):
    return report_summary(evaluation, skill_rows=lambda label: _rows(evaluation.table, label),
                          spectrum={"spectrum": "longwave", "consistency": False},
                          profile_columns={"skill": "rmse_reduction", "noise_floor": "noise_floor"})


def _profile_section(profile, out_dir):
    """The heating-rate section: the skill table, the figure (written to ``figures/profiles.png``) and the
    table by height."""
    figure = longwave_profile_panels(profile.mean_profiles, profile.by_height, profile.model)
    integral = profile.column_integral
    matched = (f"matched to the longwave_atmosphere_net_absorption correction of {html.escape(profile.column_model)}"
               if profile.column_model else "left with their own column sum")
    text = (f"<p>The profile model {html.escape(profile.model)} predicts the 3D change of the net absorption of "
            f"every host layer (W m-2 per km of the layer); the layers are {matched}, the residual shared in "
            "proportion to each layer's own predicted change, so they sum to it (largest mismatch "
            f"{integral['largest_mismatch']:.1e} W m-2). Scored in the cloudy host columns, pooled over their "
            "layers, against no correction; skill is the share of the independent column's RMSE removed, and the "
            "noise floor the skill a perfect model would show against the Monte Carlo noise of the per-layer "
            f"targets. The profile's own column sum removes {integral['rmse_reduction']:.1%} of the column net "
            f"absorption's RMSE in these columns; the column correction it is matched to "
            f"{integral['rmse_reduction_matched']:.1%}.</p>")
    caption = ("Domain-mean longwave net-absorption profiles of the held-out scenes of largest 3D change: 3D, "
               "independent column, and the independent column corrected by the profile model; and the RMSE by "
               "height above the cloud top in the cloudy columns.")
    return profile_section(profile, out_dir, figure, text, caption)


def _envelope_view(evaluation, target):
    rows = evaluation.envelope[evaluation.envelope["target"] == target]
    if rows.empty:
        return rows
    view = rows[["evaluation_set", "predictor", "group", "n", "outside"]].copy()
    view["outside [%]"] = 100.0 * rows["share_outside"]
    view["skill inside"] = rows["skill_inside"]
    view["skill outside"] = rows["skill_outside"]
    return view.rename(columns={"evaluation_set": "evaluation set", "outside": "flagged"})


def write_longwave_report(evaluation, out_dir, map_scenes=2):
    """Write the report files of a longwave evaluation.

    Files (each written atomically): ``report.html`` (self-contained), ``metrics.csv``
    and ``metrics.md`` (whole evaluation sets, W m-2 rows only), ``breakdown_<name>.csv``
    and ``.md`` (regime, cloud fraction, host resolution), ``envelope.csv``,
    ``summary.json``, ``figures/*.png`` and, when computed, ``importance.csv``,
    ``learning_curve.csv`` and ``left_out_family_fits.csv``; with a profile model,
    ``profile_metrics.csv``, ``profile_by_height.csv`` and ``figures/profiles.png``.

    Parameters
    ----------
    evaluation : surrogate3d.evaluation.evaluation_sets.Evaluation
        From :func:`surrogate3d.evaluation.report.evaluate` on a longwave model directory.
    out_dir : str or Path
        Created if missing.
    map_scenes : int
        Held-out scenes shown as maps.

    Returns
    -------
    Path
        The HTML report.
    """
    out_dir = Path(out_dir)
    (out_dir / "figures").mkdir(parents=True, exist_ok=True)
    table = evaluation.table
    write_metric_tables(evaluation, out_dir, headline_table, LONGWAVE_BREAKDOWNS[1:], title="Longwave skill",
                        skill_heading="skill",
                        note="\nskill = share of the independent column's RMSE removed (errors in W m-2)\n")
    write_text_atomic(out_dir / "summary.json", json.dumps(_summary(evaluation), indent=2) + "\n")
    images = write_figures(_figures(evaluation, map_scenes), out_dir)
    first = evaluation.sets[0]
    target = _headline_target(evaluation.targets)
    sections = [summary_section(evaluation, images, to_html(headline_table(table, first.label))),
                *figure_sections(images, first.label)]
    for breakdown in LONGWAVE_BREAKDOWNS[1:]:
        sections.append((f"Skill by {breakdown.replace('_', ' ')}",
                         to_html(breakdown_pivot(table, first.label, breakdown))
                         + "<h3>RMSE [W m-2]</h3>" + to_html(breakdown_pivot(table, first.label, breakdown, "rmse"))))
    for eval_set in evaluation.sets[1:]:
        runs = evaluation.family_runs
        text = (f"<p>Every model refitted without each family (regime) with the hyperparameters the training run "
                f"chose, and scored on every scene of that family ({eval_set.pairs.sizes['sample']} samples; "
                f"{len(runs)} fits, {runs['fit_cpu_seconds'].sum():.0f} s of CPU).</p>")
        sections.append(("Leave-one-family-out", text + images["left_out_families_skill"]
                         + to_html(headline_table(table, LEFT_OUT)) + images["left_out_families_by_family"]
                         + "<h3>Skill on each left-out family</h3>" + to_html(breakdown_pivot(table, LEFT_OUT,
                                                                                              "regime"))))
    if evaluation.profile is not None:
        sections.append(("Heating-rate profiles", _profile_section(evaluation.profile, out_dir)))
    sections.append(("Training envelope", "<p>Columns outside each model's training envelope and the skill for "
                     f"{html.escape(target)} on the flagged and the other columns.</p>"
                     + to_html(_envelope_view(evaluation, target))))
    return write_page(evaluation, sections, _DEFINITIONS, out_dir)
