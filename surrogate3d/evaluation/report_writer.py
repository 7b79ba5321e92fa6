"""The report files of an evaluation: CSV and Markdown tables, PNG figures, one HTML page.

:func:`write_report` writes any :class:`~surrogate3d.evaluation.evaluation_sets.Evaluation`,
from ``surrogate3d evaluate`` (held-out scenes, left-out families) or ``surrogate3d score``
(every sample of a pairs table).  Every skill shown is the skill of the W m-2 errors
(:data:`surrogate3d.evaluation.metrics.HEADLINE_UNITS`).
"""

import html
import json
from pathlib import Path

import numpy as np
import pandas as pd

from .._atomic import write_text_atomic
from ..learn.pairs_table import scene_table, target_matrix
from . import figures
from .breakdown import BREAKDOWNS, FAMILY_BREAKDOWNS
from .family_transfer import LEFT_OUT
from .metrics import HEADLINE_UNITS, error_metrics
from .predictions import NO_CORRECTION
from .report_parts import (analysis_figures, family_figure, figure_sections, profile_section, report_summary,
                           summary_section, write_figures, write_metric_tables, write_page)
from .tables import breakdown_pivot, headline_table, to_html

_SURFACE = "surface_downward_flux"

#: Breakdown tables written to files, in report order.
_BREAKDOWN_FILES = BREAKDOWNS[1:] + FAMILY_BREAKDOWNS[3:]


def _headline_target(targets):
    return _SURFACE if _SURFACE in targets else targets[0]


def _rows(evaluation, label, breakdown="all"):
    table = evaluation.table
    return table[(table["evaluation_set"] == label) & (table["breakdown"] == breakdown)
                 & (table["units"] == HEADLINE_UNITS)]


def _best_model(evaluation, eval_set):
    rows = _rows(evaluation, eval_set.label)
    rows = rows[rows["predictor"].isin(eval_set.models) & (rows["target"] == _headline_target(evaluation.targets))]
    return str(rows.sort_values("skill", ascending=False)["predictor"].iloc[0])


def _map_domains(eval_set, targets, model, n_scenes):
    """Up to ``n_scenes`` domains of the set (one per regime first), finest resolution, lowest sun."""
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
        stem = "main" if k == 0 else "left_out_families"
        predictors = list(eval_set.predictions)
        overall = _rows(evaluation, eval_set.label)
        out.append((f"{stem}_skill", f"Skill of every predictor on the {eval_set.label}, per target; dotted: the "
                    "noise floor, the skill a perfect model would reach given the Monte Carlo noise of the targets.",
                    figures.to_png(figures.skill_bars(overall, targets, predictors,
                                                      f"Skill on the {eval_set.label}"))))
        out.append((f"{stem}_skill_vs_zenith", f"Skill against solar zenith angle (bin centres) on the "
                    f"{eval_set.label}.", figures.to_png(figures.skill_vs_zenith(
                        _rows(evaluation, eval_set.label, "solar_zenith"), targets, predictors,
                        f"Skill against solar zenith angle, {eval_set.label}"))))
        if eval_set.label == LEFT_OUT:
            out.append(family_figure(_rows(evaluation, LEFT_OUT, "regime"), _headline_target(targets), predictors,
                                     caption_end=", next to the published baselines."))
        if k > 0:
            continue
        best = _best_model(evaluation, eval_set)
        if _SURFACE in targets and map_scenes > 0:
            out.append(("maps", f"Surface downward flux of sample scenes of the {eval_set.label} at the finest host "
                        f"resolution and lowest sun: independent column, 3D benchmark, corrected by {best} (the "
                        "model with the best skill for this flux), and the errors of the corrected and uncorrected "
                        "fluxes.", figures.to_png(figures.flux_maps(_map_domains(eval_set, targets, best,
                                                                                  map_scenes), best))))
        flux = np.asarray(eval_set.pairs["incident_flux"].values)[:, None]
        true = target_matrix(eval_set.pairs, targets)
        out.append(("scatter", f"Predicted against true (3D minus independent column) correction on the "
                    f"{eval_set.label}; the true values carry Monte Carlo noise.",
                    figures.to_png(figures.correction_scatter(true * flux, {n: eval_set.predictions[n] * flux
                                                                            for n in eval_set.models}, targets))))
        errors = {name: (p - true) * flux for name, p in eval_set.predictions.items()}
        out.append(("error_histograms", f"Distribution of the corrected minus 3D flux on the {eval_set.label} "
                    f"(logarithmic counts); '{NO_CORRECTION}' is the independent-column error.",
                    figures.to_png(figures.error_histograms(errors, targets))))
        out += analysis_figures(evaluation, eval_set.label, overall,
                                importance_note="; bars: mean over scenes, whiskers: standard error over scenes",
                                curve_note=" (regimes interleaved)")
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
                        "unbalanced domains": outcome.unbalanced_domains})
            rows.append(row)
    return pd.DataFrame(rows)


