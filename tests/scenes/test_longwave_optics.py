"""Checks of the longwave cloud and gas optics against published values and limits.

The clear-sky checks run the gas optics and the longwave two-stream solver on standard
atmospheres (McClatchey et al. 1972, the AFGL profiles; the values below are from memory)
and compare the surface downward flux with published values.
"""

import numpy as np
import pytest

from surrogate3d.errors import ParameterError
from surrogate3d.scenes.longwave_optics import (LONGWAVE_BANDS, PER_CM, cloud_optics, gas_absorption_coefficient,
                                                mix_longwave_optics, spectral_intervals, sum_over_bands,
                                                water_refractive_index)
from surrogate3d.scenes.planck import STEFAN_BOLTZMANN, planck_band_fraction, planck_radiance
from surrogate3d.solvers.longwave_two_stream import longwave_two_stream

BAND_LOW = np.array([b.wavenumber_range[0] for b in LONGWAVE_BANDS])
BAND_HIGH = np.array([b.wavenumber_range[1] for b in LONGWAVE_BANDS])
WATER_DENSITY = 1000.0

# ----------------------------------------------------------------------------------------
# Standard atmospheres: McClatchey et al. (1972), AFGL mid-latitude summer (MLS) and
# tropical (TRP); height [km], temperature [K], water-vapour density [g m-3]; from memory.
# Surface pressure 1013 hPa; pressure follows hydrostatically from the temperatures.
# ----------------------------------------------------------------------------------------
HEIGHT = np.array([0, 1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11, 12, 13, 14, 15, 16, 17, 18, 19, 20, 21, 22, 23, 24, 25,
                   27.5, 30, 35, 40, 45, 50]) * 1000.0
STRATOSPHERIC_VAPOUR = [0.0018, 0.001, 0.00076, 0.00064, 0.00056, 0.0005, 0.00049, 0.00045, 0.00051, 0.00051,
                        0.00054, 0.0006, 0.00067, 0.00064, 0.00054, 0.00035, 0.00023, 0.00013, 7e-5]
ATMOSPHERES = {
    "mid_latitude_summer": (
        [294.0, 290.0, 285.0, 279.0, 273.0, 267.0, 261.0, 255.0, 248.0, 242.0, 235.0, 229.0, 222.0, 216.0, 216.0,
         216.0, 216.0, 216.0, 216.0, 217.0, 218.0, 219.0, 220.0, 222.0, 223.0, 224.0, 234.0, 245.0, 258.0, 270.0,
         276.0, 274.0],
        [14.0, 9.3, 5.9, 3.3, 1.9, 1.0, 0.61, 0.37, 0.21, 0.12, 0.064, 0.022, 0.006] + STRATOSPHERIC_VAPOUR),
    "tropical": (
        [299.7, 293.7, 287.7, 283.7, 277.0, 270.3, 263.6, 257.0, 250.3, 243.6, 237.0, 230.1, 223.6, 217.0, 210.3,
         203.7, 197.0, 194.8, 198.8, 202.7, 206.7, 210.7, 214.6, 217.0, 219.2, 221.4, 227.0, 232.3, 243.1, 254.0,
         264.8, 270.2],
        [19.0, 13.0, 9.3, 4.7, 2.2, 1.5, 0.85, 0.47, 0.25, 0.12, 0.05, 0.017, 0.006] + STRATOSPHERIC_VAPOUR),
}
GRAVITY = 9.80665
DRY_AIR_GAS_CONSTANT = 287.05
VAPOUR_GAS_CONSTANT = 461.5


