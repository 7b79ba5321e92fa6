"""Fixtures shared by the export and runtime tests (imported by their conftest files):
small models trained once per session."""

import importlib.util
import sys
from pathlib import Path

import pytest
from threadpoolctl import threadpool_limits

_NAME = "surrogate3d_export_test_models"


def _trained_models():
    # tests/export and tests/runtime share one module object, so the models are built once.
    if _NAME not in sys.modules:
        path = Path(__file__).resolve().parent / "export" / "trained_models.py"
        spec = importlib.util.spec_from_file_location(_NAME, path)
        module = importlib.util.module_from_spec(spec)
        sys.modules[_NAME] = module
        spec.loader.exec_module(module)
    return sys.modules[_NAME]


trained_models = _trained_models()


@pytest.fixture(scope="session", autouse=True)
def one_openmp_thread():
    # Tiny boosted fits and predictions are fastest on one thread of a busy 2-core machine.
    with threadpool_limits(limits=1):
        yield


@pytest.fixture(scope="session")
def built(tmp_path_factory):
    """Paths: pairs_file, model_dir, report_dir, export_dir (exported with --fortran and a report)."""
    return trained_models.build_once(tmp_path_factory)


@pytest.fixture(scope="session")
def helpers():
    """The helper module ``tests/export/trained_models.py`` (metrics.csv writer, recipes)."""
    return trained_models


@pytest.fixture(scope="session")
def make_host_fields():
    """Factory of host fields for the test recipe's features: ``make_host_fields(seed=0, ny=6, nx=5, nz=4)``."""
    return trained_models.random_host_fields


@pytest.fixture(scope="session")
def run(built):
    """The trained model directory, loaded."""
    from surrogate3d.learn import load_training_run

    return load_training_run(built["model_dir"])


@pytest.fixture(scope="session")
def held_out_features(built, run):
    """Feature matrix of the held-out scenes (model feature order) of the pairs table."""
    from surrogate3d.core.pairs_table import read_pairs_table
    from surrogate3d.learn.pairs_table import feature_matrix, select_scenes

    pairs = read_pairs_table(built["pairs_file"])
    held = select_scenes(pairs, run.record["split"]["held_out_scenes"])
    return feature_matrix(held, run.record["feature_names"])
