"""The longwave fields of scenes: temperatures, humidity, surface; longwave_fields; unchanged shortwave."""

import json

import numpy as np
import pytest

from surrogate3d.errors import ParameterError, ValidationError
from surrogate3d.scenes import atmosphere
from surrogate3d.scenes.config import load_config, parse_config
from surrogate3d.scenes.generator import generate_scene
from surrogate3d.scenes.longwave_fields import check_longwave_scene, longwave_fields
from surrogate3d.scenes.longwave_optics import cloud_optics, gas_absorption_coefficient, spectral_intervals
from surrogate3d.scenes.model import make_scene
from surrogate3d.scenes.validation import validate_scene
from surrogate3d.scenes.variables import LONGWAVE_VARIABLES, missing_longwave_variables

SMALL = {"nx": 12, "ny": 10, "nz": 8}
COASTLINE = {"kind": "coastline", "contrast_albedo": 0.5, "scale": 500.0, "fraction": 0.3}


@pytest.fixture(scope="module")
def scene():
    return generate_scene("broken_stratocumulus", 7, **SMALL)


def test_new_fields_carry_cf_names_units_and_shapes(scene):
    expected = {"air_temperature": (("z", "y", "x"), "K", "air_temperature"),
                "specific_humidity": (("z", "y", "x"), "kg kg-1", "specific_humidity"),
                "surface_temperature": (("y", "x"), "K", "surface_temperature"),
                "surface_longwave_emissivity": (("y", "x"), "1", "surface_longwave_emissivity"),
                "effective_radius": (("z", "y", "x"), "m", "effective_radius_of_cloud_liquid_water_particles"),
                "air_pressure": (("z_edge",), "Pa", "air_pressure")}
    for name, (dims, units, standard_name) in expected.items():
        da = scene[name]
        assert da.dims == dims and da.dtype == np.float64, name
        assert da.attrs["units"] == units and da.attrs["standard_name"] == standard_name, name
        assert da.attrs["long_name"], name
    assert missing_longwave_variables(scene) == ()
    assert set(LONGWAVE_VARIABLES) <= set(scene.data_vars)


def test_air_temperature_has_the_lapse_rate_of_the_us_standard_atmosphere_1976():
    # U.S. Standard Atmosphere 1976: 288.15 K at the surface, -6.5 K per km of geopotential
    # height to 11 km, 216.65 K from 11 to 20 km.
    edges = np.array([0.0, 200.0, 1000.0, 3000.0, 6000.0, 10000.0, 10800.0, 12000.0, 16000.0, 19000.0])
    scene = generate_scene("cumulus_under_thin_layer", 1, nx=6, ny=5, z_edge=edges)
    t = scene["air_temperature"].values
    z = scene["z"].values
    h = 6356766.0 * z / (6356766.0 + z)  # geopotential height (U.S. Standard Atmosphere 1976, eq. 18)
    troposphere = h < 11000.0
    assert np.allclose(t[troposphere], (288.15 - 0.0065 * h[troposphere])[:, None, None], atol=1e-9)
    assert np.allclose(t[~troposphere], 216.65, atol=1e-9)
    lapse = -np.diff(t[troposphere, 0, 0]) / np.diff(h[troposphere])
    assert np.allclose(lapse, 0.0065, rtol=1e-9)
    # Clouds have the air temperature of their level: every column is the same profile.
    cloudy = scene["liquid_water_content"].values > 0
    assert cloudy.any() and np.all(t == t[:, :1, :1])


def test_surface_temperature_and_emissivity_defaults_and_choices(scene):
    # Default: the standard atmosphere at the surface, 288.15 K, over ocean (0.99).
    assert np.all(scene["surface_temperature"].values == 288.15)
    assert np.all(scene["surface_longwave_emissivity"].values == 0.99)
    other = generate_scene("broken_stratocumulus", 7, surface_temperature=301.5, surface_longwave_emissivity="desert",
                           **SMALL)
    assert np.all(other["surface_temperature"].values == 301.5)
    assert np.all(other["surface_longwave_emissivity"].values == 0.9)
    assert np.array_equal(other["air_temperature"].values, scene["air_temperature"].values)
    params = json.loads(other.attrs["generator_parameters"])
    assert (params["surface_temperature"], params["surface_longwave_emissivity"]) == (301.5, 0.9)