def _column(name, resolution=10.0 * PER_CM):
    """Edges (fine grid: 100 m to 2 km, 250 m to 20 km, 1 km above), the clear-sky fluxes
    summed over the spectral intervals, per band, and the heating rate."""
    temperature, vapour = (np.asarray(v, dtype=float) for v in ATMOSPHERES[name])
    z = np.concatenate([np.arange(0.0, 2000.0, 100.0), np.arange(2000.0, 20000.0, 250.0),
                        np.arange(20000.0, 50001.0, 1000.0)])
    t = np.interp(z, HEIGHT, temperature)
    rho_v = np.exp(np.interp(z, HEIGHT, np.log(vapour * 1e-3)))
    # Hydrostatic pressure, temperature linear between edges (layer mean for the scale height).
    p = 101300.0 * np.exp(-np.concatenate([[0.0], np.cumsum(GRAVITY * np.diff(z) / (DRY_AIR_GAS_CONSTANT
                                                                                     * 0.5 * (t[1:] + t[:-1])))]))
    t_layer = 0.5 * (t[1:] + t[:-1])
    p_layer = np.sqrt(p[1:] * p[:-1])
    ratio = np.log(rho_v[:-1] / rho_v[1:])
    safe = np.where(np.abs(ratio) > 1e-12, ratio, 1.0)
    rho_v_layer = np.where(np.abs(ratio) > 1e-12, (rho_v[:-1] - rho_v[1:]) / safe, rho_v[:-1])   # exponential mean
    moist_density = p_layer / (DRY_AIR_GAS_CONSTANT * t_layer) + rho_v_layer * (1 - DRY_AIR_GAS_CONSTANT
                                                                                / VAPOUR_GAS_CONSTANT)
    q = rho_v_layer / moist_density
    intervals = spectral_intervals(resolution)
    tau = gas_absorption_coefficient(t_layer, p_layer, q, resolution=resolution) * np.diff(z)
    out = longwave_two_stream(tau, 0.0, 0.0, t, t[0], 1.0, intervals.wavenumber_low, intervals.wavenumber_high,
                              air_pressure_edges=p)
    return z, out, intervals, t[0], rho_v[0]


@pytest.fixture(scope="module")
def clear_sky():
    return {name: _column(name) for name in ATMOSPHERES}


def _brutsaert(surface_temperature, vapour_density):
    """Clear-sky downward longwave at the surface, Brutsaert (1975): emissivity
    1.24 (e / T)^(1/7) with the vapour pressure e in hPa, times sigma T^4."""
    e_hpa = vapour_density * VAPOUR_GAS_CONSTANT * surface_temperature / 100.0
    return 1.24 * (e_hpa / surface_temperature) ** (1.0 / 7.0) * STEFAN_BOLTZMANN * surface_temperature ** 4


def test_clear_sky_surface_downward_flux_mid_latitude_summer(clear_sky):
    # Published values for the AFGL mid-latitude summer atmosphere: about 350 W m-2 from the
    # line-by-line models of the ICRCCM intercomparison (Ellingson, Ellis and Fels 1991; from
    # memory), 355 W m-2 from the Brutsaert (1975) formula with the surface values. The
    # simple spectral model (no ozone, methane, nitrous oxide; exponential band envelopes) is
    # held to 15 %, a loose bound. Measured: 331.0 W m-2 (-5.4 % and -6.8 %).
    _, out, _, t_surface, rho_v = clear_sky["mid_latitude_summer"]
    down = out["surface_downward_flux"].sum()
    assert down == pytest.approx(350.0, rel=0.15)
    assert down == pytest.approx(_brutsaert(t_surface, rho_v), rel=0.15)
    assert 325.0 < down < 336.0             # the measured value, to catch changes


def test_clear_sky_surface_downward_flux_tropical(clear_sky):
    # Brutsaert (1975) with the tropical surface values gives 400.7 W m-2; 15 % as above.
    # Measured: 379.7 W m-2 (-5.2 %).
    _, out, _, t_surface, rho_v = clear_sky["tropical"]
    down = out["surface_downward_flux"].sum()
    assert down == pytest.approx(_brutsaert(t_surface, rho_v), rel=0.15)
    assert 373.0 < down < 385.0


def test_clear_sky_outgoing_flux_and_cooling(clear_sky):
    # Outgoing longwave of the mid-latitude summer atmosphere, about 285 W m-2 from the
    # ICRCCM line-by-line models (Ellingson et al. 1991; from memory), 15 %; the model has
    # no ozone, which would lower it. Measured: 304.1 W m-2. Clear-sky longwave cooling of
    # the free troposphere is 1-3 K day-1 (Manabe and Strickler 1964; common practice);
    # measured 1.6-2.2 (MLS) and 1.7-2.6 K day-1 (tropical) between 1 and 9 km.
    z, out, *_ = clear_sky["mid_latitude_summer"]
    assert out["toa_upward_flux"].sum() == pytest.approx(285.0, rel=0.15)
    for name in ATMOSPHERES:
        z, out, *_ = clear_sky[name]
        middle = 0.5 * (z[1:] + z[:-1])
        cooling = -out["heating_rate"].sum(axis=0)[(middle > 1000.0) & (middle < 9000.0)]
        assert np.all((cooling > 1.0) & (cooling < 3.5)), name


