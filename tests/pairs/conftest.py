"""Small hand-made scenes and fake run results for the pair-stage tests."""

import shutil
from pathlib import Path

import numpy as np
import pytest

from surrogate3d.archive import insert_result, make_run_result, write_scene
from surrogate3d.core.data_model import COLUMN_FLUXES
from surrogate3d.scenes import make_scene

METADATA = {"run_photons": 1000, "run_seed": 1, "run_scattering_events": 10, "run_wall_time": 0.1, "run_solar_constant": 1361.0,
            "run_package_version": "test"}


def block_cloud_scene(nx=8, ny=8, nz=4, dx=100.0, regime="test", seed=3, cloud=(slice(1, 3), slice(2, 4), slice(2, 5))):
    """A clear atmosphere with one box of cloud (liquid water marks the cloudy cells)."""
    ext = np.full((nz, ny, nx), 1e-6)
    lwc = np.zeros((nz, ny, nx))
    ext[cloud] = 0.02
    lwc[cloud] = 1e-4
    z_edge = np.linspace(0.0, 2000.0, nz + 1)
    return make_scene(ext, 0.999, 0.85, z_edge, dx, dx, surface_albedo=0.2, liquid_water_content=lwc,
                      attrs={"regime": regime, "seed": seed})


def fake_result(scene, solver, zenith, azimuth, rng, level=0.5):
    """A run result with random fluxes near ``level`` and small standard errors."""
    ny, nx, nz = scene.sizes["y"], scene.sizes["x"], scene.sizes["z"]
    fluxes = {f: level + 0.1 * rng.random((ny, nx)) for f in COLUMN_FLUXES}
    errors = {f: 0.01 * rng.random((ny, nx)) for f in COLUMN_FLUXES}
    return make_run_result(fluxes, errors, np.zeros((nz, ny, nx)), solver=solver, solar_zenith_angle=zenith,
                           solar_beam_azimuth=azimuth, metadata=METADATA)


@pytest.fixture
def make_block_scene():
    """Factory of :func:`block_cloud_scene` scenes."""
    return block_cloud_scene


@pytest.fixture(scope="session")
def make_result():
    """Factory of :func:`fake_result` run results."""
    return fake_result


@pytest.fixture(scope="session")
def archive_template(tmp_path_factory):
    """An archive of two scenes: both results at two suns, plus one sun with only the 3D result."""
    rng = np.random.default_rng(0)
    directory = tmp_path_factory.mktemp("template") / "archive"
    directory.mkdir()
    for i in range(2):
        scene = block_cloud_scene(seed=i)
        for zenith, azimuth in ((30.0, 0.0), (60.0, 90.0)):
            for solver, level in (("full_3d", 0.5), ("independent_column", 0.4)):
                scene = insert_result(scene, fake_result(scene, solver, zenith, azimuth, rng, level))
        scene = insert_result(scene, fake_result(scene, "full_3d", 45.0, 10.0, rng))
        write_scene(scene, directory / f"scene{i}.nc")
    return directory


@pytest.fixture
def archive(archive_template, tmp_path):
    """A private copy of :func:`archive_template` that a test may change."""
    return Path(shutil.copytree(archive_template, tmp_path / "archive"))
