"""Scene-set configuration files."""

from pathlib import Path

import pytest

from surrogate3d.errors import FormatError, ParameterError
from surrogate3d.scenes.config import load_config, parse_config
from surrogate3d.scenes.regimes import REGIMES

SAMPLE = Path(__file__).resolve().parents[2] / "training" / "scenes-demo.toml"


def test_sample_config_lists_every_regime_and_a_labelled_variant():
    cfg = load_config(SAMPLE)
    entries = {e.regime.name: e for e in cfg.entries()}
    assert set(REGIMES) <= set(entries)
    assert entries["scattered_cumulus"].seeds == (0, 1, 2, 3)
    assert entries["clear"].seeds == (0,)
    tall = entries["towering_cumulus"].regime.layers[0]
    assert (tall.thickness, tall.mean_optical_depth, tall.cloud_top_variability) == (1200.0, 25.0, 0.7)
    streets = entries["cloud_streets_along_x"].regime.layers[0].structure
    assert (streets.direction, streets.roll_wavelength) == (0.0, 2000.0)
    assert cfg.scene_options("overcast", 1)["nx"] == 64


def test_large_config_spans_every_family_on_wide_domains_with_drawn_surfaces_and_optics():
    cfg = load_config(SAMPLE.with_name("scenes-large.toml"))
    entries = cfg.entries()
    assert set(REGIMES) <= {e.regime.name for e in entries}
    options = [cfg.scene_options(e.regime.name, seed) for e in entries for seed in e.seeds]
    # Domains wider than the 10 km neighbour windows of the features.
    assert all(o["nx"] * o["dx"] >= 20000.0 and o["ny"] * o["dx"] >= 20000.0 for o in options)
    assert {o["optics_set"] for o in options} == {"two_band_moist", "two_band_dry", "visible_only"}
    visible = [o["surface_albedo"]["visible"] for o in options]
    assert min(visible) < 0.06 and max(visible) > 0.7


def test_all_with_overrides_leaves_clear_alone():
    cfg = parse_config({"regime": [{"name": "all", "cloud_fraction": 0.4, "count": 2, "seed": 10}]})
    entries = cfg.entries()
    assert [e.regime.name for e in entries] == list(REGIMES)
    assert all(e.seeds == (10, 11) for e in entries)
    assert all(e.regime.layers[0].cloud_fraction == 0.4 for e in entries if e.regime.layers)


def test_layer_tables_change_a_structure_or_replace_it():
    cfg = parse_config({"regime": [
        {"name": "cloud_streets", "layers": [{"structure": {"roll_wavelength": 2500.0, "direction": 45.0}}]},
        {"name": "overcast", "layers": [{"structure": {"kind": "cascade", "variability": 0.3}, "tilt": 0.2}]}]})
    streets, deck = (e.regime.layers[0] for e in cfg.entries())
    assert (streets.structure.roll_wavelength, streets.structure.direction) == (2500.0, 45.0)
    assert streets.structure.street_length == REGIMES["cloud_streets"].layers[0].structure.street_length
    assert (deck.structure.kind, deck.structure.variability, deck.tilt) == ("cascade", 0.3, 0.2)


@pytest.mark.parametrize("data, message", [
    ({"grids": {}}, "unknown key 'grids'"),
    ({"grid": {"nxx": 3}}, "[grid] has unknown key 'nxx'"),
    ({"count": 0}, "count must be an integer in [1, 100000]"),
    ({"seed": -3}, "seed must be an integer"),
    ({"regime": [{"cloud_fraction": 0.3}]}, "regime[0] needs a name"),
    ({"regime": [{"name": "cirrus"}]}, "name must be one of"),
    ({"regime": [{"name": "overcast", "layers": [{"thick": 3}]}]}, "layers[0] has unknown key 'thick'"),
    ({"regime": {"name": "overcast"}}, "array of tables"),
    ({"regime": [{"name": "overcast", "layers": [{"structure": "cells"}]}]}, "structure must be a table"),
])
def test_bad_keys_and_values_are_named(data, message):
    with pytest.raises(ParameterError) as err:
        parse_config(data, source="demo.toml")
    assert message in str(err.value) and "demo.toml" in str(err.value)


@pytest.mark.parametrize("tables, message", [
    ([{"name": "overcast"}, {"name": "overcast"}], "listed twice"),
    ([{"name": "overcast", "layers": [{}, {"thickness": 3.0}]}], "layers[1] does not exist"),
    ([{"name": "overcast", "layers": [{"thickness": -3.0}]}], "thickness must be in (0, 30000]"),
    ([{"name": "clear", "mean_optical_depth": 3.0}], "has no cloud layer"),
    ([{"name": "overcast", "cloud_fraction": 2.0}], "cloud_fraction must be in [0, 1]"),
    ([{"name": "overcast", "layers": [{"structure": {"cell_diameter": 3.0}}]}], "structure needs a kind"),
    ([{"name": "open_cells", "layers": [{"structure": {"cell_diameter": -3.0}}]}],
     "layers[0] structure: cell_diameter must be in (0, "),
    ([{"name": "cloud_streets", "layers": [{"structure": {"spacing": 3.0}}]}], "unknown parameter 'spacing'"),
])
def test_bad_regime_tables_are_refused_when_expanded(tables, message):
    with pytest.raises(ParameterError, match=message.replace("[", r"\[").replace("(", r"\(")):
        parse_config({"regime": tables}, source="demo.toml").entries()


def test_unreadable_config_is_a_format_error(tmp_path):
    bad = tmp_path / "bad.toml"
    bad.write_text("count = = 3\n")
    with pytest.raises(FormatError, match="not valid TOML"):
        load_config(bad)
    with pytest.raises(FormatError, match="does not exist"):
        load_config(tmp_path / "missing.toml")
