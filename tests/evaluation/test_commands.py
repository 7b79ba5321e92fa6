"""``surrogate3d evaluate`` through the real command line: success and one-line errors."""

import json
import shutil

import pytest

from surrogate3d import cli
from surrogate3d.archive import write_dataset


@pytest.fixture
def main():
    return cli.main


def _error_line(capsys):
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith("surrogate3d evaluate: error:")
    return err[0]


def test_evaluate_command(report_run):
    status, out = report_run
    assert status == 0
    summary = json.loads((out / "summary.json").read_text())
    assert summary["consistency"] is True and summary["pairs_matches_training"] is True
    assert summary["evaluation_sets"]["held-out scenes"] > 0


def test_other_format_version(main, model_dir, pairs_file, tmp_path, capsys):
    copy = tmp_path / "models"
    shutil.copytree(model_dir, copy)
    record = json.loads((copy / "training.json").read_text())
    record["format_version"] = "0.3"
    (copy / "training.json").write_text(json.dumps(record))
    assert main(["evaluate", str(copy), str(pairs_file), "--out", str(tmp_path / "r"), "--quiet"]) == 1
    assert "format_version 0.3" in _error_line(capsys)


def test_missing_model_files(main, model_dir, pairs_file, tmp_path, capsys):
    copy = tmp_path / "models"
    shutil.copytree(model_dir, copy)
    (copy / "ridge" / "model.json").unlink()
    assert main(["evaluate", str(copy), str(pairs_file), "--out", str(tmp_path / "r"), "--quiet"]) == 1
    line = _error_line(capsys)
    assert "model.json" in line and "does not exist" in line
    assert main(["evaluate", str(tmp_path / "nowhere"), str(pairs_file), "--out", str(tmp_path / "r"),
                 "--quiet"]) == 1
    assert "does not exist" in _error_line(capsys)


def test_pairs_file_missing_a_feature(main, model_dir, synthetic_pairs, tmp_path, capsys):
    path = write_dataset(synthetic_pairs.drop_sel(feature=["cloud_optical_depth"]), tmp_path / "fewer.nc")
    assert main(["evaluate", str(model_dir), str(path), "--out", str(tmp_path / "r"), "--quiet"]) == 1
    assert "lacks features ['cloud_optical_depth']" in _error_line(capsys)


def test_negative_option(main, model_dir, pairs_file, tmp_path, capsys):
    assert main(["evaluate", str(model_dir), str(pairs_file), "--out", str(tmp_path / "r"), "--map-scenes",
                 "-1"]) == 1
    assert "--map-scenes" in _error_line(capsys)
