import os
import sys

import matplotlib

matplotlib.use("Agg")
# Shared helpers of the tests: plain-Python reference solutions (tests/reference_solutions.py),
# synthetic pair tables (tests/synthetic_pairs.py), trained test models.
sys.path.insert(0, os.path.dirname(__file__))
