"""The shipped default correction in models/default: loads, reproduces its own sample, fits its limits,
and its Fortran files are what the generator makes of its coefficients."""

import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest

from surrogate3d.core.coefficient_file import read_coefficients
from surrogate3d.export import host_files, longwave_host_files, regenerated_fortran
from surrogate3d.runtime import load_coefficients

SHIPPED = Path(__file__).resolve().parents[1] / "models" / "default"
#: Size limits of the export issue: ridge at most 20 kB, the default tree ensembles at most 250 kB
#: (the heating-rate model is one too).
LIMITS = {"ridge": 20_000, "boosted": 250_000, "profile": 250_000}
COLUMN_TARGETS = ["surface_downward_flux", "surface_downward_direct_flux", "surface_downward_diffuse_flux",
                  "toa_upward_flux", "atmosphere_absorption"]


def _numbers(text):
    return np.array([[float(v) for v in row.split()] for row in text.splitlines() if row.strip()])


def _matrix(path, skip_header):
    text = path.read_text()
    return _numbers(text.split("\n", 1)[1] if skip_header else text)


def _same_as_generated(path, key, text):
    """Whether a committed file equals what the generator makes now.

    The sample corrections are computed by the numpy runtime, whose exp, log and power may
    differ in their last bit between processors and numpy releases (seen with numpy 2.4.6 on
    a new machine): those files are compared as numbers to 1e-12, everything else as text.
    """
    if key != "sample_corrections":
        return path.read_text() == text
    committed, regenerated = _numbers(path.read_text()), _numbers(text)
    return committed.shape == regenerated.shape and np.allclose(committed, regenerated, rtol=1e-12, atol=1e-15)


@pytest.mark.parametrize("name", sorted(LIMITS))
def test_shipped_model_reproduces_its_sample_corrections(name):
    model = load_coefficients(SHIPPED / f"{name}.coefficients.json")
    features = _matrix(SHIPPED / "fortran" / f"{name}_sample_features.txt", skip_header=True)
    expected = _matrix(SHIPPED / "fortran" / f"{name}_sample_corrections.txt", skip_header=False)
    np.testing.assert_allclose(model.predict(features, check_envelope=False), expected, rtol=1e-12, atol=1e-15)
    assert list(model.target_names) == (["layer_absorption_density"] if name == "profile" else COLUMN_TARGETS)


@pytest.mark.parametrize("name", sorted(LIMITS))
def test_shipped_fortran_is_what_the_generator_makes(name):
    # The committed module, driver and data files must not drift from the generator: a
    # host model building them would run code the tests no longer check.
    for key, (file_name, text) in regenerated_fortran(SHIPPED / f"{name}.coefficients.json",
                                                      SHIPPED / "fortran").items():
        assert _same_as_generated(SHIPPED / "fortran" / file_name, key, text), (
            f"models/default/fortran/{file_name} ({key}) differs from the generator's; refresh it with "
            f"surrogate3d.export.refresh_fortran (models/README.md)")


@pytest.mark.parametrize("name", ["ridge", "boosted"])
def test_shipped_host_interface_is_what_the_generator_makes(name):
    # The features module, the one-call host module and its driver (with the heating-rate model).
    files = host_files(read_coefficients(SHIPPED / f"{name}.coefficients.json"),
                       read_coefficients(SHIPPED / "profile.coefficients.json"))
    for file_name, text in files.items():
        assert (SHIPPED / "fortran" / file_name).read_text() == text, (
            f"models/default/fortran/{file_name} differs from the generator's; refresh it with "
            f"surrogate3d.export.refresh_host_fortran (models/README.md)")


