import os
import sys

import matplotlib

matplotlib.use("Agg")
# Shared plain-Python reference solutions (tests/reference_solutions.py).
sys.path.insert(0, os.path.dirname(__file__))
