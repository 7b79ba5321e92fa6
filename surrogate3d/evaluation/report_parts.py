"""What the shortwave and the longwave report pages share.

:mod:`surrogate3d.evaluation.report_writer` and :mod:`surrogate3d.evaluation.longwave_report`
write the same kinds of files (metric and breakdown tables, ``summary.json``, figures, one
HTML page) with their own wording, breakdowns and metric columns; the pieces here take
those as arguments.
"""

import html

import pandas as pd

from .. import __version__
from .._atomic import write_bytes_atomic, write_text_atomic
from . import figures
from .analysis_tables import write_analysis_tables
from .html_page import figure_html, render_page
from .metrics import HEADLINE_UNITS
from .tables import breakdown_pivot, to_html, to_markdown


def write_metric_tables(evaluation, out_dir, headline, breakdowns, title, skill_heading, note=""):
    """Write ``metrics.csv``, ``metrics.md``, ``breakdown_<name>.csv`` and ``.md`` and the analysis tables.

    Parameters
    ----------
    evaluation : surrogate3d.evaluation.evaluation_sets.Evaluation
    out_dir : Path
    headline : callable
        ``headline(table, label)``: the headline table of an evaluation set.
    breakdowns : sequence of str
        The breakdowns written to files (those without rows are left out).
    title : str
        Start of the Markdown titles ("<title> on held-out data", "<title> by <breakdown>").
    skill_heading : str
        Heading of the skill table of every evaluation set in the breakdown files.
    note : str
        Markdown after the title of ``metrics.md``.
    """
    table = evaluation.table
    write_text_atomic(out_dir / "metrics.csv", table[table["breakdown"] == "all"].to_csv(index=False))
    md = [f"# {title} on held-out data\n{note}"]
    for eval_set in evaluation.sets:
        md += [f"\n## {eval_set.label}\n\n", to_markdown(headline(table, eval_set.label))]
    write_text_atomic(out_dir / "metrics.md", "".join(md))
    for breakdown in breakdowns:
        rows = table[table["breakdown"] == breakdown]
        if rows.empty:
            continue
        write_text_atomic(out_dir / f"breakdown_{breakdown}.csv", rows.to_csv(index=False))
        md = [f"# {title} by {breakdown.replace('_', ' ')}\n"]
        for eval_set in evaluation.sets:
            if breakdown in eval_set.breakdowns:
                md += [f"\n## {eval_set.label}: {skill_heading}\n\n",
                       to_markdown(breakdown_pivot(table, eval_set.label, breakdown)),
                       f"\n## {eval_set.label}: RMSE [W m-2]\n\n",
                       to_markdown(breakdown_pivot(table, eval_set.label, breakdown, "rmse", HEADLINE_UNITS))]
        write_text_atomic(out_dir / f"breakdown_{breakdown}.md", "".join(md))
    write_analysis_tables(evaluation, out_dir)


def report_summary(evaluation, skill_rows, spectrum, profile_columns):
    """The content of ``summary.json`` both pages write.

    Parameters
    ----------
    evaluation : surrogate3d.evaluation.evaluation_sets.Evaluation
    skill_rows : callable
        ``skill_rows(label)``: the rows of the metric table whose skill the summary quotes.
    spectrum : dict
        Entries after the evaluation's own summary (the consistency step, the spectrum).
    profile_columns : dict of str -> str
        Entry of the profile summary -> column of the profile table it quotes per quantity.

    Returns
    -------
    dict
    """
    envelope = evaluation.envelope[(evaluation.envelope["group"] == "all")
                                   & (evaluation.envelope["target"] == evaluation.targets[0])]
    summary = {
        "package_version": __version__, **evaluation.summary, **spectrum,
        "evaluation_sets": {s.label: int(s.pairs.sizes["sample"]) for s in evaluation.sets},
        "skill_units": HEADLINE_UNITS,
        "skill": {s.label: {f"{r.predictor} | {r.target}": r.skill for r in skill_rows(s.label).itertuples()}
                  for s in evaluation.sets},
        "share_outside_envelope": {s.label: {r.predictor: (None if pd.isna(r.share_outside) else r.share_outside)
                                             for r in envelope[envelope["evaluation_set"] == s.label].itertuples()}
                                   for s in evaluation.sets},
        "notes": evaluation.notes,
    }
    profile = evaluation.profile
    if profile is not None:
        rows = profile.table[profile.table["predictor"] == profile.model]
        summary["profile"] = {
            "model": profile.model, "matched_to": profile.column_model,
            **{entry: {f"{r.quantity} [{r.units}]": getattr(r, column) for r in rows.itertuples()}
               for entry, column in profile_columns.items()},
            "column_integral": profile.column_integral}
    return summary