def test_clear_sky_energy_and_spectral_convergence(clear_sky):
    # Energy (first law) in every interval, and the 10 cm-1 intervals against 5 cm-1:
    # measured differences 0.001 W m-2 at the surface and 0.024 W m-2 at the top.
    _, out, intervals, *_ = clear_sky["mid_latitude_summer"]
    balance = out["layer_net_absorption"].sum(axis=-1) + out["surface_net_absorption"] + out["toa_upward_flux"]
    np.testing.assert_allclose(balance, 0.0, atol=1e-10)
    per_band = sum_over_bands(out["surface_downward_flux"], intervals)
    assert per_band.shape == (len(LONGWAVE_BANDS),)
    assert per_band.sum() == pytest.approx(out["surface_downward_flux"].sum(), rel=1e-14)
    _, fine, *_ = _column("mid_latitude_summer", resolution=5.0 * PER_CM)
    for name in ("surface_downward_flux", "toa_upward_flux"):
        assert fine[name].sum() == pytest.approx(out[name].sum(), abs=0.05), name


def test_gas_absorption_structure():
    # Without water vapour and CO2 nothing absorbs; CO2 alone absorbs only around its 15 um
    # band (Wilson and Gea-Banacloche 2012), proportionally to its amount and, in the line
    # wings, to pressure (Lorentz broadening: absorption coefficient per molecule ~ p).
    intervals = spectral_intervals()
    centre = 0.5 * (intervals.wavenumber_low + intervals.wavenumber_high) / PER_CM
    assert np.all(gas_absorption_coefficient(280.0, 80000.0, 0.0, co2_mole_fraction=0.0) == 0.0)
    co2 = gas_absorption_coefficient(280.0, 80000.0, 0.0, co2_mole_fraction=400e-6)
    assert centre[np.argmax(co2)] == pytest.approx(665.0)
    assert co2[np.abs(centre - 667.5) > 300.0].max() < 1e-10 * co2.max()
    np.testing.assert_allclose(gas_absorption_coefficient(280.0, 80000.0, 0.0, co2_mole_fraction=800e-6), 2 * co2,
                               rtol=1e-12)
    # Same air density (p / T fixed): the per-molecule absorption doubles with pressure.
    np.testing.assert_allclose(gas_absorption_coefficient(560.0, 160000.0, 0.0, co2_mole_fraction=400e-6),
                               2 * co2, rtol=1e-12)
    # Water vapour: strongest in the rotation band, weakest in the window.
    vapour = gas_absorption_coefficient(290.0, 100000.0, 0.01, co2_mole_fraction=0.0)
    band_mean = sum_over_bands(vapour, intervals) / np.bincount(intervals.band)
    assert np.argmax(band_mean) == 0 and np.argmin(band_mean) == 4
    assert vapour.shape == (len(intervals.band),)


def test_window_continuum_of_roberts_et_al():
    # Roberts, Selby and Biberman (1976): at 296 K the self continuum is (4.18 + 5578
    # exp(-7.87e-3 nu)) cm2 g-1 atm-1, 6.31 at 1000 cm-1 (from memory). With 20 hPa of
    # vapour the mass absorption coefficient is 0.1 C(nu) e[atm] m2 kg-1, plus the small
    # foreign part 0.002 (p - e); checked in the interval 1000-1010 cm-1 (centre 1005).
    intervals = spectral_intervals()
    index = int(np.flatnonzero(intervals.wavenumber_low == 1000.0 * PER_CM)[0])
    p, t, e = 100000.0, 296.0, 2000.0
    epsilon = 0.01801528 / 0.0289644
    q = epsilon * e / (p - (1 - epsilon) * e)
    density = p / (8.31432 / 0.0289644 * t * (1 + (1 / epsilon - 1) * q))
    k = gas_absorption_coefficient(t, p, q, co2_mole_fraction=0.0)[index] / (q * density)
    lines = 130.0 * np.exp(-855.0 / 56.0) * 2.0 + 8.0 * np.exp(-495.0 / 40.0) * 2.0     # negligible here
    continuum = 0.1 * (4.18 + 5578.0 * np.exp(-7.87e-3 * 1005.0)) * (e + 0.002 * (p - e)) / 101325.0
    assert k == pytest.approx(continuum + lines, rel=1e-10)
    assert lines < 1e-2 * continuum


