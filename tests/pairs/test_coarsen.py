"""Coarse-graining to host columns: conservation of domain means, hand counts, errors."""

import numpy as np
import pytest

from surrogate3d.core.data_model import COLUMN_FLUXES
from surrogate3d.core.run_result import stderr_name
from surrogate3d.errors import ParameterError
from surrogate3d.pairs.coarsen import (allowed_host_resolutions, block_mean, coarsen_result, edge_length_density,
                                       host_factors, scene_host_fields)
from surrogate3d.pairs.host_fields import assemble_host_fields
from surrogate3d.scenes import make_scene


def test_host_fields_conserve_domain_means(make_block_scene):
    # Block means of equal-area blocks keep the domain mean (common practice).
    scene = make_block_scene()
    fine = scene_host_fields(scene, 100.0)
    for resolution in (200.0, 400.0, 800.0):
        host = scene_host_fields(scene, resolution)
        for key in ("layer_cloud_fraction", "layer_optical_depth", "surface_albedo", "total_cloud_fraction",
                    "column_optical_depth_mean", "cloud_edge_length"):
            assert np.allclose(host[key].mean(axis=(-2, -1)), fine[key].mean(axis=(-2, -1))), key
        assert host["dx"] == resolution and np.array_equal(host["z_edge"], scene["z_edge"].values)


def test_host_fields_by_hand(make_block_scene):
    # Cell counts and perimeters of a box cloud, worked out by hand (geometry).
    scene = make_block_scene()                  # cloud in layers 1-2, rows 2-3, columns 2-4, 100 m cells
    host = scene_host_fields(scene, 400.0)       # 2 x 2 host columns of 4 x 4 cells
    assert host["layer_cloud_fraction"][1].tolist() == [[4 / 16, 2 / 16], [0.0, 0.0]]
    assert host["total_cloud_fraction"].tolist() == [[4 / 16, 2 / 16], [0.0, 0.0]]
    # Column optical depth 0.02 m-1 x 1000 m of cloud (+ the faint clear air).
    tau_cloud = 0.02 * 1000.0 + 1e-6 * 1000.0
    assert host["column_optical_depth_mean"][0, 1] == pytest.approx((2 * tau_cloud + 14 * 2e-3) / 16)
    # Perimeter of a 3 x 2 cell block: 2 (300 m + 200 m) = 1000 m over a 800 m x 800 m domain.
    assert host["cloud_edge_length"].mean() == pytest.approx(1000.0 / 640000.0)
    density = edge_length_density(np.pad(np.ones((1, 1), bool), ((0, 2), (0, 2))), 100.0, 50.0)
    assert density.sum() * 100.0 * 50.0 == pytest.approx(2 * (100.0 + 50.0))


def test_fluxes_and_standard_errors_of_the_mean(make_block_scene, make_result):
    scene = make_block_scene()
    result = make_result(scene, "independent_column", 30.0, 0.0, np.random.default_rng(1))
    fy, fx = host_factors(scene, 400.0)
    out = coarsen_result(result, fy, fx)
    for flux in COLUMN_FLUXES:
        assert out[flux].mean() == pytest.approx(float(result[flux].mean()))
    constant = result.copy()
    constant["toa_upward_flux_standard_error"][:] = 0.04
    out = coarsen_result(constant, fy, fx)
    # Mean of n independent values: standard error se / sqrt(n) (common practice).
    assert np.allclose(out[stderr_name("toa_upward_flux")], 0.04 / 4.0)
    assert np.allclose(out["surface_downward_flux"],
                       out["surface_downward_direct_flux"] + out["surface_downward_diffuse_flux"])


def test_host_fields_add_sun_and_independent_column_fluxes(make_block_scene, make_result):
    scene = make_block_scene()
    result = make_result(scene, "independent_column", 30.0, 45.0, np.random.default_rng(1))
    fields = assemble_host_fields(scene, result, 200.0)
    assert fields["solar_zenith_angle"] == 30.0 and fields["solar_beam_azimuth"] == 45.0
    assert np.allclose(fields["independent_column_toa_upward_flux"], block_mean(result["toa_upward_flux"], 2, 2))


def test_bad_host_resolution_names_the_allowed_values(make_block_scene):
    scene = make_block_scene()
    assert allowed_host_resolutions(8, 8, 100.0, 100.0) == [100.0, 200.0, 400.0, 800.0]
    for bad in (300.0, 150.0, 1600.0, -100.0, float("nan"), "wide"):
        with pytest.raises(ParameterError, match=r"host_resolution .*allowed values \[m\]: 100, 200, 400, 800"):
            host_factors(scene, bad)
    rect = make_scene(np.full((1, 6, 4), 1e-5), 0.9, 0.5, [0.0, 100.0], 100.0, 50.0)
    assert allowed_host_resolutions(4, 6, 100.0, 50.0) == [100.0]
    assert host_factors(rect, 100.0) == (2, 1)
