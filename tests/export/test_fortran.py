"""The generated Fortran module compiles as standard Fortran 2008 and matches Python.

References: the Python runtime and the scikit-learn estimators (Pedregosa et al.
2011); gfortran's -std=f2008 conformance checks.  Decimal numbers with 17 significant
digits read back to the same double (IEEE 754-2008, section 5.12.2), so the Fortran
coefficients equal the Python ones exactly.
"""

import shutil
import subprocess

import numpy as np
import pytest

from surrogate3d.errors import ValidationError
from surrogate3d.export.fortran import features_file_text, fortran_name, fortran_sources
from surrogate3d.export import read_coefficients

GFORTRAN = shutil.which("gfortran")
needs_gfortran = pytest.mark.skipif(GFORTRAN is None, reason="gfortran is not installed (make test installs "
                                                              "Debian's gfortran)")
FLAGS = ["-std=f2008", "-Wall", "-Werror", "-O2"]


@pytest.fixture(scope="module")
def drivers(built, tmp_path_factory):
    """Compiled driver of each model (module and driver built in a scratch directory)."""
    if GFORTRAN is None:
        pytest.skip("gfortran is not installed (make test installs Debian's gfortran)")
    source = built["export_dir"] / "fortran"
    out = {}
    for name in ("ridge", "boosted"):
        work = tmp_path_factory.mktemp(f"fortran_{name}")
        for f in (f"{name}_correction.f90", f"{name}_correction_driver.f90"):
            shutil.copy(source / f, work / f)
        result = subprocess.run([GFORTRAN, *FLAGS, f"{name}_correction.f90", f"{name}_correction_driver.f90",
                                 "-o", "driver"], cwd=work, capture_output=True, text=True)
        assert result.returncode == 0, result.stderr
        out[name] = work / "driver"
    return out


def _run(driver, coefficients, features):
    result = subprocess.run([str(driver), str(coefficients), str(features)], capture_output=True, text=True)
    assert result.returncode == 0, result.stderr
    return np.array([[float(v) for v in line.split()] for line in result.stdout.splitlines()])


@needs_gfortran
@pytest.mark.parametrize("name", ["ridge", "boosted"])
def test_fortran_matches_python(built, run, drivers, name):
    fortran = built["export_dir"] / "fortran"
    got = _run(drivers[name], fortran / f"{name}.coefficients.txt", fortran / f"{name}_sample_features.txt")
    expected = np.loadtxt(fortran / f"{name}_sample_corrections.txt")
    features = np.loadtxt(fortran / f"{name}_sample_features.txt", skiprows=1)
    assert got.shape == expected.shape == (features.shape[0], 5)
    scale = np.abs(expected).max(axis=0)
    # Required: 1e-10 relative in double precision (trees: the same additions in the same order).
    assert (np.abs(got - expected) / scale).max() <= 1e-10
    estimator = run.models[name].estimator.predict(features)
    assert (np.abs(got - estimator) / scale).max() <= 1e-10
    if name == "boosted":
        np.testing.assert_array_equal(got, estimator)


@needs_gfortran
def test_fortran_routes_missing_values(built, run, drivers, tmp_path):
    # NaN follows each node's missing-value direction, as in scikit-learn.
    fortran = built["export_dir"] / "fortran"
    features = np.loadtxt(fortran / "boosted_sample_features.txt", skiprows=1)
    rng = np.random.default_rng(0)
    features[rng.uniform(size=features.shape) < 0.3] = np.nan
    (tmp_path / "nan.txt").write_text(features_file_text(features))
    got = _run(drivers["boosted"], fortran / "boosted.coefficients.txt", tmp_path / "nan.txt")
    expected = np.column_stack([r.predict(features) for r in run.models["boosted"].estimator.estimators_])
    np.testing.assert_array_equal(got, expected)


@needs_gfortran
def test_fortran_reports_bad_data_files(built, drivers, tmp_path):
    fortran = built["export_dir"] / "fortran"
    features = fortran / "boosted_sample_features.txt"
    result = subprocess.run([str(drivers["boosted"]), str(fortran / "ridge.coefficients.txt"), str(features)],
                            capture_output=True, text=True)
    assert result.returncode != 0 and 'expected "kind boosted", found "kind ridge"' in result.stderr
    text = (fortran / "boosted.coefficients.txt").read_text().splitlines()
    first_feature = text.index("features") + 1
    text[first_feature] = "slant_optical_depth"
    (tmp_path / "renamed.txt").write_text("\n".join(text) + "\n")
    result = subprocess.run([str(drivers["boosted"]), str(tmp_path / "renamed.txt"), str(features)],
                            capture_output=True, text=True)
    assert result.returncode != 0 and 'features entry 1 is "slant_optical_depth"' in result.stderr
    text = (fortran / "boosted.coefficients.txt").read_text().replace("surrogate3d-correction-coefficients 1.0",
                                                                       "surrogate3d-correction-coefficients 2.0")
    (tmp_path / "v2.txt").write_text(text)
    result = subprocess.run([str(drivers["boosted"]), str(tmp_path / "v2.txt"), str(features)],
                            capture_output=True, text=True)
    assert result.returncode != 0 and "this module reads major version 1" in result.stderr


@needs_gfortran
def test_driver_timing_mode(built, drivers):
    fortran = built["export_dir"] / "fortran"
    result = subprocess.run([str(drivers["ridge"]), str(fortran / "ridge.coefficients.txt"),
                             str(fortran / "ridge_sample_features.txt"), "3"], capture_output=True, text=True)
    assert result.returncode == 0 and result.stdout.startswith("columns_per_second ")


def test_generated_names_and_layout(built):
    assert fortran_name("Boosted-2") == "boosted_2" and fortran_name("3d") == "m_3d"
    document = read_coefficients(built["export_dir"] / "boosted.coefficients.json")
    sources = fortran_sources(document)
    module = sources["boosted_correction.f90"]
    assert "module boosted_correction" in module and "pure subroutine boosted_correct_columns" in module
    for name in document["features"]["names"]:
        assert f'"{name}"' in module
    document["features"]["names"][0] = "x" * 140
    with pytest.raises(ValidationError, match="longer than 132 characters"):
        fortran_sources(document)
