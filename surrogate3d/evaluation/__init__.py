"""Held-out evaluation of the learned corrections: metrics, breakdowns, figures, report.

:func:`evaluate` scores a trained model directory on the scenes its training held out
(and on the held-out regime) against no correction and the published baselines;
:func:`write_report` writes the HTML page and the CSV and Markdown tables.
"""

from .breakdown import BREAKDOWNS, metric_table
from .importance import permutation_importance
from .learning_curve import learning_curve
from .metrics import METRICS, error_metrics
from .report import Evaluation, evaluate, write_report

__all__ = ["BREAKDOWNS", "METRICS", "Evaluation", "error_metrics", "evaluate", "learning_curve", "metric_table",
           "permutation_importance", "write_report"]