def test_emissivity_shares_the_surface_pattern():
    scene = generate_scene("scattered_cumulus", 3, surface_pattern={**COASTLINE, "contrast_emissivity": "desert"},
                           surface_longwave_emissivity=0.97, nx=12, ny=12, nz=8)
    second = scene["surface_albedo"].values[0] == 0.5
    assert 0 < second.sum() < second.size
    eps = scene["surface_longwave_emissivity"].values
    assert np.all(eps[second] == 0.9) and np.all(eps[~second] == 0.97)
    patches = generate_scene("cloud_streets", 2, nx=16, ny=16, nz=6, surface_pattern={
        "kind": "patches", "contrast_albedo": 0.6, "scale": 800.0, "contrast_emissivity": 0.94})
    share = (patches["surface_albedo"].values[0] - 0.06) / (0.6 - 0.06)
    assert np.allclose(patches["surface_longwave_emissivity"].values, 0.99 + (0.94 - 0.99) * share, atol=1e-12)


def test_saturation_vapour_pressure_against_tables():
    # Saturation vapour pressure over water [Pa] at 10, 20, 30 degC and -10 degC
    # (Smithsonian Meteorological Tables, List 1951; from memory): Bolton (1980) claims 0.1 %.
    celsius = np.array([10.0, 20.0, 30.0, -10.0])
    table = np.array([1228.0, 2339.0, 4246.0, 286.3])
    assert np.allclose(atmosphere.saturation_vapour_pressure(celsius + 273.15), table, rtol=2e-3)


def test_humidity_follows_manabe_wetherald_in_clear_air_and_is_saturated_in_cloud(scene):
    q = scene["specific_humidity"].values
    t = scene["air_temperature"].values
    z = scene["z"].values
    p = atmosphere.standard_pressure(z)
    # Invert q = eps e / (p - (1 - eps) e) for the vapour pressure (eps = 18.01528 / 28.9644).
    eps = 18.01528 / 28.9644
    e = q * p[:, None, None] / (eps + (1.0 - eps) * q)
    rh = e / atmosphere.saturation_vapour_pressure(t)
    cloudy = scene["liquid_water_content"].values > 0
    # Manabe and Wetherald (1967): RH = 0.77 (p / p_s - 0.02) / 0.98.
    expected = np.broadcast_to((0.77 * (p / 101325.0 - 0.02) / 0.98)[:, None, None], q.shape)
    assert cloudy.any() and (~cloudy).any()
    assert np.allclose(rh[~cloudy], expected[~cloudy], rtol=1e-12)
    assert np.allclose(rh[cloudy], 1.0, rtol=1e-12)
    # Order of magnitude: about 8 g kg-1 near a 15 degC surface at 77 % relative humidity.
    assert 0.006 < q[0, ~cloudy[0]].mean() < 0.009
    drier = generate_scene("broken_stratocumulus", 7, surface_relative_humidity=0.385, **SMALL)
    ratio = drier["specific_humidity"].values[~cloudy] / q[~cloudy]
    assert np.allclose(ratio, 0.5, rtol=0.02)


# Fingerprints of the shortwave fields computed on main before the longwave fields existed
# (commit fd38a12): (sum, sum of value * cos(0.7 i) over the flattened array).
SHORTWAVE_FIELDS = ("extinction", "single_scattering_albedo", "asymmetry_parameter", "surface_albedo",
                    "solar_weight", "liquid_water_content", "effective_radius", "air_pressure")
