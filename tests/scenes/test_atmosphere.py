"""The standard atmosphere against the U.S. Standard Atmosphere 1976 tables."""

import numpy as np
import pytest

from surrogate3d.errors import ParameterError
from surrogate3d.scenes import atmosphere


@pytest.mark.parametrize("height, temperature, pressure", [
    # U.S. Standard Atmosphere 1976, tabulated values at geometric heights (from memory).
    (0.0, 288.150, 101325.0),
    (1000.0, 281.651, 89876.0),
    (5000.0, 255.676, 54048.0),
    (11000.0, 216.774, 22700.0),
    (20000.0, 216.650, 5529.3),
])
def test_matches_us_standard_atmosphere_1976_tables(height, temperature, pressure):
    assert atmosphere.standard_temperature(height) == pytest.approx(temperature, abs=0.01)
    assert atmosphere.standard_pressure(height) == pytest.approx(pressure, rel=2e-4)


def test_pressure_is_hydrostatic():
    # dp/dH = -p g0 / (R T) in geopotential height H (U.S. Standard Atmosphere 1976, eq. 32).
    z = np.linspace(100.0, 15000.0, 50)
    dz = 0.5
    dp = (atmosphere.standard_pressure(z + dz) - atmosphere.standard_pressure(z - dz))
    dh = atmosphere.geopotential_height(z + dz) - atmosphere.geopotential_height(z - dz)
    expected = -atmosphere.standard_pressure(z) * atmosphere.STANDARD_GRAVITY / (
        atmosphere.DRY_AIR_GAS_CONSTANT * atmosphere.standard_temperature(z))
    assert np.allclose(dp / dh, expected, rtol=1e-5)


def test_profile_on_layer_edges_and_centres():
    edges = np.array([0.0, 500.0, 1500.0, 4000.0])
    temperature, pressure = atmosphere.standard_profile(edges, surface_pressure=100000.0)
    assert temperature.shape == (3,) and pressure.shape == (4,)
    assert pressure[0] == 100000.0 and np.all(np.diff(pressure) < 0)
    # 6.5 K/km lapse rate of the ICAO troposphere.
    assert temperature[0] == pytest.approx(288.15 - 0.0065 * atmosphere.geopotential_height(250.0))


def test_out_of_range_heights_and_pressures_are_refused():
    with pytest.raises(ParameterError, match="height"):
        atmosphere.standard_temperature(-10.0)
    with pytest.raises(ParameterError, match="surface_pressure"):
        atmosphere.standard_pressure(0.0, surface_pressure=-5.0)
