"""The scene validator: every bad-input case names the variable and, per cell, the index."""

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from surrogate3d.errors import ValidationError
from surrogate3d.scenes.model import make_scene
from surrogate3d.scenes.validation import validate_scene


def _scene(nband=2, nz=3, ny=2, nx=4, seed=0):
    rng = np.random.default_rng(seed)
    shape = (nband, nz, ny, nx)
    return make_scene(rng.uniform(0, 0.05, shape), rng.uniform(0.5, 1.0, shape), rng.uniform(-0.5, 0.9, shape),
                      np.linspace(0.0, 1000.0, nz + 1), 100.0, 100.0, surface_albedo=0.1,
                      band=[f"b{i}" for i in range(nband)],
                      liquid_water_content=rng.uniform(0, 1e-3, (nz, ny, nx)),
                      effective_radius=rng.uniform(5e-6, 15e-6, (nz, ny, nx)),
                      air_temperature=np.linspace(288.0, 280.0, nz),
                      air_pressure=np.linspace(101325.0, 90000.0, nz + 1),
                      specific_humidity=np.linspace(8e-3, 5e-3, nz), surface_temperature=rng.uniform(280, 300, (ny, nx)),
                      surface_longwave_emissivity=0.98)


def _message(ds):
    with pytest.raises(ValidationError) as err:
        validate_scene(ds)
    return str(err.value)


@pytest.mark.parametrize("name, index, value, rule", [
    ("extinction", (1, 2, 0, 3), np.nan, "finite"),
    ("extinction", (0, 1, 1, 0), np.inf, "finite"),
    ("extinction", (1, 0, 1, 2), -1e-3, ">= 0"),
    ("single_scattering_albedo", (0, 2, 1, 1), 1.01, "in [0, 1]"),
    ("single_scattering_albedo", (1, 0, 0, 0), -0.2, "in [0, 1]"),
    ("asymmetry_parameter", (0, 1, 0, 2), 1.0, "in (-1, 1)"),
    ("asymmetry_parameter", (1, 2, 1, 3), -1.5, "in (-1, 1)"),
    ("surface_albedo", (1, 1, 2), 1.2, "in [0, 1]"),
    ("liquid_water_content", (2, 1, 0), -1e-4, ">= 0"),
    ("air_temperature", (1, 0, 2), -5.0, "> 0"),
    ("air_temperature", (2, 1, 3), 0.0, "> 0"),
    ("air_temperature", (0, 1, 0), np.nan, "finite"),
    ("surface_temperature", (1, 3), 0.0, "> 0"),
    ("surface_temperature", (0, 2), np.inf, "finite"),
    ("surface_longwave_emissivity", (1, 1), 1.2, "in [0, 1]"),
    ("surface_longwave_emissivity", (0, 3), -0.01, "in [0, 1]"),
    ("specific_humidity", (2, 0, 1), -1e-3, "in [0, 1)"),
    ("specific_humidity", (1, 1, 1), 1.0, "in [0, 1)"),
])
def test_bad_cell_is_reported_with_variable_and_index(name, index, value, rule):
    ds = _scene()
    ds[name].values[index] = value
    msg = _message(ds)
    dims = ds[name].dims
    where = ", ".join(f"band='b{i}'" if d == "band" else f"{d}={i}" for d, i in zip(dims, index))
    assert f"{name} must be {rule}; got {float(value)!r} (at {where}" in msg


def test_non_increasing_heights_name_z_edge_and_the_index():
    ds = _scene()
    edges = ds["z_edge"].values.copy()
    edges[2] = edges[1]
    msg = _message(ds.assign_coords(z_edge=edges))
    assert f"z_edge is not strictly increasing at z_edge=2: {float(edges[1])!r} after {float(edges[1])!r}" in msg


def test_heights_not_starting_at_the_surface():
    ds = _scene()
    msg = _message(ds.assign_coords(z_edge=ds["z_edge"].values + 10.0))
    assert "z_edge must start at the surface" in msg


def test_mismatched_shapes_name_the_variable():
    ds = _scene()
    ds["surface_albedo"] = (("y", "x"), np.full((2, 4), 0.1))
    assert "surface_albedo has dimensions ('y', 'x'); expected ('band', 'y', 'x')" in _message(ds)
    with pytest.raises(ValidationError, match="single_scattering_albedo has shape"):
        make_scene(np.zeros((1, 2, 3, 4)), np.zeros((1, 2, 3, 5)), 0.0, [0.0, 1.0, 2.0], 1.0, 1.0)
    with pytest.raises(ValidationError, match="z_edge has shape"):
        make_scene(np.zeros((1, 2, 3, 4)), 1.0, 0.0, [0.0, 1.0], 1.0, 1.0)


