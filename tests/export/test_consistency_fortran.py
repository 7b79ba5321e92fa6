"""The consistency step in the generated Fortran against :func:`surrogate3d.learn.apply_correction`.

Negative corrected fluxes clipped, the total made direct + diffuse, and the energy budget
of the domain closed by scaling the sinks of scattered light (the numpy rule; energy over
a periodic domain is conserved, Gauss divergence theorem): on one process, and split over
two "processes" whose shares of the budget are added before the balance, as a
domain-decomposed host does; equal to numpy to 1e-10.
"""

import shutil
import subprocess

import numpy as np
import pytest

from surrogate3d.core.data_model import TARGETS
from surrogate3d.learn import apply_correction

GFORTRAN = shutil.which("gfortran")
FLAGS = ["-std=f2008", "-Wall", "-Werror", "-O2"]

PROGRAM = """\
program consistency_check
  use, intrinsic :: iso_fortran_env, only: real64
  use boosted_correction
  implicit none
  integer :: n, i, half, flag, unit
  character(len=512) :: data
  real(real64), allocatable :: ica(:, :), corr(:, :), albedo(:), whole(:, :), split(:, :), work(:, :)
  logical, allocatable :: gated(:)
  real(real64) :: need, have
  call get_command_argument(1, data)
  open (newunit=unit, file=trim(data), status='old', action='read')
  read (unit, *) n
  allocate (ica(boosted_n_targets, n), corr(boosted_n_targets, n), albedo(n), gated(n))
  allocate (whole(boosted_n_targets, n), split(boosted_n_targets, n), work(boosted_n_targets, n))
  do i = 1, n
    read (unit, *) ica(:, i), corr(:, i), albedo(i), flag
    gated(i) = flag == 1
  end do
  close (unit)
  call boosted_make_consistent(n, ica, corr, albedo, gated, whole)
  ! Two processes: each adds its columns' shares, the shares are summed, each balances its own.
  half = n / 2
  work = corr
  need = 0.0_real64
  have = 0.0_real64
  call boosted_consistency_sums(half, ica(:, :half), work(:, :half), albedo(:half), gated(:half), need, have)
  call boosted_consistency_sums(n - half, ica(:, half + 1:), work(:, half + 1:), albedo(half + 1:), &
                                gated(half + 1:), need, have)
  call boosted_balance_columns(half, ica(:, :half), work(:, :half), gated(:half), need, have, split(:, :half))
  call boosted_balance_columns(n - half, ica(:, half + 1:), work(:, half + 1:), gated(half + 1:), need, have, &
                               split(:, half + 1:))
  do i = 1, n
    write (*, '(*(1x, es25.17e3))') whole(:, i), split(:, i)
  end do
end program consistency_check
"""


def _inputs(seed, n=60):
    rng = np.random.default_rng(seed)
    direct, diffuse = rng.uniform(0.0, 0.6, n), rng.uniform(0.02, 0.4, n)
    albedo = rng.uniform(0.0, 0.8, n)
    absorbed = rng.uniform(0.05, 0.2, n)
    toa = 1.0 - absorbed - (1.0 - albedo) * (direct + diffuse)
    # Columns in the order of TARGETS, the order of the test model's targets.
    ica = np.column_stack([direct + diffuse, direct, diffuse, np.clip(toa, 0.01, None), absorbed])
    corr = rng.normal(0.0, 0.12, (n, 5))
    gated = rng.uniform(size=n) < 0.15
    corr[gated] = 0.0
    return ica, corr, albedo, gated


@pytest.mark.skipif(GFORTRAN is None, reason="gfortran is not installed (make test installs Debian's gfortran)")
@pytest.mark.parametrize("seed", [1, 2])
def test_fortran_consistency_equals_numpy(built, run, tmp_path, seed):
    assert list(run.models["boosted"].estimator.target_names_) == list(TARGETS)
    shutil.copy(built["export_dir"] / "fortran" / "boosted_correction.f90", tmp_path)
    (tmp_path / "check.f90").write_text(PROGRAM)
    made = subprocess.run([GFORTRAN, *FLAGS, "boosted_correction.f90", "check.f90", "-o", "check"], cwd=tmp_path,
                          capture_output=True, text=True)
    assert made.returncode == 0, made.stderr
    ica, corr, albedo, gated = _inputs(seed)
    lines = [str(len(albedo))] + [" ".join(repr(float(v)) for v in (*ica[i], *corr[i], albedo[i])) + f" {int(gated[i])}"
                                  for i in range(len(albedo))]
    (tmp_path / "columns.txt").write_text("\n".join(lines) + "\n")
    ran = subprocess.run([str(tmp_path / "check"), str(tmp_path / "columns.txt")], capture_output=True, text=True)
    assert ran.returncode == 0, ran.stderr
    values = np.array([[float(v) for v in line.split()] for line in ran.stdout.splitlines()])
    expected = apply_correction(ica, corr, albedo, np.zeros(len(albedo)), clear_sky=gated)
    assert expected.clipped["surface_downward_direct_flux"] > 0    # the clipping is exercised
    for got in (values[:, :5], values[:, 5:]):
        np.testing.assert_allclose(got, expected.flux, rtol=1e-10, atol=1e-12)
