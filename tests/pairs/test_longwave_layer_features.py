"""Longwave layer features, the matching of layers to the column correction and the recipe's [profile] table.

The features are checked by hand on a small case; the heating rate of an absorbed flux is
g / c_p * F / dp (Liou 2002, the hydrostatic layer mass dp / g).
"""

import numpy as np
import pytest

from surrogate3d.errors import ParameterError
from surrogate3d.evaluation.longwave_profile_skill import heating_rate_per_flux
from surrogate3d.learn.recipe import parse_recipe
from surrogate3d.pairs.longwave_layer_features import LONGWAVE_LAYER_FEATURES, longwave_layer_features
from surrogate3d.runtime.longwave_profile import check_longwave_layer_fields, longwave_layer_rows, \
    match_longwave_column

NAN = np.nan


def _case():
    """Two columns of three layers (0-200-500-1000 m): the first with cloud in its middle layer,
    the second clear with its top layer absent (NaN padding)."""
    return {"bottom": [[0.0, 200.0, 500.0], [0.0, 200.0, NAN]],
            "top": [[200.0, 500.0, 1000.0], [200.0, 500.0, NAN]],
            "cloud_fraction": [[0.0, 0.6, 0.0], [0.0, 0.0, NAN]],
            "liquid_water_path": [[0.0, 30.0, 0.0], [0.0, 0.0, NAN]],
            "air_temperature": [[288.0, 286.0, 283.0], [290.0, 289.0, NAN]],
            "two_stream_net_absorption": [[-2.0, -12.0, -5.0], [-1.0, -3.0, NAN]],
            "surface_temperature": [289.0, 291.0]}


def test_layer_features_by_hand():
    fields = _case()
    f = longwave_layer_features(*(fields[k] for k in ("bottom", "top", "cloud_fraction", "liquid_water_path",
                                                      "air_temperature", "two_stream_net_absorption")),
                                fields["surface_temperature"])
    assert f.shape == (2, 3, len(LONGWAVE_LAYER_FEATURES))
    cloudy = dict(zip(LONGWAVE_LAYER_FEATURES, np.moveaxis(f[0], -1, 0)))
    # Cloud from 200 to 500 m; layer middles 100, 350, 750 m.
    np.testing.assert_array_equal(cloudy["layer_height_above_cloud_top"], [-400.0, -150.0, 250.0])
    np.testing.assert_array_equal(cloudy["layer_height_above_cloud_base"], [-100.0, 150.0, 550.0])
    np.testing.assert_array_equal(cloudy["layer_cloud_fraction"], [0.0, 0.6, 0.0])
    np.testing.assert_allclose(cloudy["layer_liquid_water_content"], [0.0, 0.1, 0.0], rtol=1e-15)  # 30 g m-2 / 300 m
    np.testing.assert_array_equal(cloudy["layer_air_temperature_minus_surface"], [-1.0, -3.0, -6.0])
    np.testing.assert_array_equal(cloudy["layer_air_temperature_minus_cloud_base"], [2.0, 0.0, -3.0])
    np.testing.assert_allclose(cloudy["two_stream_layer_net_absorption_density"], [-10.0, -40.0, -10.0], rtol=1e-15)
    np.testing.assert_array_equal(cloudy["two_stream_column_net_absorption"], [-19.0, -19.0, -19.0])
    clear = dict(zip(LONGWAVE_LAYER_FEATURES, np.moveaxis(f[1, :2], -1, 0)))
    np.testing.assert_array_equal(clear["layer_height_above_cloud_top"], [100.0, 350.0])  # clear: relative to 0 m
    np.testing.assert_array_equal(clear["layer_air_temperature_minus_cloud_base"], [0.0, 0.0])
    np.testing.assert_array_equal(clear["two_stream_column_net_absorption"], [-4.0, -4.0])
    assert np.isnan(f[1, 2]).all()  # the absent layer