def test_missing_variables_are_listed():
    msg = _message(_scene().drop_vars(["solar_weight", "asymmetry_parameter"]))
    assert "missing variables: asymmetry_parameter, solar_weight" in msg


def test_weights_not_summing_to_one():
    ds = _scene()
    ds["solar_weight"].values[:] = [0.5, 0.6]
    assert "solar_weight sums to 1.1" in _message(ds)
    ds["solar_weight"].values[:] = [1.5, -0.5]
    assert "solar_weight must be >= 0; got" in _message(ds) and "(at band='b1')" in _message(ds)


def test_pressure_must_decrease_and_spacing_be_positive():
    ds = _scene()
    ds["air_pressure"].values[3] = ds["air_pressure"].values[2] + 1.0
    assert "air_pressure does not decrease with height at z_edge=3" in _message(ds)
    ds = _scene()
    ds.attrs["dx_m"] = -1.0
    assert "dx_m" in _message(ds)


def test_effective_radius_must_be_positive_only_where_there_is_water():
    ds = _scene()
    ds["liquid_water_content"].values[0, 0, 0] = 0.0
    ds["effective_radius"].values[0, 0, 0] = 0.0
    validate_scene(ds)
    ds["effective_radius"].values[1, 1, 1] = 0.0
    assert "effective_radius must be > 0 in a cloudy cell; got 0.0 (at z=1, y=1, x=1)" in _message(ds)


def test_messages_show_plain_numbers_and_band_names():
    # numpy 2 scalars print as np.float64(...) / np.str_(...); messages must read plainly.
    ds = _scene()
    ds = ds.assign_coords(band=np.array(["b0", "b1"], dtype="<U2"))
    ds["extinction"].values[1, 0, 0, 0] = -2.0
    ds["air_pressure"].values[3] = ds["air_pressure"].values[2] + 1.0
    msg = _message(ds)
    assert "np." not in msg
    assert "extinction must be >= 0; got -2.0 (at band='b1', z=0, y=0, x=0" in msg


def test_label_names_the_scene():
    ds = _scene()
    ds["extinction"].values[0, 0, 0, 0] = -1.0
    with pytest.raises(ValidationError, match="^scene_007.nc is invalid"):
        validate_scene(ds, label="scene_007.nc")


@st.composite
def valid_scenes(draw):
    nband = draw(st.integers(1, 3))
    nz, ny, nx = (draw(st.integers(1, 4)) for _ in range(3))
    shape = (nband, nz, ny, nx)
    seed = draw(st.integers(0, 2 ** 32 - 1))
    rng = np.random.default_rng(seed)
    ext = rng.uniform(0, 1, shape) * draw(st.sampled_from([0.0, 1e-5, 1e-2, 10.0]))
    ssa = rng.uniform(0, 1, shape)
    ssa.flat[0] = draw(st.sampled_from([0.0, 1.0, 0.5]))
    g = rng.uniform(-0.999, 0.999, shape)
    steps = rng.uniform(1.0, 500.0, nz)
    weights = rng.uniform(0.1, 1.0, nband)
    return make_scene(ext, ssa, g, np.concatenate([[0.0], np.cumsum(steps)]), draw(st.floats(1.0, 1e4)),
                      draw(st.floats(1.0, 1e4)), surface_albedo=rng.uniform(0, 1, (nband, ny, nx)),
                      solar_weight=weights / weights.sum(), band=[f"b{i}" for i in range(nband)], validate=False)


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(valid_scenes())
def test_valid_random_scenes_pass(scene):
    assert validate_scene(scene) is scene


_BAD_VALUES = {
    "extinction": [np.nan, np.inf, -np.inf, -1e-9, -3.0],
    "single_scattering_albedo": [np.nan, -1e-9, 1.0 + 1e-9, 7.0],
    "asymmetry_parameter": [np.nan, 1.0, -1.0, 1.5, -np.inf],
}


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(valid_scenes(), st.sampled_from(sorted(_BAD_VALUES)), st.data())
def test_a_single_corrupted_cell_is_always_reported_with_its_index(scene, name, data):
    values = scene[name].values
    flat = data.draw(st.integers(0, values.size - 1))
    bad = data.draw(st.sampled_from(_BAD_VALUES[name]))
    index = np.unravel_index(flat, values.shape)
    values[index] = bad
    with pytest.raises(ValidationError) as err:
        validate_scene(scene)
    band, k, j, i = (int(n) for n in index)
    assert f"{name} " in str(err.value)
    assert f"(at band='b{band}', z={k}, y={j}, x={i})" in str(err.value)
