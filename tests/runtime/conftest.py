"""Fixtures of the runtime tests: see tests/trained_model_fixtures.py."""

from trained_model_fixtures import *  # noqa: F401,F403