# ----------------------------------------------------------------------------------------
# Cloud liquid water
# ----------------------------------------------------------------------------------------


def test_cloud_absorption_against_published_coefficients():
    # Broadband mass absorption coefficient of liquid water clouds for r_e = 10 um: about
    # 0.09 m2 g-1 (Kiehl et al. 1998, the CCM3 longwave cloud absorption coefficient
    # 0.090361 m2 g-1; from memory). Here: the Planck-weighted mean over the bands at 280 K,
    # measured 0.0825 m2 g-1; within 25 % (the refractive indices are from memory).
    extinction, ssa, _ = cloud_optics(1e-3, 10e-6)
    absorption = extinction * (1.0 - ssa) / 1e-3 / 1000.0                   # m2 g-1
    weights = planck_band_fraction(280.0, BAND_LOW, BAND_HIGH)
    broadband = float(weights @ absorption / weights.sum())
    assert broadband == pytest.approx(0.090361, rel=0.25)
    assert np.all((absorption > 0.04) & (absorption < 0.15))


def test_cloud_emissivity_against_stephens():
    # Stephens (1978): cloud emissivity 1 - exp(-a0 LWP) with a0 = 0.130 m2 g-1 (upward) and
    # 0.158 m2 g-1 (downward) for liquid water path LWP in g m-2 (from memory). Here an
    # isothermal cloud at 280 K (cloud optics with scattering, two-stream solver) over a
    # non-emitting black surface; broadband emissivity = emitted flux / sigma T^4. Measured
    # 0.238, 0.488, 0.725, 0.899 for 2, 5, 10, 20 g m-2 against 0.229, 0.478, 0.727, 0.926
    # (upward); asserted within 0.05 of the range [upward, downward].
    for lwp in (2.0, 5.0, 10.0, 20.0):
        extinction, ssa, g = cloud_optics(lwp * 1e-3 / 100.0, 10e-6)
        out = longwave_two_stream(extinction[:, None] * 100.0, ssa[:, None], g[:, None], [280.0], 1.0, 1.0,
                                  BAND_LOW, BAND_HIGH)
        emissivity = out["toa_upward_flux"].sum() / (STEFAN_BOLTZMANN * 280.0 ** 4)
        assert 1 - np.exp(-0.130 * lwp) - 0.05 < emissivity < 1 - np.exp(-0.158 * lwp) + 0.05, lwp


def test_cloud_optics_limits():
    # Large drops, geometric optics (van de Hulst 1957; Stephens 1978): extinction
    # efficiency -> 2, so the mass extinction tends to 3 / (2 rho_w r_e); Mie's approach to
    # it is from above (Q_ext = 2 + O(x^(-2/3))): measured 1.09 times it at 40 um in the
    # 1250-3000 cm-1 band. Absorption efficiency -> about 1: 3 / (4 rho_w r_e), measured
    # 1.09 times it at 40 um in the window (edge effects, Nussenzveig and Wiscombe 1980).
    extinction, ssa, g = cloud_optics(1.0, 40e-6)
    assert extinction[5] / (1.5 / (WATER_DENSITY * 40e-6)) == pytest.approx(1.09, abs=0.06)
    assert extinction[4] * (1 - ssa[4]) / (0.75 / (WATER_DENSITY * 40e-6)) == pytest.approx(1.09, abs=0.1)
    assert np.all((ssa > 0.3) & (ssa < 0.8)) and np.all((g > 0.75) & (g < 1.0))
    # Small drops absorb like their volume (Rayleigh limit, Bohren and Huffman 1983, eq. 5.11:
    # mass absorption 6 pi nu Im((m^2 - 1)/(m^2 + 2)) / rho_w, independent of size): in the
    # far infrared (lambda > 28 um) at r_e = 2 um within 10 % of its Planck-weighted mean.
    nu = np.linspace(*LONGWAVE_BANDS[0].wavenumber_range, 2001)
    m = water_refractive_index(nu)
    weight = planck_radiance(280.0, nu)
    rayleigh = (weight * 6 * np.pi * nu / WATER_DENSITY * ((m * m - 1) / (m * m + 2)).imag).sum() / weight.sum()
    extinction, ssa, _ = cloud_optics(1.0, 2e-6)
    assert extinction[0] * (1 - ssa[0]) == pytest.approx(rayleigh, rel=0.1)
    # Absorption per mass falls with radius above about 6 um (Stephens 1978; Hu and Stamnes 1993).
    absorption = [(lambda e, w, g: e * (1 - w))(*cloud_optics(1.0, r)) for r in (6e-6, 10e-6, 20e-6, 40e-6)]
    assert np.all(np.diff(absorption, axis=0) < 0)


