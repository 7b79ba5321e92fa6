"""Coefficient files: NetCDF and JSON twin hold the same document, compactly, with provenance.

References: the trained estimators (scikit-learn, Pedregosa et al. 2011) for the
arrays; the size limits of the export issue (ridge <= 20 KB, tree ensemble <= 250 KB,
common practice for files shipped with host-model code).
"""

import json
import math

import numpy as np
import pytest

from surrogate3d.archive import open_dataset, write_dataset
from surrogate3d.errors import FormatError, ValidationError
from surrogate3d.export import build_document, read_coefficients
from surrogate3d.export.coefficients import coefficient_json_text, skill_table, write_coefficients
from surrogate3d.learn import load_model


def _assert_same_document(a, b):
    assert a.keys() == b.keys()
    kind = a["model"]["kind"]
    for key in a:
        if key in (kind, "training_envelope"):
            assert a[key].keys() == b[key].keys()
            for name, array in a[key].items():
                if isinstance(array, np.ndarray):
                    assert array.dtype == b[key][name].dtype, name
                    np.testing.assert_array_equal(array, b[key][name])
                else:
                    assert type(array) is type(b[key][name]) and array == b[key][name], name
        else:
            assert a[key] == b[key], key


@pytest.mark.parametrize("name", ["ridge", "boosted"])
def test_netcdf_and_json_hold_the_same_document(built, name):
    netcdf = read_coefficients(built["export_dir"] / f"{name}.coefficients.nc")
    twin = read_coefficients(built["export_dir"] / f"{name}.coefficients.json")
    _assert_same_document(netcdf, twin)
    fresh = build_document(load_model(built["model_dir"] / name), built["report_dir"])
    _assert_same_document(fresh, twin)
    # Writing the document again gives the same bytes: exports are reproducible.
    assert coefficient_json_text(fresh) == (built["export_dir"] / f"{name}.coefficients.json").read_text()


def test_document_content(built, run, helpers):
    document = read_coefficients(built["export_dir"] / "boosted.coefficients.json")
    card = run.models["boosted"].card
    assert document["model"]["hyperparameters"] == card["hyperparameters"]
    assert document["features"]["names"] == card["feature_names"]
    gate = document["clear_sky_gate"]
    assert [document["features"]["names"][k] for k in gate["feature_indices"]] == helpers.GATE
    assert gate["tolerance"] == run.models["boosted"].estimator.clear_sky_tolerance_ == 1e-9
    assert document["feature_recipe"]["parameters"]["neighbour_radii"] == [1000.0]
    provenance = document["provenance"]
    for key in ("archive_fingerprint", "pairs_sha256", "recipe_text", "package_version", "training_scenes"):
        assert provenance[key] == card["provenance"][key], key
    assert len(provenance["estimator_sha256"]) == 64
    skill = document["skill"]
    assert {row[skill["columns"].index("predictor")] for row in skill["rows"]} == {"boosted"}
    assert "breakdown" not in skill["columns"] and isinstance(skill["rows"][0][skill["columns"].index("skill")], float)


def test_sizes_within_limits(built):
    limits = {"ridge": 20_000, "boosted": 250_000}
    for name, limit in limits.items():
        for suffix in ("json", "nc"):
            assert (built["export_dir"] / f"{name}.coefficients.{suffix}").stat().st_size <= limit, (name, suffix)
    # The tree twin stores ~8 bytes or less per node value and threshold (packed, compressed).
    document = read_coefficients(built["export_dir"] / "boosted.coefficients.json")
    n_node = document["boosted"]["feature"].size
    assert (built["export_dir"] / "boosted.coefficients.json").stat().st_size < 12 * n_node + 8192


