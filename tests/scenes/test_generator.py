"""The scene generator: regimes, cloud fraction, optical depth, profiles, reproducibility."""

import json

import numpy as np
import pytest

from surrogate3d.errors import ParameterError
from surrogate3d.scenes.generator import generate_scene
from surrogate3d.scenes.model import cloud_mask, column_optical_depth, layer_thickness
from surrogate3d.scenes.optics import cloud_extinction
from surrogate3d.scenes.regimes import REGIMES, CloudLayer, Regime
from surrogate3d.scenes.validation import validate_scene

SMALL = {"nx": 24, "ny": 20, "nz": 16}


@pytest.fixture(scope="module")
def scenes():
    return {name: generate_scene(name, 5, **SMALL) for name in REGIMES}


def _cloud_tau(scene, levels=slice(None)):
    """Cloud-only column optical depth of some levels from the stored water (Stephens 1978)."""
    lwc = scene["liquid_water_content"].values[levels]
    r = np.where(lwc > 0, scene["effective_radius"].values[levels], 1.0)
    return (cloud_extinction(lwc, r) * layer_thickness(scene)[levels][:, None, None]).sum(axis=0)


def test_every_regime_gives_a_valid_scene_with_the_filled_fields(scenes):
    for name, scene in scenes.items():
        validate_scene(scene)
        for var in ("liquid_water_content", "effective_radius", "air_temperature", "air_pressure"):
            assert var in scene
        assert scene.attrs["regime"] == name and scene.attrs["seed"] == 5
        assert list(scene["band"].values) == ["visible", "near_infrared"]
        params = json.loads(scene.attrs["generator_parameters"])
        assert params["nx"] == 24 and params["regime"]["name"] == name


def _untilted_water(scene, regime):
    """The liquid water with a tilted main layer shifted back level by level (as the generator shifts it)."""
    lwc = scene["liquid_water_content"].values.copy()
    layer = regime.layers[0] if regime.layers else None
    if layer is None or layer.tilt == 0:
        return lwc
    direction = np.radians(json.loads(scene.attrs["generator_parameters"])["drawn"][0]["tilt_direction"])
    reach = layer.tilt * (scene["z"].values - layer.base_height)
    dx = scene.attrs["dx_m"]
    for k in range(lwc.shape[0]):
        back = (-int(np.rint(reach[k] * np.sin(direction) / dx)), -int(np.rint(reach[k] * np.cos(direction) / dx)))
        lwc[k] = np.roll(lwc[k], back, axis=(0, 1))
    return lwc


def test_cloud_fraction_equals_the_target(scenes):
    for name, scene in scenes.items():
        columns = (_untilted_water(scene, REGIMES[name]) > 0).any(axis=0)
        if name == "cumulus_under_thin_layer":
            continue  # union of two layers; checked per layer below
        target = REGIMES[name].layers[0].cloud_fraction if REGIMES[name].layers else 0.0
        assert columns.sum() == round(target * columns.size), name
    for fraction in (0.0, 0.13, 0.5, 1.0):
        scene = generate_scene("scattered_cumulus", 2, cloud_fraction=fraction, **SMALL)
        assert cloud_mask(scene).any(axis=0).sum() == round(fraction * 24 * 20)
        assert scene.attrs["cloud_fraction"] == fraction


def test_mean_optical_depth_of_cloudy_columns_meets_the_target():
    for name in ("scattered_cumulus", "broken_stratocumulus", "deep_convection", "overcast"):
        scene = generate_scene(name, 1, **SMALL)
        tau = _cloud_tau(scene)
        cloudy = cloud_mask(scene).any(axis=0)
        assert tau[cloudy].mean() == pytest.approx(REGIMES[name].layers[0].mean_optical_depth, rel=1e-9)
    scene = generate_scene("broken_stratocumulus", 1, mean_optical_depth=3.5, **SMALL)
    tau = _cloud_tau(scene)
    assert tau[tau > 0].mean() == pytest.approx(3.5, rel=1e-9)


def test_optical_depths_span_thin_to_thick(scenes):
    tau = np.concatenate([column_optical_depth(s, "visible").values.ravel() for s in scenes.values()])
    assert tau.min() < 0.2 and tau.max() > 100.0


def test_liquid_water_increases_with_height_above_cloud_base(scenes):
    # Adiabatic-like profiles: LWC ~ Gamma_ad (z - z_base) (Brenguier et al. 2000).
    for name, scene in scenes.items():
        lwc = _untilted_water(scene, REGIMES[name])
        nz, ny, nx = lwc.shape
        for j in range(ny):
            for i in range(nx):
                column = lwc[:, j, i]
                runs = np.split(np.arange(nz), np.flatnonzero(np.diff(column > 0)) + 1)
                for run in runs:
                    if column[run[0]] > 0 and run.size > 1:
                        assert np.all(np.diff(column[run]) > 0), (name, j, i)


