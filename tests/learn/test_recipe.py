"""Training recipes: the shipped default parses; every bad key or value is named."""

from pathlib import Path

import pytest

from surrogate3d.errors import FormatError, ParameterError, ValidationError
from surrogate3d.learn.recipe import check_recipe_against_pairs, parse_recipe, read_recipe

DEFAULT = Path(__file__).resolve().parents[2] / "training" / "default.toml"


def test_default_recipe_parses():
    recipe = read_recipe(DEFAULT)
    assert {m.kind for m in recipe.models} == {"ridge", "boosted"}
    assert len(recipe.targets) == 5 and recipe.features is None
    ridge = next(m for m in recipe.models if m.kind == "ridge")
    assert ridge.grid["interactions"] == [True] and len(ridge.candidates()) == 4
    assert 0 < recipe.held_out_scene_fraction < 1 and recipe.folds >= 2


def test_small_recipe_grid(small_recipe):
    recipe = parse_recipe(small_recipe)
    ridge = recipe.models[0]
    assert ridge.candidates() == [{"alpha": 0.01, "interactions": True}, {"alpha": 100.0, "interactions": True}]


@pytest.mark.parametrize("edit, words", [
    (("[split]", "[split]\nheld_out_fraction = 0.3"), ["[split]", "held_out_fraction"]),
    (('kind = "ridge"', 'kind = "forest"'), ["kind", "'forest'"]),
    (("max_iter = 40", "max_iter = 40\ndepth = 3"), ["depth", "allowed"]),
    (("max_iter = 40", "max_iter = 40\nlearning_rate = [0.1, 2.0]"), ["learning_rate", "(0, 1]", "2.0"]),
    (("alpha = [0.01, 100.0]", "alpha = [-1.0]"), ["alpha", "-1.0"]),
    (("alpha = [0.01, 100.0]", "alpha = []"), ["alpha", "empty"]),
    (("held_out_scene_fraction = 0.25", "held_out_scene_fraction = 1.0"), ["held_out_scene_fraction", "[0, 1)"]),
    (("folds = 2", "folds = 1"), ["folds", ">= 2"]),
    (('features = "all"', 'features = "some"'), ["features"]),
    (('held_out_regime = "dense"', 'left_out_families = "some"'), ["left_out_families", "'some'"]),
    (('held_out_regime = "dense"', 'held_out_regime = "dense"\nleft_out_families = []'),
     ["held_out_regime", "left_out_families"]),
    (('name = "small"', 'name = "small"\ntargets = ["surface_upward_flux"]'), ["targets", "surface_upward_flux"]),
])
def test_bad_recipes_are_named(small_recipe, edit, words):
    text = small_recipe.replace(*edit)
    assert text != small_recipe
    with pytest.raises(ParameterError) as info:
        parse_recipe(text, source="bad.toml")
    for word in ["bad.toml"] + words:
        assert word in str(info.value)


def test_unreadable_recipes(tmp_path):
    with pytest.raises(FormatError, match="not valid TOML"):
        parse_recipe("models = [", source="x.toml")
    with pytest.raises(FormatError, match="does not exist"):
        read_recipe(tmp_path / "missing.toml")
    with pytest.raises(ParameterError, match=r"\[models\]"):
        parse_recipe('name = "no models"')


def test_recipe_against_pairs(synthetic_pairs, small_recipe):
    recipe = parse_recipe(small_recipe.replace('features = "all"', 'features = ["cloud_fraction", "liquid_path"]'))
    with pytest.raises(ValidationError, match=r"lacks features \['liquid_path'\]"):
        check_recipe_against_pairs(recipe, synthetic_pairs)
    recipe = parse_recipe(small_recipe.replace('held_out_regime = "dense"', 'left_out_families = ["dense", "cirrus"]'))
    with pytest.raises(ValidationError, match="left_out_families names 'cirrus', which is not a regime"):
        check_recipe_against_pairs(recipe, synthetic_pairs)
    check_recipe_against_pairs(parse_recipe(small_recipe), synthetic_pairs)


@pytest.mark.parametrize("line, families", [
    ("", ["dense", "sparse"]), ('left_out_families = "all"', ["dense", "sparse"]),
    ('left_out_families = ["sparse"]', ["sparse"]), ("left_out_families = []", []),
    ('held_out_regime = "dense"', ["dense"]),        # the spelling of earlier recipes
])
def test_left_out_families(synthetic_pairs, small_recipe, line, families):
    recipe = parse_recipe(small_recipe.replace('held_out_regime = "dense"', line))
    assert recipe.family_list(synthetic_pairs) == families


