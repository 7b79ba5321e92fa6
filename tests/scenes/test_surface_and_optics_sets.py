"""Surface albedo maps, named optics sets and optics drawn per scene from a scene-set configuration."""

import json

import numpy as np
import pytest

from surrogate3d.errors import ParameterError
from surrogate3d.scenes.config import parse_config
from surrogate3d.scenes.draws import check_draws, resolve
from surrogate3d.scenes.generator import generate_scene
from surrogate3d.scenes.model import column_optical_depth
from surrogate3d.scenes.optics_sets import OPTICS_SETS
from surrogate3d.scenes.random_fields import random_generator
from surrogate3d.scenes.surface import SurfacePattern, albedo_map, surface_pattern_from_dict

SMALL = {"nx": 24, "ny": 20, "nz": 10}


def test_optics_sets_span_strong_negligible_and_no_absorption():
    moist = generate_scene("clear", 0, optics_set="two_band_moist", **SMALL)
    dry = generate_scene("clear", 0, optics_set="two_band_dry", **SMALL)
    visible = generate_scene("clear", 0, optics_set="visible_only", **SMALL)
    assert moist.attrs["optics_set"] == "two_band_moist"
    # The absorber adds its column optical depth to the near-infrared column (Beer-Lambert: an
    # overhead sun loses 1 - exp(-0.3) = 26 % of the near-infrared direct beam to it).
    extra = (column_optical_depth(moist, "near_infrared") - column_optical_depth(dry, "near_infrared")).values
    assert np.allclose(extra, 0.3 - 0.01)
    assert 1 - np.exp(-0.01) < 0.01 < 0.25 < 1 - np.exp(-0.3)
    assert list(visible["band"].values) == ["visible"] and visible["solar_weight"].values.tolist() == [1.0]
    assert np.all(visible["single_scattering_albedo"].values == 1.0)
    cloudy = generate_scene("overcast", 0, optics_set="visible_only", **SMALL)
    assert cloudy["single_scattering_albedo"].values.min() > 0.99999  # Slingo (1989): visible co-albedo < 3e-6


def test_optics_set_excludes_bands_and_gas():
    with pytest.raises(ParameterError, match="give either optics_set or bands/gas_absorption"):
        generate_scene("clear", 0, optics_set="visible_only", bands=["visible"], **SMALL)
    with pytest.raises(ParameterError, match="optics_set must be one of two_band_moist, two_band_dry, visible_only"):
        generate_scene("clear", 0, optics_set="humid", **SMALL)
    assert set(OPTICS_SETS) == {"two_band_moist", "two_band_dry", "visible_only"}


def test_patches_blend_two_surfaces_smoothly_and_repeat_for_a_seed():
    pattern = SurfacePattern("patches", {"visible": 0.8, "near_infrared": 0.6}, scale=2000.0)
    a = generate_scene("scattered_cumulus", 3, surface_albedo={"visible": 0.05, "near_infrared": 0.3},
                       surface_pattern=pattern, nx=64, ny=64, nz=8)
    b = generate_scene("scattered_cumulus", 3, surface_albedo={"visible": 0.05, "near_infrared": 0.3},
                       surface_pattern=pattern, nx=64, ny=64, nz=8)
    vis = a["surface_albedo"].sel(band="visible").values
    assert a.identical(b)
    assert 0.05 < vis.min() < 0.3 and 0.55 < vis.max() < 0.8
    # Smooth: neighbouring columns differ by much less than the contrast of the two surfaces.
    step = np.abs(np.diff(vis, axis=1))
    assert step.mean() < 0.1 * (0.8 - 0.05) and step.max() < 0.5 * (0.8 - 0.05)
    # Both bands share one pattern: the share of the second surface is the same.
    nir = a["surface_albedo"].sel(band="near_infrared").values
    assert np.allclose((vis - 0.05) / 0.75, (nir - 0.3) / 0.3)
    # The clouds do not change with the surface pattern.
    plain = generate_scene("scattered_cumulus", 3, nx=64, ny=64, nz=8)
    assert np.array_equal(a["liquid_water_content"].values, plain["liquid_water_content"].values)


def test_coastline_divides_the_domain_between_two_surfaces():
    fractions = []
    for seed in range(6):
        albedo, drawn = albedo_map(np.array([0.06, 0.06]), np.array([0.7, 0.5]),
                                   SurfacePattern("coastline", 0.0, scale=1000.0, fraction=0.3), (80, 80), 100.0,
                                   random_generator(seed))
        assert set(np.unique(albedo[0])) == {0.06, 0.7} and set(np.unique(albedo[1])) == {0.06, 0.5}
        assert np.array_equal(albedo[0] == 0.7, albedo[1] == 0.5)
        assert tuple(drawn["coast_direction"]) in {(1, 0), (0, 1), (1, 1), (1, -1)}
        fractions.append((albedo[0] == 0.7).mean())
    assert np.mean(fractions) == pytest.approx(0.3, abs=0.05)


def test_scene_records_its_surface_pattern():
    scene = generate_scene("overcast", 2, surface_albedo=0.1, **SMALL,
                           surface_pattern={"kind": "coastline", "contrast_albedo": 0.6, "fraction": 0.5})
    record = json.loads(scene.attrs["generator_parameters"])["surface_pattern"]
    assert record["kind"] == "coastline" and record["contrast_albedo"] == [0.6, 0.6]
    assert set(np.unique(scene["surface_albedo"].values)) == {0.1, 0.6}