def test_effective_radius_follows_the_adiabatic_droplet_relation():
    # Martin et al. (1994): r_e**3 = 3 LWC / (4 pi rho_w k N), above the 2.5 um floor.
    scene = generate_scene("broken_stratocumulus", 3, **SMALL)
    layer = REGIMES["broken_stratocumulus"].layers[0]
    lwc = scene["liquid_water_content"].values
    r = scene["effective_radius"].values
    expected = np.cbrt(3 * lwc / (4 * np.pi * 1000.0 * layer.droplet_spectrum_k * layer.droplet_number))
    use = expected > 2.5e-6
    assert use.sum() > 100
    assert np.allclose(r[use], expected[use], rtol=1e-12)
    assert np.all(r[lwc == 0] == 0.0)
    assert 5e-6 < r[lwc > 0].mean() < 20e-6  # typical stratocumulus droplets (Martin et al. 1994)


def test_same_seed_same_numbers_other_seed_other_numbers():
    a = generate_scene("broken_stratocumulus", 42, **SMALL)
    b = generate_scene("broken_stratocumulus", 42, **SMALL)
    c = generate_scene("broken_stratocumulus", 43, **SMALL)
    d = generate_scene("scattered_cumulus", 42, **SMALL)
    assert a.identical(b)
    assert not np.array_equal(a["extinction"].values, c["extinction"].values)
    # Regimes draw their own random streams: the same seed does not repeat the same mask.
    assert not np.array_equal(cloud_mask(a).any(axis=0)[:10], cloud_mask(d).any(axis=0)[:10])


def test_cloud_top_variability_controls_thickness_spread():
    def top_spread(variability):
        scene = generate_scene("overcast", 4, nx=48, ny=48, nz=60, top=2000.0,
                               cloud_top_variability=variability)
        lwc = scene["liquid_water_content"].values
        top_index = lwc.shape[0] - 1 - np.argmax(lwc[::-1] > 0, axis=0)
        return scene["z_edge"].values[top_index + 1].std()

    assert top_spread(0.0) < top_spread(0.3) < top_spread(1.0)


def test_clear_and_overcast_edge_cases(scenes):
    clear = scenes["clear"]
    assert not np.any(clear["liquid_water_content"].values)
    ssa = clear["single_scattering_albedo"].values
    assert np.all(clear["extinction"].values > 0) and np.all((ssa >= 0) & (ssa <= 1))
    # Clear-sky Rayleigh column to 4 km at 0.45 um: 0.221 * (1 - p(4 km) / p0) (Bodhaine et al. 1999;
    # U.S. Standard Atmosphere 1976: p(4 km) = 61640 Pa).
    tau = column_optical_depth(clear, "visible").values
    assert np.allclose(tau, 0.2211 * (1 - 61640.0 / 101325.0), rtol=2e-3)
    overcast = scenes["overcast"]
    assert cloud_mask(overcast).any(axis=0).all()
    assert column_optical_depth(overcast, "visible").values.min() > 1.0


def test_two_layer_regime_keeps_its_layers_apart(scenes):
    scene = scenes["cumulus_under_thin_layer"]
    lwc = scene["liquid_water_content"].values
    z = scene["z"].values
    upper = lwc[z > 2500.0].any(axis=0)
    lower = lwc[z < 2500.0].any(axis=0)
    total = scene.sizes["x"] * scene.sizes["y"]
    assert upper.sum() == round(0.9 * total) and lower.sum() == round(0.2 * total)
    thin = _cloud_tau(scene, z > 2500.0)
    assert thin[upper].mean() == pytest.approx(2.0, rel=1e-9)


def test_non_uniform_levels_gas_and_albedo_options():
    edges = np.concatenate([np.arange(0.0, 2000.0, 100.0), np.arange(2000.0, 6001.0, 500.0)])
    scene = generate_scene("scattered_cumulus", 0, nx=16, ny=16, z_edge=edges,
                           surface_albedo={"visible": 0.05, "near_infrared": 0.3},
                           gas_absorption={"near_infrared": {"column_optical_depth": 0.2, "scale_height": 2000.0}})
    assert np.array_equal(scene["z_edge"].values, edges)
    assert scene["surface_albedo"].sel(band="near_infrared").values.max() == 0.3
    ssa_vis = scene["single_scattering_albedo"].sel(band="visible").values
    ssa_nir = scene["single_scattering_albedo"].sel(band="near_infrared").values
    clear = scene["liquid_water_content"].values == 0
    assert np.all(ssa_vis[clear] == 1.0) and np.all(ssa_nir[clear] < 1.0)
    gas_tau = column_optical_depth(scene, "near_infrared").values - column_optical_depth(
        generate_scene("scattered_cumulus", 0, nx=16, ny=16, z_edge=edges), "near_infrared").values
    assert np.allclose(gas_tau, 0.2)