def test_interaction_features_is_one_value_or_a_grid_of_lists(synthetic_pairs, small_recipe):
    one = small_recipe.replace("interactions = true", 'interactions = true\ninteraction_features = '
                                                      '["cloud_fraction", "surface_albedo"]')
    ridge = parse_recipe(one).models[0]
    assert [c["interaction_features"] for c in ridge.candidates()] == [["cloud_fraction", "surface_albedo"]] * 2
    check_recipe_against_pairs(parse_recipe(one), synthetic_pairs)
    grid = small_recipe.replace("interactions = true", 'interactions = true\ninteraction_features = '
                                                       '[["cloud_fraction", "surface_albedo"], '
                                                       '["cloud_fraction", "cos_solar_zenith"]]')
    assert len(parse_recipe(grid).models[0].candidates()) == 4
    with pytest.raises(ParameterError, match="interaction_features"):
        parse_recipe(small_recipe.replace("interactions = true", 'interactions = true\n'
                                                                 'interaction_features = ["cloud_fraction"]'))
    unknown = parse_recipe(one.replace('"surface_albedo"]', '"liquid_path"]'))
    with pytest.raises(ValidationError, match=r"interaction_features names \['liquid_path'\]"):
        check_recipe_against_pairs(unknown, synthetic_pairs)


def test_clear_sky_features_are_checked_against_the_pairs(synthetic_pairs, small_recipe):
    gate = 'clear_sky_features = ["cloud_fraction", "neighbour_cloud_fraction"]'
    text = small_recipe.replace("max_iter = 40", f"max_iter = 40\n{gate}").replace("interactions = true",
                                                                                  f"interactions = true\n{gate}")
    recipe = parse_recipe(text)
    for spec in recipe.models:
        assert {tuple(c["clear_sky_features"]) for c in spec.candidates()} == {("cloud_fraction",
                                                                                "neighbour_cloud_fraction")}
    check_recipe_against_pairs(recipe, synthetic_pairs)
    unknown = parse_recipe(text.replace('"neighbour_cloud_fraction"]', '"cloud_cover_10km"]', 1))
    with pytest.raises(ValidationError, match=r"\[models.ridge\] clear_sky_features names \['cloud_cover_10km'\]"):
        check_recipe_against_pairs(unknown, synthetic_pairs)
    with pytest.raises(ParameterError, match="clear_sky_features"):
        parse_recipe(small_recipe.replace("max_iter = 40", 'max_iter = 40\nclear_sky_features = "cloud_fraction"'))


def test_default_recipes_gate_both_models():
    # The shipped recipes gate both models on the same features (docs/methods/models-and-metrics.md).
    # Each with the largest neighbour radius of the feature recipe it is made for.
    demo = Path(__file__).resolve().parents[2] / "surrogate3d" / "data" / "demo-recipe.toml"
    for path, radius in ((DEFAULT, 5000), (demo, 4000)):
        gates = [spec.grid["clear_sky_features"] for spec in read_recipe(path).models]
        assert gates == [[["cloud_fraction", f"neighbour_mean_cloud_fraction_{radius}m",
                           "slant_minus_vertical_optical_depth"]]] * 2, path


def test_profile_section(synthetic_pairs, small_recipe):
    recipe = parse_recipe(small_recipe + "\n[profile]\nmax_iter = 30\nmin_samples_leaf = 5\n")
    assert recipe.profile == {"max_iter": 30, "min_samples_leaf": 5}
    for text, words in (("max_iter = [10, 20]", r"\[profile\] max_iter takes one value"),
                        ("depth = 3", r"\[profile\] has unknown keys \['depth'\]"),
                        ("scale_floor = 0.0", "scale_floor must be")):
        with pytest.raises(ParameterError, match=words):
            parse_recipe(small_recipe + f"\n[profile]\n{text}\n", source="bad.toml")
    # The synthetic table of this directory has no per-layer variables.
    with pytest.raises(ValidationError, match="has a \\[profile\\] model but the pairs table has no per-layer"):
        check_recipe_against_pairs(recipe, synthetic_pairs)