@pytest.mark.skipif(shutil.which("gfortran") is None, reason="gfortran is not installed (make test installs it)")
@pytest.mark.parametrize("name", sorted(LIMITS))
def test_shipped_fortran_builds_and_reproduces_its_sample(name, tmp_path):
    # The module built from the shipped files reads them and reproduces what Python computes.
    fortran = SHIPPED / "fortran"
    built = subprocess.run(["gfortran", "-std=f2008", "-Wall", "-Werror", "-O2", str(fortran / f"{name}_correction.f90"),
                            str(fortran / f"{name}_correction_driver.f90"), "-o", "driver"], cwd=tmp_path,
                           capture_output=True, text=True)
    assert built.returncode == 0, built.stderr
    ran = subprocess.run([str(tmp_path / "driver"), str(fortran / f"{name}.coefficients.txt"),
                          str(fortran / f"{name}_sample_features.txt")], capture_output=True, text=True)
    assert ran.returncode == 0, ran.stderr
    got = np.array([[float(v) for v in line.split()] for line in ran.stdout.splitlines()])
    expected = _matrix(fortran / f"{name}_sample_corrections.txt", skip_header=False)
    # Required of the export: 1e-10 relative to each target's largest correction.
    assert (np.abs(got - expected) / np.abs(expected).max(axis=0)).max() <= 1e-10


@pytest.mark.parametrize("name", sorted(LIMITS))
def test_shipped_files_fit_their_size_limits(name):
    for suffix in (".json", ".nc"):
        assert (SHIPPED / f"{name}.coefficients{suffix}").stat().st_size <= LIMITS[name]


def test_model_card_states_what_a_user_must_know():
    card = (SHIPPED / "MODEL_CARD.md").read_text()
    for needed in ("Training scenes", "Regimes", "Resolution", "Solar zenith", "Held-out skill", "Limits of validity",
                   "validated for the host model"):
        assert needed in card, needed


LONGWAVE = SHIPPED.parent / "longwave"
LONGWAVE_TARGETS = ["longwave_surface_downward_flux", "longwave_surface_upward_flux", "longwave_toa_upward_flux",
                    "longwave_surface_net_absorption"]


@pytest.mark.parametrize("name", ["ridge", "boosted"])
def test_shipped_longwave_model_reproduces_its_sample_and_fits_its_limits(name):
    model = load_coefficients(LONGWAVE / f"{name}.coefficients.json")
    assert model.spectrum == "longwave" and list(model.target_names) == LONGWAVE_TARGETS
    features = _matrix(LONGWAVE / "fortran" / f"{name}_sample_features.txt", skip_header=True)
    expected = _matrix(LONGWAVE / "fortran" / f"{name}_sample_corrections.txt", skip_header=False)
    np.testing.assert_allclose(model.predict(features, check_envelope=False), expected, rtol=1e-12, atol=1e-12)
    for suffix in (".json", ".nc"):
        assert (LONGWAVE / f"{name}.coefficients{suffix}").stat().st_size <= LIMITS[name]
    for key, (file_name, text) in regenerated_fortran(LONGWAVE / f"{name}.coefficients.json",
                                                      LONGWAVE / "fortran").items():
        assert _same_as_generated(LONGWAVE / "fortran" / file_name, key, text), (
            f"models/longwave/fortran/{file_name} ({key}) differs from the generator's (models/README.md)")


@pytest.mark.parametrize("name", ["ridge", "boosted"])
def test_shipped_longwave_host_interface_is_what_the_generator_makes(name):
    # The longwave features module, the one-call host module and the halo statement.
    for file_name, text in longwave_host_files(read_coefficients(LONGWAVE / f"{name}.coefficients.json")).items():
        assert (LONGWAVE / "fortran" / file_name).read_text() == text, (
            f"models/longwave/fortran/{file_name} differs from the generator's; refresh it with "
            f"surrogate3d.export.refresh_host_fortran (models/README.md)")


def test_longwave_model_card_states_what_a_user_must_know():
    card = (LONGWAVE / "MODEL_CARD.md").read_text()
    for needed in ("Training scenes", "Resolution", "Held-out skill", "Families never seen", "Limits of validity",
                   "validated for the host", "Not included"):
        assert needed in card, needed
