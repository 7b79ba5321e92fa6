"""``surrogate3d export`` on a local parser: files written, errors named (common practice for CLIs)."""

import argparse

import pytest

from surrogate3d.errors import FormatError, ParameterError, ValidationError
from surrogate3d.export.commands import register
from surrogate3d.runtime import load_coefficients


def _parse(argv):
    parser = argparse.ArgumentParser(prog="surrogate3d")
    register(parser.add_subparsers(dest="command"))
    return parser.parse_args(argv)


def test_export_one_model_with_fortran(built, tmp_path, capsys):
    out = tmp_path / "out"
    args = _parse(["export", str(built["model_dir"]), "--out", str(out), "--model", "ridge", "--fortran",
                   "--report", str(built["report_dir"]), "--sample-columns", "5"])
    args.func(args)
    printed = capsys.readouterr().out
    assert "ridge: ridge.coefficients.nc" in printed and f"wrote {out}" in printed
    assert sorted(p.name for p in out.iterdir()) == ["fortran", "ridge.coefficients.json", "ridge.coefficients.nc"]
    assert (out / "fortran" / "ridge_sample_features.txt").read_text().startswith("5 ")
    assert load_coefficients(out / "ridge.coefficients.json").document["skill"] is not None
    # The drop-in host interface of a column model of all five targets, and its halo statement.
    assert "host interface: ridge_features.f90, ridge_host.f90, ridge_host_driver.f90, ridge_halo.md" in printed
    assert "| `cloud_fraction` | its own column | 0, 0 |" in (out / "fortran" / "ridge_halo.md").read_text()


def test_export_all_models_quietly(built, tmp_path, capsys):
    args = _parse(["export", str(built["model_dir"]), "--out", str(tmp_path), "--quiet"])
    args.func(args)
    assert capsys.readouterr().out == ""
    assert {p.name for p in tmp_path.iterdir()} == {f"{m}.coefficients.{s}" for m in ("ridge", "boosted", "profile")
                                                    for s in ("nc", "json")}


@pytest.mark.parametrize("extra, error, message", [
    (["--model", "forest"], ValidationError, r"has no model 'forest'; it has \['boosted', 'profile', 'ridge'\]"),
    (["--sample-columns", "0"], ParameterError, "--sample-columns must be an integer >= 1; got 0"),
    (["--report", "/nonexistent/report"], FormatError, "has no metrics.csv"),
    (["--fortran", "--pairs", "/nonexistent/pairs.nc"], FormatError, "pairs file '/nonexistent/pairs.nc'"),
], ids=["unknown-model", "sample-columns", "report", "pairs"])
def test_export_errors(built, tmp_path, extra, error, message):
    args = _parse(["export", str(built["model_dir"]), "--out", str(tmp_path), *extra])
    with pytest.raises(error, match=message):
        args.func(args)


def test_missing_model_directory_and_arguments(tmp_path):
    args = _parse(["export", str(tmp_path / "nothing"), "--out", str(tmp_path)])
    with pytest.raises(FormatError, match="does not exist"):
        args.func(args)
    with pytest.raises(SystemExit):
        _parse(["export", str(tmp_path)])                     # --out is required
