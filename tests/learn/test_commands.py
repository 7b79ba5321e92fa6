"""``surrogate3d train`` through the real command line: success and one-line errors."""

import pytest

from surrogate3d import cli
from surrogate3d.archive import write_dataset


@pytest.fixture
def main():
    return cli.main


def test_train_command(main, pairs_file, recipe_file, tmp_path, capsys):
    recipe_file.write_text(recipe_file.read_text().replace('held_out_regime = "dense"\n', ""))
    out = tmp_path / "models"
    assert main(["train", str(pairs_file), "--recipe", str(recipe_file), "--out", str(out)]) == 0
    assert "cross-validated skill" in capsys.readouterr().out
    assert (out / "training.json").is_file() and not (out / "transfer").exists()


def _error_line(capsys):
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith("surrogate3d train: error:")
    return err[0]


def test_pairs_file_missing_a_feature(main, synthetic_pairs, recipe_file, tmp_path, capsys):
    path = write_dataset(synthetic_pairs.drop_sel(feature=["upsun_cloud_fraction"]), tmp_path / "fewer.nc")
    recipe_file.write_text(recipe_file.read_text().replace(
        'features = "all"', 'features = ["cloud_fraction", "upsun_cloud_fraction"]'))
    assert main(["train", str(path), "--recipe", str(recipe_file), "--out", str(tmp_path / "m"), "--quiet"]) == 1
    assert "lacks features ['upsun_cloud_fraction']" in _error_line(capsys)


@pytest.mark.parametrize("edit, words", [
    (('kind = "boosted"', 'kind = "neural"'), ["kind", "'neural'"]),
    (("min_samples_leaf = 10", "min_samples_leaf = 0"), ["min_samples_leaf", "an integer >= 1"]),
    (('features = "all"', 'features = ["cloud_fraction", "rain_rate"]'), ["rain_rate"]),
])
def test_bad_recipe(main, pairs_file, recipe_file, tmp_path, capsys, edit, words):
    recipe_file.write_text(recipe_file.read_text().replace(*edit))
    assert main(["train", str(pairs_file), "--recipe", str(recipe_file), "--out", str(tmp_path / "m"),
                 "--quiet"]) == 1
    line = _error_line(capsys)
    for word in words:
        assert word in line
    assert not (tmp_path / "m" / "training.json").exists()


def test_unreadable_pairs_file(main, recipe_file, tmp_path, capsys):
    bad = tmp_path / "bad.nc"
    bad.write_text("not netcdf")
    assert main(["train", str(bad), "--recipe", str(recipe_file), "--out", str(tmp_path / "m"), "--quiet"]) == 1
    assert "bad.nc" in _error_line(capsys)
