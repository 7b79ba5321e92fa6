"""Fixtures of the evaluation tests: a synthetic pair table, a trained model directory, a report."""

import pytest
from threadpoolctl import threadpool_limits

from surrogate3d import cli
from surrogate3d.archive import write_dataset
from surrogate3d.evaluation.report import evaluate
from synthetic_pairs import add_synthetic_layers, make_synthetic_pairs
from surrogate3d.learn.train import train_models

RECIPE = """
[split]
held_out_scene_fraction = 0.25
seed = 2

[cross_validation]
folds = 2

[models.ridge]
kind = "ridge"
interactions = true
alpha = 1.0

[models.boosted]
kind = "boosted"
max_iter = 40
min_samples_leaf = 10

[profile]
max_iter = 60
min_samples_leaf = 10
"""


@pytest.fixture(scope="session", autouse=True)
def one_openmp_thread():
    # Tiny boosted fits are fastest on one thread; spinning OpenMP threads on a busy
    # 2-core machine make them many times slower.
    with threadpool_limits(limits=1):
        yield


@pytest.fixture(scope="session")
def synthetic_pairs():
    return add_synthetic_layers(make_synthetic_pairs(seeds_per_regime=4, seed=5))


@pytest.fixture(scope="session")
def pairs_file(tmp_path_factory, synthetic_pairs):
    return write_dataset(synthetic_pairs, tmp_path_factory.mktemp("pairs") / "pairs.nc")


@pytest.fixture(scope="session")
def model_dir(tmp_path_factory, pairs_file):
    root = tmp_path_factory.mktemp("models")
    (root / "recipe.toml").write_text(RECIPE)
    train_models(pairs_file, root / "recipe.toml", root / "run", quiet=True)
    return root / "run"


@pytest.fixture(scope="session")
def evaluation(model_dir, pairs_file):
    return evaluate(model_dir, pairs_file, learning_curve_points=2, importance_repeats=1, quiet=True)


def run_cli(argv):
    return cli.main(argv)


@pytest.fixture(scope="session")
def report_run(tmp_path_factory, model_dir, pairs_file):
    """The report written by ``surrogate3d evaluate`` and the command's exit status."""
    out = tmp_path_factory.mktemp("report") / "report"
    status = run_cli(["evaluate", str(model_dir), str(pairs_file), "--out", str(out), "--learning-curve-points", "2",
                      "--importance-repeats", "1", "--map-scenes", "2", "--quiet"])
    return status, out


@pytest.fixture(scope="session")
def report_dir(report_run):
    return report_run[1]