def test_features_do_not_depend_on_the_number_of_layers():
    # Splitting every layer of a uniform column in two keeps every intensive feature.
    coarse = _case()
    fine = {"bottom": [[0.0, 100.0, 200.0, 350.0, 500.0, 750.0]], "top": [[100.0, 200.0, 350.0, 500.0, 750.0, 1000.0]],
            "cloud_fraction": [[0.0, 0.0, 0.6, 0.6, 0.0, 0.0]], "liquid_water_path": [[0.0, 0.0, 15.0, 15.0, 0.0, 0.0]],
            "air_temperature": [[288.0, 288.0, 286.0, 286.0, 283.0, 283.0]],
            "two_stream_net_absorption": [[-1.0, -1.0, -6.0, -6.0, -2.5, -2.5]], "surface_temperature": [289.0]}
    rows_coarse, _ = longwave_layer_rows(np.zeros((2, 1)), coarse)
    rows_fine, _ = longwave_layer_rows(np.zeros((1, 1)), fine)
    names = list(LONGWAVE_LAYER_FEATURES)
    for name in ("layer_cloud_fraction", "layer_liquid_water_content", "layer_air_temperature_minus_surface",
                 "layer_air_temperature_minus_cloud_base", "two_stream_layer_net_absorption_density",
                 "two_stream_column_net_absorption"):
        j = 1 + names.index(name)
        np.testing.assert_allclose(rows_fine[::2, j], rows_coarse[:3, j], rtol=1e-15, err_msg=name)


def test_matching_conserves_the_column_correction():
    rng = np.random.default_rng(1)
    profile = rng.normal(size=(50, 7))
    profile[:5, 5:] = NAN  # absent layers
    profile[7] = 0.0  # a profile of zeros: the residual is shared equally
    column = rng.normal(scale=10.0, size=50)
    matched = match_longwave_column(profile, column)
    np.testing.assert_allclose(np.nansum(matched, axis=1), column, rtol=0, atol=1e-12)
    assert np.isnan(matched[:5, 5:]).all()
    np.testing.assert_allclose(matched[7], column[7] / 7, rtol=1e-15)
    # Proportional to each layer's own change: a layer with no predicted change gets none.
    one = match_longwave_column([[2.0, 0.0, -2.0]], [4.0])
    np.testing.assert_allclose(one, [[4.0, 0.0, 0.0]], rtol=1e-15)


def test_heating_rate_of_an_absorbed_flux():
    # 10 W m-2 in 100 hPa: 9.80665 / 1004.64 * 10 / 1e4 * 86400 = 0.8434 K day-1 (Liou 2002).
    assert 10.0 * float(heating_rate_per_flux(1e4)) == pytest.approx(0.84338, abs=5e-5)


def test_layer_fields_are_checked():
    fields = _case()
    del fields["surface_temperature"]
    with pytest.raises(ParameterError, match=r"longwave layer fields lack \['surface_temperature'\]"):
        check_longwave_layer_fields(fields)
    fields = _case()
    fields["air_temperature"] = [[288.0, 286.0]] * 2
    with pytest.raises(ParameterError, match=r"layer field air_temperature has shape \(2, 2\); bottom has \(2, 3\)"):
        check_longwave_layer_fields(fields)
    fields = _case()
    fields["top"] = [[200.0, 150.0, 1000.0], [200.0, 500.0, NAN]]
    with pytest.raises(ParameterError, match="top must exceed bottom in every layer; column 0, layer 1"):
        check_longwave_layer_fields(fields)


LONGWAVE_RECIPE = """
spectrum = "longwave"
[models.ridge]
kind = "ridge"
"""


def test_longwave_recipe_profile_table():
    recipe = parse_recipe(LONGWAVE_RECIPE + "[profile]\nmax_iter = 10\nmin_samples_leaf = 5\n")
    assert recipe.profile == {"max_iter": 10, "min_samples_leaf": 5}
    # scale_floor belongs to the shortwave profile model only: named, with the allowed keys.
    with pytest.raises(ParameterError, match=r"\[profile\] of a longwave recipe has unknown keys \['scale_floor'\]; "
                                             r"allowed: \['l2_regularization', 'learning_rate', 'max_iter'"):
        parse_recipe(LONGWAVE_RECIPE + "[profile]\nscale_floor = 1e-4\n")
    with pytest.raises(ParameterError, match=r"\[profile\] max_iter takes one value"):
        parse_recipe(LONGWAVE_RECIPE + "[profile]\nmax_iter = [10, 20]\n")
    with pytest.raises(ParameterError, match=r"\[profile\] max_iter must be"):
        parse_recipe(LONGWAVE_RECIPE + "[profile]\nmax_iter = 0\n")
    with pytest.raises(ParameterError, match=r"\[target_transforms\] has unknown keys \['toa_upward_flux'\]"):
        parse_recipe(LONGWAVE_RECIPE + "[target_transforms.toa_upward_flux]\nscale_floor = 1.0\n"
                     'scale_feature = "cloud_fraction"\n')