@pytest.mark.parametrize("pattern, message", [
    ({"kind": "checkerboard"}, "surface_pattern kind must be one of uniform, patches, coastline; got 'checkerboard'"),
    ({"kind": "coastline", "fraction": 1.5}, "surface_pattern fraction must be in [0, 1]; got 1.5"),
    ({"kind": "patches", "scale": 0.0}, "surface_pattern scale must be in (0, 1e+07]; got 0.0"),
    ({"kind": "patches", "size": 3.0}, "surface_pattern has unknown key 'size'"),
    ({"kind": "patches", "contrast_albedo": 1.2}, "surface_pattern contrast_albedo[visible] must be in [0, 1]"),
])
def test_bad_surface_patterns_are_named(pattern, message):
    with pytest.raises(ParameterError) as err:
        generate_scene("clear", 0, surface_pattern=pattern, **SMALL)
    assert message in str(err.value)
    assert surface_pattern_from_dict({"kind": "uniform"}).kind == "uniform"


def test_draws_are_checked_and_resolved():
    spec = {"choice": [{"visible": {"uniform": [0.03, 0.1]}, "near_infrared": 0.3}, 0.8]}
    check_draws(spec, "a", 0.0, 1.0)
    values = [resolve(spec, random_generator(seed)) for seed in range(20)]
    assert 0.8 in values and any(isinstance(v, dict) and 0.03 <= v["visible"] <= 0.1 for v in values)
    assert resolve(spec, random_generator(4)) == values[4]
    for bad, message in (({"uniform": [0.5]}, "a uniform must be two numbers [low, high]"),
                         ({"uniform": [0.5, 0.1]}, "a uniform needs low <= high"),
                         ({"uniform": [0.0, 1.5]}, "a uniform must be in [0, 1]; got 1.5"),
                         ({"choice": []}, "a choice must be a non-empty array"),
                         ({"choice": [0.2, 2.0]}, "a choice[1] must be in [0, 1]; got 2.0"),
                         ({"uniform": [0, 1], "choice": [1]}, "must be the only key of its table")):
        with pytest.raises(ParameterError) as err:
            check_draws(bad, "a", 0.0, 1.0)
        assert message in str(err.value)


WORLD = {
    "grid": {"nx": 16, "ny": 16, "nz": 8},
    "optics": {
        "optics_set": {"choice": ["two_band_moist", "two_band_dry", "visible_only"]},
        "surface_albedo": {"choice": [{"visible": {"uniform": [0.03, 0.1]}, "near_infrared": {"uniform": [0.2, 0.4]}},
                                      {"uniform": [0.6, 0.8]}]},
        "surface_pattern": {"kind": {"choice": ["uniform", "patches", "coastline"]},
                            "contrast_albedo": {"uniform": [0.03, 0.8]}},
    },
    "regime": [{"name": "scattered_cumulus", "count": 12}, {"name": "cloud_streets", "count": 2}],
}


def test_configuration_draws_optics_and_albedo_per_scene_with_the_seed():
    cfg = parse_config(WORLD, source="world.toml")
    options = [cfg.scene_options("scattered_cumulus", seed) for seed in range(12)]
    assert options[5] == parse_config(WORLD).scene_options("scattered_cumulus", 5)
    assert options[5] != cfg.scene_options("cloud_streets", 5)
    assert {o["optics_set"] for o in options} == set(OPTICS_SETS)
    assert {o["surface_pattern"]["kind"] for o in options} == {"uniform", "patches", "coastline"}
    for o in options:
        scene = generate_scene("scattered_cumulus", 0, **o)
        assert scene.attrs["optics_set"] == o["optics_set"]
        albedo = scene["surface_albedo"].values
        assert albedo.min() >= 0.03 and albedo.max() <= 0.8
        if o["optics_set"] == "visible_only":
            # A per-band table loses the bands the set does not use.
            assert list(scene["band"].values) == ["visible"]
    with pytest.raises(ParameterError, match="draws values per scene; use scene_options"):
        cfg.generator_options()


def test_configurations_without_draws_give_the_same_options_as_before():
    data = {"grid": {"nx": 16}, "optics": {"bands": ["visible", "near_infrared"], "surface_albedo": 0.06,
                                           "gas_absorption": {"near_infrared": {"column_optical_depth": 0.05}}}}
    cfg = parse_config(data)
    expected = {"nx": 16, "bands": ("visible", "near_infrared"), "surface_albedo": 0.06,
                "gas_absorption": {"near_infrared": {"column_optical_depth": 0.05}}}
    assert cfg.generator_options() == expected == cfg.scene_options("overcast", 3)


@pytest.mark.parametrize("optics, message", [
    ({"optics_set": "humid"}, "optics_set must be one of two_band_moist, two_band_dry, visible_only; got 'humid'"),
    ({"optics_set": {"choice": ["visible_only", "dry"]}}, "got 'dry'"),
    ({"optics_set": "visible_only", "bands": ["visible"]}, "optics_set sets bands and gas_absorption; remove bands"),
    ({"surface_albedo": {"uniform": [0.03, 1.8]}}, "[optics] surface_albedo uniform must be in [0, 1]; got 1.8"),
    ({"surface_albedo": {"blue": 0.2}}, "[optics] surface_albedo names band 'blue'"),
    ({"surface_pressure": {"uniform": [5.0, 101325.0]}}, "surface_pressure uniform must be in [10000, 120000]"),
    ({"surface_pattern": {"kind": "stripes"}}, "surface_pattern kind must be one of uniform, patches, coastline"),
    ({"surface_pattern": {"shape": 1}}, "surface_pattern has unknown key 'shape'"),
    ({"surface_pattern": {"kind": "patches", "fraction": {"uniform": [0.2, 1.2]}}},
     "surface_pattern fraction uniform must be in [0, 1]; got 1.2"),
])
def test_bad_optics_tables_are_named_up_front(optics, message):
    with pytest.raises(ParameterError) as err:
        parse_config({"optics": optics}, source="world.toml")
    assert message in str(err.value) and "world.toml" in str(err.value)
