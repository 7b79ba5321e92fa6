"""The CSV files of an evaluation besides its metric tables, for the shortwave and the longwave report."""

import pandas as pd

from .._atomic import write_text_atomic


def write_analysis_tables(evaluation, out_dir):
    """The CSV files of an evaluation besides its metric tables: importance, learning curve, left-out-family
    fits, envelope and heating-rate tables (those the evaluation has); shared by the shortwave and longwave pages."""
    if evaluation.importance:
        importance = pd.concat([t.assign(model=name) for name, t in evaluation.importance.items()], ignore_index=True)
        write_text_atomic(out_dir / "importance.csv", importance.to_csv(index=False))
    if evaluation.curve is not None:
        write_text_atomic(out_dir / "learning_curve.csv",
                          evaluation.curve.assign(model=evaluation.curve_model).to_csv(index=False))
    if evaluation.family_runs is not None:
        write_text_atomic(out_dir / "left_out_family_fits.csv", evaluation.family_runs.to_csv(index=False))
    write_text_atomic(out_dir / "envelope.csv", evaluation.envelope.to_csv(index=False))
    if evaluation.profile is not None:
        write_text_atomic(out_dir / "profile_metrics.csv", evaluation.profile.table.to_csv(index=False))
        write_text_atomic(out_dir / "profile_by_height.csv", evaluation.profile.by_height.to_csv(index=False))