def test_custom_regime_and_overrides_of_the_main_layer():
    custom = Regime("my_layer", "test", (CloudLayer(0.5, 300.0, 200.0, 5.0, effective_radius=10e-6),), top=1500.0)
    scene = generate_scene(custom, 0, nx=10, ny=10, nz=15)
    assert scene.attrs["regime"] == "my_layer"
    assert np.all(scene["effective_radius"].values[scene["liquid_water_content"].values > 0] == 10e-6)
    changed = REGIMES["scattered_cumulus"].with_overrides(cloud_top_variability=0.9)
    assert changed.layers[0].cloud_top_variability == 0.9 and changed.layers[0].cloud_fraction == 0.25


@pytest.mark.parametrize("kwargs, message", [
    ({"cloud_fraction": 1.2}, "cloud_fraction must be in [0, 1]; got 1.2"),
    ({"cloud_fraction": -0.1}, "cloud_fraction must be in [0, 1]"),
    ({"mean_optical_depth": 0.0}, "mean_optical_depth must be in (0, 10000]"),
    ({"cloud_top_variability": -1.0}, "cloud_top_variability must be in [0, 5]"),
    ({"nx": 0}, "nx must be an integer in [1, 4096]"),
    ({"nx": 2.5}, "nx must be an integer"),
    ({"dx": -100.0}, "dx must be in (0, 100000]"),
    ({"top": 300.0}, "top=300 m is at or below the cloud base"),
    ({"nz": 0}, "nz must be an integer in [1, 1000]"),
    ({"z_edge": [0.0, 100.0, 100.0]}, "z_edge must increase strictly"),
    ({"z_edge": [10.0, 100.0]}, "must be finite and start at 0 m"),
    ({"bands": ["visible", "blue"]}, "unknown band 'blue'"),
    ({"surface_albedo": 1.5}, "surface_albedo[visible] must be in [0, 1]"),
    ({"surface_albedo": {"visible": 0.1}}, "surface_albedo gives no value for band 'near_infrared'"),
    ({"gas_absorption": {"visible": {"depth": 1.0}}}, "unknown key 'depth'"),
    ({"surface_pressure": 5.0}, "surface_pressure must be in"),
])
def test_bad_parameters_raise_clear_messages(kwargs, message):
    with pytest.raises(ParameterError) as err:
        grid = {k: v for k, v in SMALL.items() if not ("z_edge" in kwargs and k == "nz")}
        generate_scene("overcast", 0, **{**grid, **kwargs})
    assert message in str(err.value)


def test_bad_regime_and_seed():
    with pytest.raises(ParameterError, match="regime must be one of"):
        generate_scene("cirrus", 0)
    with pytest.raises(ParameterError, match="seed must be an integer"):
        generate_scene("overcast", -1)
    with pytest.raises(ParameterError, match="no cloud layer"):
        generate_scene("clear", 0, mean_optical_depth=3.0)


def test_lower_layer_stops_below_the_upper_layer_only_where_that_exists():
    lower = CloudLayer(1.0, 300.0, 3000.0, 30.0, cloud_top_variability=0.0, edge_taper=0.0)
    upper = CloudLayer(0.5, 2000.0, 300.0, 2.0, base_variability=100.0, effective_radius=8e-6)
    scene = generate_scene(Regime("stacked", "test", (lower, upper), top=4000.0), 0, nx=12, ny=12, nz=40)
    lwc = scene["liquid_water_content"].values
    in_upper = scene["effective_radius"].values == 8e-6
    in_lower = (lwc > 0) & ~in_upper
    k = np.arange(lwc.shape[0])[:, None, None]
    highest_lower = np.where(in_lower, k, -1).max(axis=0)
    lowest_upper = np.where(in_upper, k, 99).min(axis=0)
    has_upper = in_upper.any(axis=0)
    assert has_upper.sum() == 72
    assert np.all(highest_lower[has_upper] < lowest_upper[has_upper])
    assert np.all(highest_lower[~has_upper] == 32)  # uncapped: top at 3300 m lies in layer 32
