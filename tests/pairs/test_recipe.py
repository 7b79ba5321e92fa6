"""Feature recipes: serialization round trips and clear errors."""

import json

import pytest

from surrogate3d.errors import FormatError, ParameterError
from surrogate3d.pairs.features import FEATURES, NEIGHBOUR_EXCESS_FLUXES
from surrogate3d.pairs.recipe import RECIPE_VERSION, FeatureRecipe, default_recipe


def test_default_recipe_lists_every_feature_but_the_opt_in_ones_and_expands_radii():
    recipe = default_recipe()
    priors = ("direct_beam_prior", "direct_beam_prior_minus_independent_column",
              "direct_beam_prior_slant_minus_vertical") + tuple(
        f"neighbour_excess_independent_column_{flux}" for flux in NEIGHBOUR_EXCESS_FLUXES)
    assert recipe.features == tuple(f for f in FEATURES if f not in priors)
    radii = recipe.parameters["neighbour_radii"]
    assert "neighbour_mean_cloud_fraction_%gm" % radii[0] in recipe.column_names()
    assert len(recipe.column_names()) == len(FEATURES) - len(priors) + 4 * (len(radii) - 1) == 32
    assert recipe.parameters["host_fluxes"] == "monte_carlo"


def test_json_dict_and_file_round_trips(tmp_path):
    recipe = FeatureRecipe(["cloud_fraction", "neighbour_mean_log_optical_depth"],
                           {"neighbour_radii": [500.0, 2500.0], "edge_distance_cap": 5000}, name="small")
    assert FeatureRecipe.from_json(recipe.to_json()) == recipe
    assert FeatureRecipe.from_dict(json.loads(json.dumps(recipe.to_dict()))) == recipe
    recipe.write(tmp_path / "r.json")
    assert FeatureRecipe.read(tmp_path / "r.json") == recipe
    (tmp_path / "r.toml").write_text(
        '[feature_recipe]\nname = "small"\nversion = 1\n'
        'features = ["cloud_fraction", "neighbour_mean_log_optical_depth"]\n'
        '[feature_recipe.parameters]\nneighbour_radii = [500.0, 2500.0]\nedge_distance_cap = 5000\n')
    assert FeatureRecipe.read(tmp_path / "r.toml") == recipe
    assert recipe.to_dict()["version"] == RECIPE_VERSION


def test_unknown_feature_names_list_the_known_ones():
    with pytest.raises(ParameterError, match="unknown feature name.*'cloud_colour'.*known features: cos_solar_zenith"):
        FeatureRecipe(["cloud_fraction", "cloud_colour"])


@pytest.mark.parametrize("parameters, message", [
    ({"neighbour_radii": []}, "neighbour_radii"),
    ({"neighbour_radii": [1000.0, -5.0]}, "neighbour_radii"),
    ({"edge_cloud_fraction": 1.5}, "edge_cloud_fraction"),
    ({"edge_distance_cap": 0.0}, "edge_distance_cap"),
    ({"layer_cloud_fraction_threshold": 1.0}, "layer_cloud_fraction_threshold"),
    ({"cloud_side_distance": "far"}, "cloud_side_distance"),
    ({"radius": 3.0}, "unknown feature parameter"),
])
def test_bad_parameters_are_named(parameters, message):
    with pytest.raises(ParameterError, match=message):
        FeatureRecipe(["cloud_fraction"], parameters)


def test_bad_recipes_and_files(tmp_path):
    with pytest.raises(ParameterError, match="more than once"):
        FeatureRecipe(["cloud_fraction", "cloud_fraction"])
    with pytest.raises(ParameterError, match="version"):
        FeatureRecipe.from_dict({"features": ["cloud_fraction"], "version": 99})
    with pytest.raises(ParameterError, match="unknown recipe key"):
        FeatureRecipe.from_dict({"features": ["cloud_fraction"], "colour": 1})
    with pytest.raises(FormatError, match="does not exist"):
        FeatureRecipe.read(tmp_path / "missing.json")
    (tmp_path / "bad.json").write_text("{not json")
    with pytest.raises(FormatError, match="not valid JSON"):
        FeatureRecipe.read(tmp_path / "bad.json")


def test_column_features_name_the_feature_of_each_column():
    recipe = FeatureRecipe(["cloud_fraction", "neighbour_mean_cloud_fraction"], {"neighbour_radii": [1000.0, 3000.0]})
    assert list(zip(recipe.column_names(), recipe.column_features())) == [
        ("cloud_fraction", "cloud_fraction"),
        ("neighbour_mean_cloud_fraction_1000m", "neighbour_mean_cloud_fraction"),
        ("neighbour_mean_cloud_fraction_3000m", "neighbour_mean_cloud_fraction")]
