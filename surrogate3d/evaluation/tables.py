"""Readable tables cut from the long metric table, and their Markdown and HTML forms."""

import html
import math
import numbers

import pandas as pd

from .metrics import HEADLINE_UNITS

#: Columns of the headline table: (units of the metric rows, metric) -> column title.  The
#: skills, R2 and errors are of the W m-2 errors (the headline skill); "skill of fractions"
#: and "RMSE [1]" are of the errors in fractions of the incident flux.
HEADLINE = {
    (HEADLINE_UNITS, "n"): "n",
    (HEADLINE_UNITS, "skill"): "skill",
    (HEADLINE_UNITS, "noise_floor_skill"): "noise floor",
    (HEADLINE_UNITS, "noise_corrected_skill"): "noise-corrected skill",
    (HEADLINE_UNITS, "rmse"): "RMSE [W m-2]",
    (HEADLINE_UNITS, "mae"): "MAE [W m-2]",
    (HEADLINE_UNITS, "bias"): "bias [W m-2]",
    (HEADLINE_UNITS, "noise_corrected_rmse"): "noise-corrected RMSE [W m-2]",
    (HEADLINE_UNITS, "r2"): "R2",
    ("1", "skill"): "skill of fractions",
    ("1", "rmse"): "RMSE [1]",
}


def headline_table(table, evaluation_set, breakdown="all", group="all"):
    """One row per (target, predictor) with the metrics of :data:`HEADLINE`."""
    rows = table[(table["evaluation_set"] == evaluation_set) & (table["breakdown"] == breakdown)
                 & (table["group"] == group)]
    out = []
    targets = list(dict.fromkeys(rows["target"]))
    predictors = list(dict.fromkeys(rows["predictor"]))
    order = sorted(set(zip(rows["target"], rows["predictor"])),
                   key=lambda key: (targets.index(key[0]), predictors.index(key[1])))
    groups = dict(list(rows.groupby(["target", "predictor"], sort=False)))
    for target, predictor in order:
        part = groups[(target, predictor)]
        by_units = part.set_index("units")
        row = {"target": target, "predictor": predictor}
        for (units, metric), title in HEADLINE.items():
            row[title] = by_units.loc[units, metric]
        out.append(row)
    return pd.DataFrame(out)


def breakdown_pivot(table, evaluation_set, breakdown, metric="skill", units=HEADLINE_UNITS):
    """Rows (target, group), columns predictor (plus n), values ``metric``."""
    rows = table[(table["evaluation_set"] == evaluation_set) & (table["breakdown"] == breakdown)
                 & (table["units"] == units)]
    if rows.empty:
        return pd.DataFrame()
    order = list(dict.fromkeys(rows["predictor"]))
    keys = ["target", "group_order", "group"]
    pivot = rows.set_index(keys + ["predictor"])[metric].unstack("predictor")[order]
    pivot.insert(0, "n", rows.groupby(keys)["n"].first().astype(int))
    pivot = pivot.reset_index()
    targets = list(dict.fromkeys(rows["target"]))
    pivot["_target_order"] = pivot["target"].map({t: i for i, t in enumerate(targets)})
    pivot = pivot.sort_values(["_target_order", "group_order"], kind="stable")
    return pivot.drop(columns=["_target_order", "group_order"]).reset_index(drop=True)


def _cell(value):
    if isinstance(value, float):
        if math.isnan(value):
            return "-"
        if value != 0 and (abs(value) >= 1e5 or abs(value) < 1e-3):
            return f"{value:.3g}"
        return f"{value:.3f}" if abs(value) < 100 else f"{value:.1f}"
    return str(value)


def to_markdown(frame):
    """A pipe table (GitHub Markdown) of a DataFrame, numbers rounded for reading."""
    if frame.empty:
        return "(no rows)\n"
    header = "| " + " | ".join(str(c) for c in frame.columns) + " |"
    rule = "| " + " | ".join("---:" if pd.api.types.is_numeric_dtype(frame[c]) else "---" for c in frame.columns) + " |"
    body = ["| " + " | ".join(_cell(v) for v in row) + " |" for row in frame.itertuples(index=False)]
    return "\n".join([header, rule] + body) + "\n"


def to_html(frame):
    """An HTML table of a DataFrame, numbers rounded and right-aligned."""
    if frame.empty:
        return "<p>(no rows)</p>"
    head = "".join(f"<th>{html.escape(str(c))}</th>" for c in frame.columns)
    body = []
    for row in frame.itertuples(index=False):
        cells = "".join(f'<td class="num">{_cell(v)}</td>' if isinstance(v, numbers.Number) and not isinstance(v, bool)
                        else f"<td>{html.escape(str(v))}</td>" for v in row)
        body.append(f"<tr>{cells}</tr>")
    return f"<table><thead><tr>{head}</tr></thead><tbody>{''.join(body)}</tbody></table>"