def _envelope_view(evaluation, target):
    """The envelope table of one target, readable: shares in percent, skill inside and outside."""
    rows = evaluation.envelope[evaluation.envelope["target"] == target]
    if rows.empty:
        return rows
    view = rows[["evaluation_set", "predictor", "group", "n", "outside_range", "beyond_distance", "outside"]].copy()
    view["outside [%]"] = 100.0 * rows["share_outside"]
    view["skill inside"] = rows["skill_inside"]
    view["skill outside"] = rows["skill_outside"]
    return view.rename(columns={"evaluation_set": "evaluation set", "outside_range": "outside a range",
                                "beyond_distance": "beyond the distance", "outside": "flagged"})


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
<li>direct-beam prior: the host's slant-path direct transmittance minus the same formula along the vertical
(feature <code>direct_beam_prior_slant_minus_vertical</code>, docs/features.md) used as the correction of the
direct and total surface flux, the other targets uncorrected.</li>
<li>Training envelope: a column is flagged when a feature lies outside its training range or its Mahalanobis
distance from the model's training columns exceeds the distance 99 % of them stay within; a column the
clear-sky gate selects never is. Flagged columns are corrected like the others.</li>
</ul>
<p>Details and references: docs/methods/models-and-metrics.md.</p>
"""


def _summary(evaluation):
    summary = report_summary(evaluation, skill_rows=lambda label: _rows(evaluation, label),
                             spectrum={"consistency": evaluation.consistency},
                             profile_columns={"rmse_reduction": "rmse_reduction"})
    if evaluation.family_runs is not None:
        runs = evaluation.family_runs
        summary["left_out_families"] = {"families": list(dict.fromkeys(runs["family"])), "fits": len(runs),
                                        "fit_cpu_seconds": float(runs["fit_cpu_seconds"].sum()),
                                        "fit_wall_seconds": float(runs["fit_wall_seconds"].sum())}
    return summary


def _family_section(evaluation, eval_set, images):
    runs = evaluation.family_runs
    target = _headline_target(evaluation.targets)
    families = list(dict.fromkeys(runs["family"]))
    cross = breakdown_pivot(evaluation.table, LEFT_OUT, "regime_solar_zenith")
    text = (f"<p>For every family (regime) of the pairs table, every model is refitted on the training scenes of "
            f"the other families with the hyperparameters the training run chose (no new search) and scored on every "
            f"scene of that family; the families' predictions together form this set ({eval_set.pairs.sizes['sample']}"
            f" samples of {len(families)} families: {', '.join(families)}). No correction and the published baselines "
            f"are scored on the same samples. {len(runs)} fits took {runs['fit_cpu_seconds'].sum():.0f} s of CPU "
            f"({runs['fit_wall_seconds'].sum():.0f} s wall; left_out_family_fits.csv).</p>")
    return (text + images["left_out_families_skill"] + to_html(headline_table(evaluation.table, LEFT_OUT))
            + images["left_out_families_by_family"]
            + "<h3>Skill on each left-out family</h3>" + to_html(breakdown_pivot(evaluation.table, LEFT_OUT, "regime"))
            + images["left_out_families_skill_vs_zenith"]
            + f"<h3>Skill on each left-out family by solar zenith angle: {html.escape(target)}</h3>"
            + to_html(cross[cross["target"] == target]))


def _profile_section(profile, out_dir):
    figure = figures.profile_panels(profile.mean_profiles, profile.by_height, profile.model)
    integral = profile.column_integral
    if profile.column_model:
        matched = (f"matched to the column absorption that the consistency step gives when the profile's column sum "
                   f"replaces the absorption correction of {html.escape(profile.column_model)} (as a host uses them)"
                   f"; that column absorption removes {integral['rmse_reduction_matched']:.2f} of the independent "
                   f"column's RMSE in the cloudy columns, {integral['rmse_reduction_matched_all_columns_w_m2']:.2f} "
                   "in all columns (errors in W m-2)")
    else:
        matched = "summing to their own column total"
    text = (f"<p>The profile model {html.escape(profile.model)} predicts the 3D change of the absorption of every "
            f"host layer; its layers are {matched}. Scored in the cloudy host columns of the held-out scenes, pooled "
            "over their layers, against no correction (the independent column): RMSE and the share of the "
            "independent column's RMSE removed. The profile's own column sum removes "
            f"{integral['rmse_reduction']:.2f} of the RMSE of the column absorption in the cloudy columns; after "
            f"matching, the layers sum to the column correction within {integral['largest_mismatch']:.1e}.</p>")
    caption = ("Domain-mean absorption profiles of the cloudiest held-out scenes: 3D, independent column, and the "
               "independent column corrected by the profile model; and the RMSE by height above the cloud top in the "
               "cloudy columns.")
    return profile_section(profile, out_dir, figure, text, caption)


def write_report(evaluation, out_dir, map_scenes=2):
    """Write the report files of an evaluation.

    Files (each written atomically): ``report.html`` (self-contained, figures embedded as
    base64 PNG), ``metrics.csv`` and ``metrics.md`` (whole evaluation sets),
    ``breakdown_<name>.csv`` and ``.md`` (by regime, solar zenith, cloud fraction, host
    resolution, and family by solar zenith for the left-out families), ``envelope.csv``
    (columns outside each model's training envelope, skill inside and outside),
    ``consistency.csv`` (clipping and balance counts), ``consistency_skill.csv`` (skill
    before and after the consistency step), ``summary.json``, ``figures/*.png`` and, when
    computed, ``importance.csv``, ``learning_curve.csv``, ``left_out_family_fits.csv`` and, with a
    profile model, ``profile_metrics.csv``, ``profile_by_height.csv`` and ``figures/profiles.png``.

    A longwave evaluation gets the longwave page
    (:func:`surrogate3d.evaluation.longwave_report.write_longwave_report`).

    Parameters
    ----------
    evaluation : surrogate3d.evaluation.evaluation_sets.Evaluation
    out_dir : str or Path
        Created if missing.
    map_scenes : int
        Scenes of the first set shown in the maps.

    Returns
    -------
    Path
        The HTML report.
    """
    if evaluation.spectrum == "longwave":
        from .longwave_report import write_longwave_report

        return write_longwave_report(evaluation, out_dir, map_scenes)
    out_dir = Path(out_dir)
    (out_dir / "figures").mkdir(parents=True, exist_ok=True)
    table = evaluation.table
    write_metric_tables(evaluation, out_dir, headline_table, _BREAKDOWN_FILES, title="Skill",
                        skill_heading="skill (errors in W m-2)")
    consistency = _consistency_table(evaluation)
    effect = _consistency_effect(evaluation)
    write_text_atomic(out_dir / "consistency.csv", consistency.to_csv(index=False))
    write_text_atomic(out_dir / "consistency_skill.csv", effect.to_csv(index=False))
    write_text_atomic(out_dir / "summary.json", json.dumps(_summary(evaluation), indent=2) + "\n")

    images = write_figures(_figure_set(evaluation, map_scenes), out_dir)

    first = evaluation.sets[0]
    sections = [summary_section(evaluation, images, to_html(headline_table(table, first.label))),
                ("Skill against solar zenith angle", images["main_skill_vs_zenith"]),
                *figure_sections(images, first.label)]
    for breakdown in BREAKDOWNS[1:]:
        sections.append((f"Skill by {breakdown.replace('_', ' ')}",
                         to_html(breakdown_pivot(table, first.label, breakdown))))
    for eval_set in evaluation.sets[1:]:
        if eval_set.label == LEFT_OUT:
            sections.append(("Leave-one-family-out", _family_section(evaluation, eval_set, images)))
    target = _headline_target(evaluation.targets)
    if evaluation.profile is not None:
        sections.append(("Heating-rate profiles", _profile_section(evaluation.profile, out_dir)))
    sections.append(("Training envelope", f"<p>Columns outside each model's training envelope (a feature outside its "
                     "training range, or too far from the training columns in the Mahalanobis distance), and the "
                     f"skill for {html.escape(target)} on the flagged and the other columns. For the left-out "
                     "families every column is checked against the envelope of the model that never saw its family."
                     "</p>" + to_html(_envelope_view(evaluation, target))))
    sections.append(("Physical consistency", "<p>How often the consistency step had to clip a negative corrected "
                     "flux, and the domain-mean shift of the absorption correction that closed the energy "
                     "budget, and what the step does to the skill.</p>" + to_html(consistency) + to_html(effect)))
    return write_page(evaluation, sections, _DEFINITIONS, out_dir)
