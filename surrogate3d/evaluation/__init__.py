"""Evaluation of the learned corrections: metrics, breakdowns, training envelopes, figures, reports.

:func:`evaluate` scores a trained model directory on the scenes its training held out and,
leaving out every family (regime) of the pairs table in turn, on the families it never
saw, against no correction and the published baselines; :func:`score` scores any
coefficient file or model directory on any pairs table; :func:`write_report` writes the
HTML page and the CSV and Markdown tables of either.
"""

from .breakdown import BREAKDOWNS, metric_table
from .evaluation_sets import Evaluation
from .importance import permutation_importance
from .learning_curve import learning_curve
from .metrics import HEADLINE_UNITS, METRICS, error_metrics
from .report import evaluate, write_report
from .scoring import score

__all__ = ["BREAKDOWNS", "HEADLINE_UNITS", "METRICS", "Evaluation", "error_metrics", "evaluate", "learning_curve",
           "metric_table", "permutation_importance", "score", "write_report"]
