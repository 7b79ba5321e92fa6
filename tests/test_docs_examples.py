"""The worked examples of docs/ run and give what the documents say."""

import importlib.util
import json
from pathlib import Path

import numpy as np

from surrogate3d.archive import completed, read_scene, select_result
from surrogate3d.cli import main

EXAMPLES = Path(__file__).resolve().parents[1] / "docs" / "examples"


def _load(name):
    spec = importlib.util.spec_from_file_location(name, EXAMPLES / f"{name}.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def test_bring_your_own_example_converts_and_builds_pairs(tmp_path, capsys):
    example = _load("bring_your_own")
    # Sun in the south: the beam travels north (+y, 90 deg); sun in the east: it travels west (180 deg).
    assert example.beam_azimuth_from_sun_position(180.0) == 90.0
    assert example.beam_azimuth_from_sun_position(90.0) == 180.0
    archive = example.main(tmp_path)
    scene = read_scene(archive / "bubble_clouds_00000.nc")
    assert len(completed(scene)) == 4
    run = select_result(scene, "full_3d", 20.0, 90.0)
    # Energy balance of the converted 3D run over the periodic domain (conservation; it holds
    # in expectation, and the noise of a 40 000-photon domain mean is a few 1e-5).
    balance = (run.toa_upward_flux + run.atmosphere_absorption + run.surface_downward_direct_flux
               + run.surface_downward_diffuse_flux - run.surface_upward_flux).mean()
    assert abs(float(balance) - 1.0) < 1e-3
    assert main(["pairs", str(archive), "--out", str(tmp_path / "pairs.nc"), "--host-resolution", "500",
                 "--quiet"]) == 0
    assert (tmp_path / "pairs.nc").is_file()
    assert np.isfinite(run.toa_upward_flux.values).all()

    # docs/bring-your-own-benchmarks.md, "Checking the shipped model": the shipped model
    # scored on the converted benchmarks at its 1 km host resolution.
    pairs = tmp_path / "pairs-1km.nc"
    repo = Path(__file__).resolve().parents[1]
    assert main(["pairs", str(archive), "--out", str(pairs), "--host-resolution", "1000", "--recipe",
                 str(repo / "training" / "features.toml"), "--quiet"]) == 0
    shipped = repo / "models" / "default" / "boosted.coefficients.json"
    assert main(["score", str(shipped), str(pairs), "--out", str(tmp_path / "score"), "--quiet"]) == 0
    summary = json.loads((tmp_path / "score" / "summary.json").read_text())
    assert summary["evaluation_sets"]["scored samples"] == 32          # 4 x 4 host columns x 2 suns
    assert {"boosted | surface_downward_flux", "tilted independent column | surface_downward_flux"} \
        <= set(summary["skill"]["scored samples"])
    assert (tmp_path / "score" / "report.html").is_file() and (tmp_path / "score" / "envelope.csv").is_file()
