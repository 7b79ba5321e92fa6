"""Fixtures of the learning tests: synthetic pair tables with a known correction and noise."""

import pytest
from threadpoolctl import threadpool_limits

from surrogate3d.archive import write_dataset
from synthetic_pairs import make_synthetic_pairs

SMALL_RECIPE = """
name = "small"
features = "all"

[split]
held_out_scene_fraction = 0.25
held_out_regime = "dense"
seed = 3

[cross_validation]
folds = 2

[models.ridge]
kind = "ridge"
interactions = true
alpha = [0.01, 100.0]

[models.boosted]
kind = "boosted"
max_iter = 40
max_leaf_nodes = 15
min_samples_leaf = 10
"""


@pytest.fixture(scope="session", autouse=True)
def one_openmp_thread():
    # The tiny boosted fits here are fastest on one thread; OpenMP threads that spin on a
    # busy 2-core machine make them many times slower.
    with threadpool_limits(limits=1):
        yield


@pytest.fixture(scope="session")
def synthetic_pairs():
    return make_synthetic_pairs(seeds_per_regime=4, seed=11)


@pytest.fixture(scope="session")
def pairs_file(tmp_path_factory, synthetic_pairs):
    return write_dataset(synthetic_pairs, tmp_path_factory.mktemp("pairs") / "pairs.nc")


@pytest.fixture(scope="session")
def small_recipe():
    return SMALL_RECIPE


@pytest.fixture
def recipe_file(tmp_path):
    path = tmp_path / "recipe.toml"
    path.write_text(SMALL_RECIPE)
    return path