def test_skill_table_rows(tmp_path, helpers):
    report = helpers.write_metrics(tmp_path / "report", predictors=("ridge", "ridge (trained without dense)",
                                                                            "boosted"))
    table = skill_table(report, "ridge")
    predictors = {row[table["columns"].index("predictor")] for row in table["rows"]}
    assert predictors == {"ridge", "ridge (trained without dense)"}
    assert {row[table["columns"].index("units")] for row in table["rows"]} == {"W m-2"}   # the headline skill
    group_value = helpers.METRICS_HEADER.split(",").index("group_value")
    assert group_value >= 0 and "group_value" not in table["columns"]
    with pytest.raises(ValidationError, match=r"no rows of model 'forest'; its predictors are \['boosted'"):
        skill_table(report, "forest")
    with pytest.raises(FormatError, match="has no metrics.csv"):
        skill_table(tmp_path, "ridge")
    (report / "metrics.csv").write_text("a,b\n1,2\n")
    with pytest.raises(FormatError, match="lacks the columns"):
        skill_table(report, "ridge")


def test_netcdf_errors(tmp_path, built):
    ds = open_dataset(built["export_dir"] / "ridge.coefficients.nc")
    changed = ds.copy()
    changed.attrs["format_version"] = "3.1"
    write_dataset(changed, tmp_path / "v3.coefficients.nc")
    with pytest.raises(FormatError, match="format_version '3.1'"):
        read_coefficients(tmp_path / "v3.coefficients.nc")
    write_dataset(ds.drop_vars("ridge_intercept"), tmp_path / "lacking.coefficients.nc")
    with pytest.raises(FormatError, match=r"lacks variables \['ridge_intercept'\]"):
        read_coefficients(tmp_path / "lacking.coefficients.nc")
    changed = ds.copy()
    changed.attrs["provenance"] = "{not json"
    write_dataset(changed, tmp_path / "bad.coefficients.nc")
    with pytest.raises(FormatError, match="attribute 'provenance' is not valid JSON"):
        read_coefficients(tmp_path / "bad.coefficients.nc")
    (tmp_path / "junk.coefficients.nc").write_bytes(b"not netcdf")
    with pytest.raises(FormatError, match="not a NetCDF-4 file"):
        read_coefficients(tmp_path / "junk.coefficients.nc")


def test_models_without_a_valid_recipe_are_refused(built):
    trained = load_model(built["model_dir"] / "ridge")
    trained.card = json.loads(json.dumps(trained.card))
    trained.card["feature_recipe"] = {"features": [{"name": "cloud_fraction", "parameters": {}}]}
    with pytest.raises(FormatError, match="not a valid feature recipe"):
        build_document(trained)
    trained.card["feature_recipe"] = {"features": ["cloud_fraction"]}
    with pytest.raises(FormatError, match="are not columns of its feature recipe"):
        build_document(trained)


def test_no_report_means_no_skill_table(built):
    document = build_document(load_model(built["model_dir"] / "ridge"))
    assert document["skill"] is None
    assert json.loads(coefficient_json_text(document))["skill"] is None
    assert math.isfinite(document["ridge"]["coef"].sum())


def test_netcdf_is_classic_and_holds_empty_arrays(built, tmp_path):
    # Classic NetCDF with 64-bit offsets starts with the bytes "CDF" and version 2 (the
    # NetCDF classic format specification, Unidata, common practice).
    assert (built["export_dir"] / "ridge.coefficients.nc").read_bytes()[:4] == b"CDF\x02"
    document = read_coefficients(built["export_dir"] / "ridge.coefficients.json")
    n_feature = len(document["features"]["names"])
    document["ridge"]["interaction_pairs"] = document["ridge"]["interaction_pairs"][:0]
    document["ridge"]["coef"] = np.ascontiguousarray(document["ridge"]["coef"][:, :n_feature])
    netcdf, twin = write_coefficients(document, tmp_path, stem="linear")
    _assert_same_document(read_coefficients(netcdf), read_coefficients(twin))
    assert read_coefficients(netcdf)["ridge"]["interaction_pairs"].shape == (0, 2)


def test_files_without_a_gate_round_trip(built, tmp_path):
    # Files of format 1.0 carry no clear_sky_gate: both forms read back without one.
    document = read_coefficients(built["export_dir"] / "boosted.coefficients.json")
    del document["clear_sky_gate"]
    netcdf, twin = write_coefficients(document, tmp_path, stem="ungated")
    for path in (netcdf, twin):
        assert "clear_sky_gate" not in read_coefficients(path)
    assert "clear_sky_gate" not in open_dataset(netcdf, what="coefficient file").attrs
