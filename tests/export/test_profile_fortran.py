"""The generated Fortran of a heating-rate (profile) model against the numpy runtime.

Compiled with gfortran (``-std=f2008 -Wall -Werror``) with a test program that reads host
columns and their layers from a text file and writes the profile corrections; they must
equal :meth:`surrogate3d.runtime.CorrectionModel.predict_profile` to 1e-10 relative (1e-12
absolute near zero) with and without the energy matching, on the training columns and on
columns with missing (NaN) top layers, layers that absorb nothing, and suns from 0 to
80 degrees.  Decimal numbers with 17 significant digits round-trip binary64 exactly
(IEEE 754-2008, 5.12.2).
"""

import shutil
import subprocess

import numpy as np
import pytest

from surrogate3d.core.pairs_table import read_pairs
from surrogate3d.learn.pairs_table import feature_matrix
from surrogate3d.learn.profile_model import layer_fields
from surrogate3d.runtime import load_coefficients

GFORTRAN = shutil.which("gfortran")
FLAGS = ["-std=f2008", "-Wall", "-Werror", "-O2"]
KEYS = ("bottom", "top", "optical_depth", "cloud_fraction", "independent_column_absorption",
        "slant_optical_depth_above")

PROGRAM = """\
program profile_check
  use, intrinsic :: iso_fortran_env, only: real64
  use profile_correction
  implicit none
  type(profile_coefficients) :: model
  integer :: status, n, nl, i, k, unit
  character(len=512) :: message, path, data
  real(real64), allocatable :: x(:, :), mu(:), fields(:, :, :), column(:), plain(:, :), matched(:, :)
  call get_command_argument(1, path)
  call get_command_argument(2, data)
  call profile_read_coefficients(trim(path), model, status, message)
  if (status /= 0) error stop 'cannot read coefficients'
  open (newunit=unit, file=trim(data), status='old', action='read')
  read (unit, *) n, nl
  allocate (x(profile_n_column_features, n), mu(n), fields(nl, n, 6), column(n), plain(nl, n), matched(nl, n))
  do i = 1, n
    read (unit, *) x(:, i)
    read (unit, *) mu(i), column(i)
    do k = 1, 6
      read (unit, *) fields(:, i, k)
    end do
  end do
  close (unit)
  call profile_correct_profiles(model, n, nl, x, mu, fields(:, :, 1), fields(:, :, 2), fields(:, :, 3), &
                                fields(:, :, 4), fields(:, :, 5), fields(:, :, 6), plain)
  call profile_correct_profiles(model, n, nl, x, mu, fields(:, :, 1), fields(:, :, 2), fields(:, :, 3), &
                                fields(:, :, 4), fields(:, :, 5), fields(:, :, 6), matched, column)
  do i = 1, n
    write (*, '(*(1x, es25.17e3))') plain(:, i)
    write (*, '(*(1x, es25.17e3))') matched(:, i)
  end do
end program profile_check
"""


def _number(value):
    return "NaN" if np.isnan(value) else repr(float(value))


def _cases(built, run):
    pairs = read_pairs(built["pairs_file"]).isel(sample=slice(0, 240))
    X = feature_matrix(pairs, run.profile.card["feature_names"])
    fields = layer_fields(pairs)
    rng = np.random.default_rng(11)
    # Suns all over the sky, padding (no top layer) in a third of the columns, layers that absorb nothing.
    fields["cos_solar_zenith"] = np.cos(np.radians(rng.uniform(0.0, 80.0, X.shape[0])))
    for key in KEYS:
        fields[key] = fields[key].copy()
        fields[key][::3, -1] = np.nan
    fields["independent_column_absorption"][1::5, 0] = 0.0
    column = rng.normal(0.0, 0.01, X.shape[0])
    return X, fields, column


@pytest.fixture(scope="module")
def fortran_profiles(built, run, tmp_path_factory):
    if GFORTRAN is None:
        pytest.skip("gfortran is not installed (make test installs Debian's gfortran)")
    work = tmp_path_factory.mktemp("fortran_profile")
    shutil.copy(built["export_dir"] / "fortran" / "profile_correction.f90", work)
    (work / "check.f90").write_text(PROGRAM)
    result = subprocess.run([GFORTRAN, *FLAGS, "profile_correction.f90", "check.f90", "-o", "check"], cwd=work,
                            capture_output=True, text=True)
    assert result.returncode == 0, result.stderr
    X, fields, column = _cases(built, run)
    n, nl = fields["bottom"].shape
    lines = [f"{n} {nl}"]
    for i in range(n):
        lines.append(" ".join(_number(v) for v in X[i]))
        lines.append(f"{_number(fields['cos_solar_zenith'][i])} {_number(column[i])}")
        lines += [" ".join(_number(v) for v in fields[key][i]) for key in KEYS]
    (work / "columns.txt").write_text("\n".join(lines) + "\n")
    result = subprocess.run([str(work / "check"), str(built["export_dir"] / "fortran" / "profile.coefficients.txt"),
                             str(work / "columns.txt")], capture_output=True, text=True)
    assert result.returncode == 0, result.stderr
    values = np.array([[float(v) for v in line.split()] for line in result.stdout.splitlines()])
    return X, fields, column, values[0::2], values[1::2]


def test_fortran_profiles_equal_the_numpy_runtime(built, fortran_profiles):
    X, fields, column, plain, matched = fortran_profiles
    model = load_coefficients(built["export_dir"] / "profile.coefficients.json")
    expected_plain = model.predict_profile(X, fields, check_envelope=False)
    expected_matched = model.predict_profile(X, fields, column, check_envelope=False)
    for got, expected in ((plain, expected_plain), (matched, expected_matched)):
        assert np.array_equal(np.isnan(got), np.isnan(expected))
        np.testing.assert_allclose(got, expected, rtol=1e-10, atol=1e-12, equal_nan=True)
    assert np.isnan(plain[::3, -1]).all() and np.all(plain[1::5, 0] == 0.0)
    np.testing.assert_allclose(np.nansum(matched, axis=1), column, rtol=0, atol=1e-16)