BEFORE_LONGWAVE = {
    "broken_sc_7": {
        'extinction': (4.053814065335532, 0.06499265912766777),
        'single_scattering_albedo': (1918.3848964666001, -0.6925941166948005),
        'asymmetry_parameter': (162.3814011625406, 1.8628401132384305),
        'surface_albedo': (14.400000000000006, -0.04969896775235197),
        'solar_weight': (1.0, 0.8727184822896022),
        'liquid_water_content': (0.00899918910137287, 0.0003152944274602741),
        'effective_radius': (0.0006171376708175825, 1.5120058483216372e-05),
        'air_pressure': (722977.4293478833, 27783.534664104776)},
    "cumulus_coastline": {
        'extinction': (1.754176878403019, -0.08433186301106502),
        'single_scattering_albedo': (2302.9265913620247, -0.5162394384955536),
        'asymmetry_parameter': (118.12028735986001, -3.207589046944115),
        'surface_albedo': (52.480000000000004, 2.0552263906540578),
        'solar_weight': (1.0, 0.8727184822896022),
        'liquid_water_content': (0.0025224218238312874, -0.00012585261556711256),
        'effective_radius': (0.00028043637613763087, -7.549882488269431e-06),
        'air_pressure': (722977.4293478833, 27783.534664104776)},
    "streets_patches": {
        'extinction': (2.3449025045351686, -0.0011636478787838411),
        'single_scattering_albedo': (3070.6323777115613, 1.8471049660568535),
        'asymmetry_parameter': (151.01893793020508, -0.0690049160793813),
        'surface_albedo': (168.6787403544788, 0.06140580320965774),
        'solar_weight': (1.0, 0.8727184822896022),
        'liquid_water_content': (0.003363822842956353, -4.75774577733455e-05),
        'effective_radius': (0.00036885437269758097, -5.136612063224178e-06),
        'air_pressure': (562703.1831676309, -14654.638955492104)},
    "demo_config_scattered_cumulus_0": {
        'extinction': (1.8405768784026282, -0.13634735002550008),
        'single_scattering_albedo': (1235.6475390395194, 0.31700969363290943),
        'asymmetry_parameter': (106.80085361064624, -7.511335050698061),
        'surface_albedo': (200.7320407835074, 0.5586954978539165),
        'solar_weight': (1.0, 0.8727184822896022),
        'liquid_water_content': (0.0026325773044683157, -0.00034342194343665454),
        'effective_radius': (0.00026534777900253466, -3.0434823738305188e-05),
        'air_pressure': (722977.4293478833, 27783.534664104776)},
}


def _fingerprint(values):
    flat = np.asarray(values, dtype=np.float64).ravel()
    return flat.sum(), flat @ np.cos(0.7 * np.arange(flat.size))


def test_shortwave_fields_of_a_seed_are_those_of_main_before_the_longwave_fields(scene):
    config = load_config("training/scenes-demo.toml")
    _, regime, seed = config.scenes()[0]
    options = {**config.scene_options(regime.name, seed), **SMALL, "nx": 12, "ny": 12}
    scenes = {
        "broken_sc_7": scene,
        "cumulus_coastline": generate_scene("scattered_cumulus", 3, nx=12, ny=12, nz=8, surface_pattern=COASTLINE),
        "streets_patches": generate_scene("cloud_streets", 2, nx=16, ny=16, nz=6, surface_pattern={
            "kind": "patches", "contrast_albedo": 0.6, "scale": 800.0}),
        "demo_config_scattered_cumulus_0": generate_scene(regime, seed, **options),
    }
    for case, generated in scenes.items():
        for name in SHORTWAVE_FIELDS:
            assert _fingerprint(generated[name].values) == pytest.approx(BEFORE_LONGWAVE[case][name], rel=1e-10,
                                                                          abs=1e-18), (case, name)


def test_drawn_surface_temperature_leaves_the_other_draws_alone():
    base = {"optics": {"surface_albedo": {"uniform": [0.03, 0.8]}}, "regime": [{"name": "overcast", "count": 3}]}
    more = {"optics": {**base["optics"], "surface_temperature": {"uniform": [270.0, 305.0]},
                       "surface_longwave_emissivity": {"choice": ["ocean", "desert", 0.95]},
                       "surface_relative_humidity": {"uniform": [0.3, 0.9]}},
            "regime": base["regime"]}
    plain, drawn = parse_config(base), parse_config(more)
    temperatures, emissivities = set(), set()
    for seed in range(3):
        a, b = plain.scene_options("overcast", seed), drawn.scene_options("overcast", seed)
        assert a["surface_albedo"] == b["surface_albedo"]
        assert 270.0 <= b["surface_temperature"] <= 305.0
        temperatures.add(b["surface_temperature"])
        emissivities.add(b["surface_longwave_emissivity"])
    assert len(temperatures) == 3 and emissivities <= {"ocean", "desert", 0.95}
    scene = drawn.generate(drawn.entries()[0].regime, 0)
    assert scene["surface_temperature"].values[0, 0] == drawn.scene_options("overcast", 0)["surface_temperature"]


