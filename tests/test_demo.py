"""`surrogate3d demo --quick`: the whole pipeline end to end, and a second run reusing it."""

import json

import pytest

from surrogate3d.cli import main


@pytest.fixture(scope="module")
def demo_dir(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo")
    assert main(["demo", "--out", str(out), "--quick", "--quiet"]) == 0
    return out


def test_every_stage_writes_its_output(demo_dir):
    assert len(list((demo_dir / "archive").glob("*.nc"))) == 6
    assert (demo_dir / "pairs.nc").is_file()
    training = json.loads((demo_dir / "models" / "training.json").read_text())
    assert set(training["models"]) == {"ridge", "boosted"}
    assert training["split"]["held_out_scenes"]
    page = (demo_dir / "report" / "report.html").read_text()
    assert "data:image/png;base64," in page
    exported = list((demo_dir / "export").rglob("*"))
    assert any(p.suffix == ".json" for p in exported) and any(p.suffix == ".f90" for p in exported)


def test_longwave_part_writes_pairs_models_report_and_export(demo_dir):
    longwave = demo_dir / "longwave"
    training = json.loads((longwave / "models" / "training.json").read_text())
    assert training["spectrum"] == "longwave" and set(training["models"]) == {"ridge", "boosted"}
    assert "longwave 3D corrections" in (longwave / "report" / "report.html").read_text()
    coefficients = json.loads((longwave / "export" / "boosted.coefficients.json").read_text())
    assert coefficients["targets"]["units"] == "W m-2"
    assert (longwave / "export" / "fortran" / "boosted_correction.f90").is_file()
    summary = (demo_dir / "summary.md").read_text()
    assert "## longwave" in summary and "longwave_surface_downward_flux" in summary
    assert "### heating-rate profiles" in summary and training["profile_model"] == "profile"


def test_summary_compares_models_with_every_baseline(demo_dir):
    summary = (demo_dir / "summary.md").read_text()
    for name in ("no correction", "tilted independent column", "non-local independent pixel", "ridge", "boosted",
                 "held-out scenes", "left-out families"):
        assert name in summary


def test_second_run_reuses_finished_work(demo_dir, capsys):
    before = {p: p.stat().st_mtime_ns for p in demo_dir.rglob("*") if p.is_file() and p.name != "summary.md"}
    assert main(["demo", "--out", str(demo_dir), "--quick"]) == 0
    err = capsys.readouterr().err
    assert "0 generated" in err and "0 runs computed" in err
    for stage in ("pairs", "models", "report", "export"):
        assert f"reused {demo_dir / stage}" in err or f"reused {demo_dir / (stage + '.nc')}" in err
    assert "0 runs computed, 18 reused, pairs reused, models reused, report reused, export reused" in err
    after = {p: p.stat().st_mtime_ns for p in before}
    assert after == before


def test_bad_jobs_option_is_one_line_error(tmp_path, capsys):
    assert main(["demo", "--out", str(tmp_path), "--jobs", "0", "--quick"]) == 1
    assert capsys.readouterr().err.strip().count("\n") == 0


def test_pairs_of_another_format_or_resolution_are_rebuilt(tmp_path):
    import xarray as xr

    from surrogate3d.core.data_model import PAIRS_FORMAT_VERSION
    from surrogate3d.core.netcdf import write_dataset
    from surrogate3d.demo import _pairs_up_to_date
    from surrogate3d.pairs.recipe import default_recipe

    recipe = default_recipe()
    path = tmp_path / "pairs.nc"

    def stored(version, resolutions):  # written as numbers (shortwave) or JSON text (longwave)
        write_dataset(xr.Dataset(attrs={"archive_fingerprint": "abc", "feature_recipe": recipe.to_json(),
                                        "format_version": version, "host_resolutions": resolutions}), path)
        return _pairs_up_to_date(path, "abc", recipe, PAIRS_FORMAT_VERSION, [1000.0, 2000.0])

    assert stored(PAIRS_FORMAT_VERSION, [1000.0, 2000.0])
    assert not stored("0.9", [1000.0, 2000.0])
    assert not stored(PAIRS_FORMAT_VERSION, [1000.0])
    assert stored(PAIRS_FORMAT_VERSION, "[1000.0, 2000.0]") and not stored(PAIRS_FORMAT_VERSION, "not json")
    assert not _pairs_up_to_date(tmp_path / "missing.nc", "abc", recipe, PAIRS_FORMAT_VERSION, [1000.0])


def test_reports_and_exports_of_other_formats_are_made_again(demo_dir, capsys):
    # A demo directory written by a version with other file formats (say, a ridge evaluated
    # without its training-range clipping) gets its reports and exports made again.
    (demo_dir / "formats.txt").write_text("pairs 0.9, longwave pairs 0.9, models 0.9, coefficients 1.4\n")
    assert main(["demo", "--out", str(demo_dir), "--quick"]) == 0
    err = capsys.readouterr().err
    assert f"wrote {demo_dir / 'report' / 'report.html'}" in err and f"wrote {demo_dir / 'export'}" in err
    assert "report written" in err and "models reused" in err
    from surrogate3d.demo import FORMATS

    assert (demo_dir / "formats.txt").read_text() == FORMATS