def test_cloud_optics_shapes_clamping_and_zero_water():
    lwc = np.array([[0.0, 2e-4], [5e-4, 1e-3]])
    radius = np.array([[np.nan, 8e-6], [1e-6, 80e-6]])      # NaN allowed where there is no water
    extinction, ssa, g = cloud_optics(lwc, radius)
    assert extinction.shape == ssa.shape == g.shape == (len(LONGWAVE_BANDS), 2, 2)
    assert np.all(extinction[:, 0, 0] == 0.0)
    # Radii outside 2-40 um take the end values of the table, per unit water.
    np.testing.assert_allclose(extinction[:, 1, 0] / 5e-4, cloud_optics(1.0, 2e-6)[0], rtol=1e-12)
    np.testing.assert_allclose(extinction[:, 1, 1] / 1e-3, cloud_optics(1.0, 40e-6)[0], rtol=1e-12)


def test_mixing_gas_and_cloud():
    intervals = spectral_intervals(50.0 * PER_CM)
    gas = gas_absorption_coefficient(np.array([280.0, 270.0]), np.array([90000.0, 80000.0]), np.array([8e-3, 5e-3]),
                                     resolution=50.0 * PER_CM)
    cloud = cloud_optics(np.array([0.0, 3e-4]), 10e-6)
    extinction, ssa, g = mix_longwave_optics(gas, *cloud, intervals)
    assert extinction.shape == ssa.shape == g.shape == gas.shape
    cloud_ext = cloud[0][intervals.band]
    np.testing.assert_allclose(extinction, gas + cloud_ext, rtol=1e-14)
    np.testing.assert_allclose(ssa * extinction, cloud_ext * cloud[1][intervals.band], rtol=1e-13)
    assert np.all(ssa[:, 0] == 0.0)


def test_spectral_intervals_tile_the_bands():
    intervals = spectral_intervals(7.0 * PER_CM)
    np.testing.assert_array_equal(intervals.wavenumber_low[1:], intervals.wavenumber_high[:-1])
    assert np.all(intervals.wavenumber_high - intervals.wavenumber_low <= 7.0 * PER_CM * (1 + 1e-12))
    for i, band in enumerate(LONGWAVE_BANDS):
        inside = intervals.band == i
        assert intervals.wavenumber_low[inside][0] == band.wavenumber_range[0]
        assert intervals.wavenumber_high[inside][-1] == pytest.approx(band.wavenumber_range[1], rel=1e-15)
    with pytest.raises(ParameterError, match=r"^values must have the interval axis first"):
        sum_over_bands(np.ones(3), intervals)


@pytest.mark.parametrize("arguments, message", [
    ((np.array([280.0, -2.0]), 90000.0, 0.01), r"^air_temperature must be in \(0, inf\); got -2.0 \(at index 1\)$"),
    ((280.0, np.array([90000.0, np.nan]), 0.01), r"^air_pressure must be finite; got nan \(at index 1\)$"),
    ((280.0, 90000.0, np.array([0.01, 1.0])), r"^specific_humidity must be in \[0, 1\); got 1.0 \(at index 1\)$"),
])
def test_bad_gas_input_is_named_with_its_index(arguments, message):
    with pytest.raises(ParameterError, match=message):
        gas_absorption_coefficient(*arguments)


def test_bad_cloud_input_is_named_with_its_index():
    with pytest.raises(ParameterError, match=r"^liquid_water_content must be in \[0, inf\); got -1e-05 "
                                             r"\(at index \(0, 1\)\)$"):
        cloud_optics(np.array([[0.0, -1e-5]]), 10e-6)
    with pytest.raises(ParameterError, match=r"^effective_radius must be finite and > 0 where liquid_water_content "
                                             r"> 0; got 0.0 \(at index 2\)$"):
        cloud_optics(np.array([0.0, 1e-4, 1e-4]), np.array([0.0, 5e-6, 0.0]))