@pytest.mark.parametrize("optics, message", [
    ({"surface_temperature": 400.0}, "surface_temperature must be in [150, 350]; got 400.0"),
    ({"surface_longwave_emissivity": "lava"}, "surface_longwave_emissivity must be one of ocean, vegetation, "
                                              "desert, snow; got 'lava'"),
    ({"surface_longwave_emissivity": {"choice": [0.9, 1.2]}}, "surface_longwave_emissivity choice[1] must be in "
                                                              "[0, 1]; got 1.2"),
    ({"surface_relative_humidity": -0.1}, "surface_relative_humidity must be in [0, 1]; got -0.1"),
    ({"surface_pattern": {"contrast_emissivity": "glass"}}, "surface_pattern contrast_emissivity must be one of"),
])
def test_bad_longwave_settings_in_a_configuration_are_named(optics, message):
    with pytest.raises(ParameterError) as err:
        parse_config({"optics": optics})
    assert message in str(err.value)


@pytest.mark.parametrize("kwargs, message", [
    ({"surface_temperature": 100.0}, "surface_temperature must be in [150, 350]; got 100.0"),
    ({"surface_longwave_emissivity": 1.5}, "surface_longwave_emissivity must be in [0, 1]; got 1.5"),
    ({"surface_relative_humidity": 2.0}, "surface_relative_humidity must be in [0, 1]; got 2.0"),
])
def test_bad_longwave_parameters_of_the_generator_are_named(kwargs, message):
    with pytest.raises(ParameterError) as err:
        generate_scene("overcast", 0, nx=2, ny=2, nz=3, **kwargs)
    assert message in str(err.value)


def test_longwave_fields_shapes_and_gas_of_the_layer_means(scene):
    fields = longwave_fields(scene)
    nz, ny, nx = 8, 10, 12
    intervals = spectral_intervals()
    assert np.array_equal(fields.intervals.wavenumber_low, intervals.wavenumber_low)
    assert fields.gas_absorption.shape == (len(intervals.band), nz)
    for name in ("cloud_extinction", "cloud_single_scattering_albedo", "cloud_asymmetry_parameter"):
        assert getattr(fields, name).shape == (6, nz, ny, nx)
    assert fields.air_temperature.shape == (nz, ny, nx) and fields.air_pressure.shape == (nz + 1,)
    assert fields.surface_temperature.shape == fields.surface_longwave_emissivity.shape == (ny, nx)
    assert (fields.dx, fields.dy) == (100.0, 100.0) and fields.z_edge.shape == (nz + 1,)
    # The layer means: horizontal means of temperature and humidity, mean of the edge pressures.
    t = scene["air_temperature"].values.mean(axis=(1, 2))
    q = scene["specific_humidity"].values.mean(axis=(1, 2))
    p = scene["air_pressure"].values
    p = 0.5 * (p[1:] + p[:-1])
    assert np.array_equal(fields.layer_specific_humidity, q) and np.array_equal(fields.layer_pressure, p)
    assert np.array_equal(fields.gas_absorption, gas_absorption_coefficient(t, p, q))
    # Saturated cloud makes the cloudy layers moister than the clear profile.
    cloudy = (scene["liquid_water_content"].values > 0).any(axis=(1, 2))
    clear_q = atmosphere.standard_humidity(scene["z_edge"].values)
    assert np.all(q[cloudy] > clear_q[cloudy]) and np.allclose(q[~cloudy], clear_q[~cloudy], rtol=1e-12)
    ext, ssa, g = cloud_optics(scene["liquid_water_content"].values, scene["effective_radius"].values)
    assert np.array_equal(fields.cloud_extinction, ext) and np.array_equal(fields.cloud_asymmetry_parameter, g)
    assert np.array_equal(fields.cloud_single_scattering_albedo, ssa)
    assert np.all(fields.cloud_extinction[:, scene["liquid_water_content"].values == 0] == 0.0)


