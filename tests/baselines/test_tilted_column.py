"""The tilted independent column approximation: shadow geometry, limits and energy."""

import math

import numpy as np
import pytest

from surrogate3d.baselines import TiltedIndependentColumn, two_stream_fluxes
from surrogate3d.scenes import make_scene

DX = 100.0


def bar_cloud(nx=40, ny=4, along="x", cells=(5, 8)):
    """A thick cloud bar in the 1000-1500 m layer, 3 cells wide, spanning the other axis."""
    z_edge = [0.0, 1000.0, 1500.0, 2000.0]
    ext = np.full((3, ny, nx), 1e-7)
    if along == "x":
        ext[1, :, cells[0]:cells[1]] = 0.04
    else:
        ext[1, cells[0]:cells[1], :] = 0.04
    return make_scene(ext, 0.999, 0.85, z_edge, DX, DX, surface_albedo=0.1)


def shadow_centre(direct, clear):
    """Deficit-weighted centre of a 1D shadow [cells], on the circle (periodic domain)."""
    deficit = clear - direct
    n = deficit.size
    angle = 2.0 * math.pi * np.arange(n) / n
    centre = math.atan2((deficit * np.sin(angle)).sum(), (deficit * np.cos(angle)).sum())
    return (centre % (2.0 * math.pi)) * n / (2.0 * math.pi)


@pytest.mark.parametrize("azimuth, along, expected", [
    # Cloud centre x = 650 m; shadow centre displaced by H tan(theta0) = 1250 m along the beam
    # azimuth, H = 1250 m the mid-height of the cloud layer, theta0 = 45 deg (geometry, common practice).
    (0.0, "x", (650.0 + 1250.0) / DX - 0.5),
    (180.0, "x", ((650.0 - 1250.0) % 4000.0) / DX - 0.5),      # wraps across the periodic boundary
    (90.0, "y", (650.0 + 1250.0) / DX - 0.5),
])
def test_shadow_moves_by_height_times_tan_zenith_along_the_beam(azimuth, along, expected):
    nx, ny = (40, 4) if along == "x" else (4, 40)
    scene = bar_cloud(nx=nx, ny=ny, along=along)
    corrections = TiltedIndependentColumn().corrections(scene, 45.0, azimuth)
    vertical = two_stream_fluxes(scene, 45.0, azimuth, tilted=False)
    direct = vertical["surface_downward_direct_flux"] + corrections["surface_downward_direct_flux"]
    line = direct[0] if along == "x" else direct[:, 0]
    vertical_line = vertical["surface_downward_direct_flux"][0] if along == "x" else \
        vertical["surface_downward_direct_flux"][:, 0]
    clear = math.exp(-3 * 1e-7 * 2000.0 / math.cos(math.radians(45.0)))
    assert shadow_centre(line, clear) == pytest.approx(expected, abs=0.5)
    assert shadow_centre(vertical_line, clear) == pytest.approx(6.0, abs=0.5)   # ICA: right under the cloud
    # The shadow is as long as the cloud's slant extent: 300 m + 500 m tan(45 deg) (geometry).
    assert np.count_nonzero(line < 0.5 * clear) == pytest.approx(8, abs=1)


def test_horizontally_uniform_scene_needs_no_correction():
    # Varnai and Davies (1999): tilting changes nothing when the columns are all alike.
    ext = np.full((3, 5, 6), 0.01)
    scene = make_scene(ext, 0.99, 0.8, [0.0, 300.0, 700.0, 1000.0], DX, DX, surface_albedo=0.3)
    corrections = TiltedIndependentColumn().corrections(scene, 60.0, 33.0)
    for name, value in corrections.items():
        assert np.allclose(value, 0.0, atol=1e-12), name


def test_tilted_fluxes_conserve_energy_over_the_domain():
    # Each tilted column conserves energy and the mapping keeps domain sums (energy
    # conservation, common practice): reflected + absorbed + surface-absorbed = 1 on average.
    rng = np.random.default_rng(4)
    ext = np.where(rng.random((4, 10, 12)) > 0.7, 0.03, 1e-5)
    scene = make_scene(ext, 0.95, 0.85, [0.0, 500.0, 1000.0, 1500.0, 2000.0], DX, DX, surface_albedo=0.2)
    f = two_stream_fluxes(scene, 50.0, 120.0, tilted=True)
    balance = (f["toa_upward_flux"] + f["atmosphere_absorption"]
               + 0.8 * (f["surface_downward_direct_flux"] + f["surface_downward_diffuse_flux"]))
    assert balance.mean() == pytest.approx(1.0, abs=1e-10)
