"""Scene pictures: a PNG is written atomically, with checked arguments."""

import numpy as np
import pytest

from surrogate3d.errors import ParameterError
from surrogate3d.scenes.generator import generate_scene
from surrogate3d.scenes.plotting import plot_scene

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # PNG specification (W3C 2003), section 5.2


@pytest.fixture(scope="module")
def scene():
    return generate_scene("scattered_cumulus", 1, nx=16, ny=12, nz=10)


def test_writes_a_png_and_nothing_else(tmp_path, scene):
    path = plot_scene(scene, tmp_path / "scene.png", row=3, band="near_infrared")
    assert path.read_bytes()[:8] == PNG_SIGNATURE
    assert [p.name for p in tmp_path.iterdir()] == ["scene.png"]


def test_clear_scene_and_non_uniform_levels_draw(tmp_path):
    clear = generate_scene("clear", 0, nx=4, ny=4, nz=3)
    assert plot_scene(clear, tmp_path / "clear.png").stat().st_size > 1000
    stretched = generate_scene("overcast", 0, nx=8, ny=8, z_edge=np.array([0, 200, 400, 600, 800, 1000, 2000, 4000.0]))
    assert plot_scene(stretched, tmp_path / "stretched.png", band=1).stat().st_size > 1000


@pytest.mark.parametrize("kwargs, message", [
    ({"row": 12}, "row must be an integer in [0, 11]"),
    ({"row": -1}, "row must be an integer in [0, 11]"),
    ({"band": "ultraviolet"}, "band 'ultraviolet' is not in the scene; it has visible, near_infrared"),
    ({"band": 5}, "band index must be an integer in [0, 1]"),
])
def test_bad_arguments_name_the_parameter(tmp_path, scene, kwargs, message):
    with pytest.raises(ParameterError) as err:
        plot_scene(scene, tmp_path / "x.png", **kwargs)
    assert message in str(err.value)
    assert not list(tmp_path.iterdir())