def test_a_scene_without_longwave_fields_is_refused_with_a_clear_message(scene):
    old = scene.drop_vars(["specific_humidity", "surface_temperature", "surface_longwave_emissivity",
                           "air_temperature"])
    validate_scene(old)  # still a good shortwave scene
    with pytest.raises(ValidationError) as err:
        longwave_fields(old, label="archive/overcast_00001.nc")
    message = str(err.value)
    assert message.startswith("scene 'archive/overcast_00001.nc' has no air_temperature: it was written before "
                              "longwave support; regenerate it with `surrogate3d scenes`")
    assert "\n" not in message
    with pytest.raises(ValidationError, match="^scene 'broken_stratocumulus seed 7' has no surface_temperature"):
        check_longwave_scene(scene.drop_vars(["surface_temperature"]))


@pytest.mark.parametrize("name, index, value, rule", [
    ("air_temperature", (3, 2, 5), 0.0, "> 0"),
    ("air_temperature", (0, 9, 11), -10.0, "> 0"),
    ("air_temperature", (5, 0, 0), np.nan, "finite"),
    ("surface_temperature", (4, 7), np.inf, "finite"),
    ("surface_temperature", (0, 1), -1.0, "> 0"),
    ("surface_longwave_emissivity", (2, 3), 1.0001, "in [0, 1]"),
    ("surface_longwave_emissivity", (9, 0), -0.5, "in [0, 1]"),
    ("specific_humidity", (1, 1, 1), -1e-4, "in [0, 1)"),
])
def test_bad_longwave_values_are_refused_naming_variable_and_index(scene, name, index, value, rule):
    bad = scene.copy(deep=True)
    bad[name].values[index] = value
    where = ", ".join(f"{d}={i}" for d, i in zip(bad[name].dims, index))
    with pytest.raises(ValidationError) as err:
        longwave_fields(bad, label="s.nc")
    message = str(err.value)
    assert f"{name} must be {rule}; got {float(value)!r} (at {where})" in message and "\n" not in message


def test_make_scene_takes_profiles_or_cells_and_checks_shapes():
    ext = np.full((1, 3, 2, 4), 1e-3)
    common = dict(z_edge=[0.0, 100.0, 200.0, 300.0], dx=50.0, dy=50.0)
    scene = make_scene(ext, 1.0, 0.0, air_temperature=[290.0, 289.0, 288.0], specific_humidity=[9e-3, 8e-3, 7e-3],
                       surface_temperature=291.0, surface_longwave_emissivity=np.full((2, 4), 0.97), **common)
    assert scene["air_temperature"].shape == (3, 2, 4) and np.all(scene["air_temperature"].values[2] == 288.0)
    assert scene["surface_temperature"].shape == (2, 4)
    with pytest.raises(ValidationError, match=r"surface_temperature has shape \(3,\); expected a number, \(2, 4\)"):
        make_scene(ext, 1.0, 0.0, surface_temperature=[290.0, 289.0, 288.0], **common)
    with pytest.raises(ValidationError, match=r"air_temperature has shape \(2,\); expected a number, \(3,\) or"):
        make_scene(ext, 1.0, 0.0, air_temperature=[290.0, 289.0], **common)


def test_a_layer_profile_of_air_temperature_from_an_older_file_still_validates(scene):
    old = scene.assign(air_temperature=("z", scene["air_temperature"].values[:, 0, 0]))
    validate_scene(old)
    fields = longwave_fields(old)
    assert np.array_equal(fields.air_temperature, scene["air_temperature"].values)
    assert np.array_equal(fields.gas_absorption, longwave_fields(scene).gas_absorption)