def family_figure(rows, target, predictors, caption_end):
    """The figure of the skill for ``target`` on each left-out family, as (file stem, caption, PNG bytes).

    Parameters
    ----------
    rows : pandas.DataFrame
        The rows of the left-out families' set by regime.
    target : str
    predictors : list of str
    caption_end : str
        What ends the caption after "scored with the models trained without it".
    """
    rows = rows[rows["target"] == target]
    families = list(dict.fromkeys(rows.sort_values("group_order")["group"]))
    return ("left_out_families_by_family", f"Skill for {target.replace('_', ' ')} on each family, scored with the "
            f"models trained without it{caption_end}",
            figures.to_png(figures.group_skill_bars(rows, families, predictors,
                                                    f"{target}: skill on each left-out family", "left-out family")))


def analysis_figures(evaluation, label, overall, importance_note="", curve_note=""):
    """The importance and learning-curve figures, where computed, as (file stem, caption, PNG bytes).

    Parameters
    ----------
    evaluation : surrogate3d.evaluation.evaluation_sets.Evaluation
    label : str
        The evaluation set they are of.
    overall : pandas.DataFrame
        Its metric rows of breakdown "all" (the learning curve marks the full model's skill).
    importance_note, curve_note : str
        Added to the captions, after "the samples of each scene" and "the training scenes".

    Returns
    -------
    list of tuple
    """
    out = []
    if evaluation.importance:
        out.append(("importance", f"Permutation importance on the {label}: the drop in target-averaged skill when a "
                    f"feature is shuffled among the samples of each scene{importance_note}.",
                    figures.to_png(figures.importance_bars(evaluation.importance))))
    if evaluation.curve is not None:
        full = overall[overall["predictor"] == evaluation.curve_model]["skill"].mean()
        out.append(("learning_curve", f"Held-out skill of {evaluation.curve_model} refitted on growing subsets of "
                    f"the training scenes{curve_note}, per target and averaged over targets.",
                    figures.to_png(figures.learning_curve_plot(evaluation.curve, evaluation.curve_model,
                                                               full_skill=float(full)))))
    return out


def write_figures(figure_set, out_dir):
    """Write every figure to ``figures/<stem>.png`` and return its HTML by stem.

    Parameters
    ----------
    figure_set : list of (str, str, bytes)
        File stem, caption and PNG bytes of every figure.
    out_dir : Path

    Returns
    -------
    dict of str -> str
    """
    for stem, _, png in figure_set:
        write_bytes_atomic(out_dir / "figures" / f"{stem}.png", png)
    return {stem: figure_html(png, caption) for stem, caption, png in figure_set}


def summary_section(evaluation, images, headline):
    """The first section: the evaluation's introduction and notes, the skill figure and the headline table (HTML)."""
    intro = evaluation.intro + "".join(f"<p class='note'>{html.escape(n)}</p>" for n in evaluation.notes)
    return ("Summary", intro + images["main_skill"] + headline)


def figure_sections(images, label):
    """The sections of the figures both pages may show, in page order, of those in ``images``."""
    titles = (("maps", f"Maps of sample scenes ({label})"), ("scatter", "Predicted against true correction"),
              ("error_histograms", "Error distributions"), ("importance", "Feature importance"),
              ("learning_curve", "Learning curve"))
    return [(title, images[stem]) for stem, title in titles if stem in images]


def profile_section(profile, out_dir, figure, text, caption):
    """The heating-rate section: ``text``, the skill table, the figure (also written to
    ``figures/profiles.png``) and the table by height."""
    png = figures.to_png(figure)
    write_bytes_atomic(out_dir / "figures" / "profiles.png", png)
    return (text + to_html(profile.table) + figure_html(png, caption) + "<h3>By height above the cloud top</h3>"
            + to_html(profile.by_height))


def write_page(evaluation, sections, definitions, out_dir):
    """Add the definitions and the provenance to ``sections`` and write ``report.html``; return its path."""
    provenance = to_html(pd.DataFrame([{"item": k, "value": v} for k, v in evaluation.provenance]))
    if evaluation.recipe_text:
        provenance += f"<h3>Training recipe</h3><pre>{html.escape(evaluation.recipe_text)}</pre>"
    sections = sections + [("Definitions", definitions), ("Provenance", provenance)]
    write_text_atomic(out_dir / "report.html", render_page(evaluation.title, sections,
                                                           footer=f"surrogate3d {__version__}"))
    return out_dir / "report.html"
