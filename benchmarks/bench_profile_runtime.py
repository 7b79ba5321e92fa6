"""Speed of the heating-rate (profile) model: numpy runtime and Fortran module, per host column.

Takes the shipped ``models/default/profile.coefficients.json`` (or ``--coefficients``) and
host columns of a pair table with per-layer variables (``--pairs``; e.g. the one the
model was trained on), and measures on one core the columns per second of
``CorrectionModel.predict_profile`` (layer features, trees, energy matching), of the
generated ``profile_correct_profiles`` compiled with ``gfortran -O2`` (if installed), and
of one delta-Eddington band solve of the same columns with their number of layers, for
scale.  ``--json FILE`` also writes the figures.

    .venv/bin/python benchmarks/bench_profile_runtime.py --pairs PAIRS [--columns N] [--json FILE]
"""

import argparse
import json
import os
import shutil
import subprocess
import tempfile
import time
from pathlib import Path

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import numpy as np  # noqa: E402

from bench_runtime import best_rate  # noqa: E402
from surrogate3d.core.coefficient_file import read_coefficients  # noqa: E402
from surrogate3d.core.pairs_table import read_pairs  # noqa: E402
from surrogate3d.export.fortran import write_fortran  # noqa: E402
from surrogate3d.learn.pairs_table import feature_matrix  # noqa: E402
from surrogate3d.learn.profile_model import layer_fields  # noqa: E402
from surrogate3d.runtime import CorrectionModel  # noqa: E402
from surrogate3d.solvers.two_stream import delta_eddington  # noqa: E402

ROOT = Path(__file__).resolve().parents[1]
KEYS = ("bottom", "top", "optical_depth", "cloud_fraction", "independent_column_absorption",
        "slant_optical_depth_above")

PROGRAM = """\
program profile_timing
  use, intrinsic :: iso_fortran_env, only: real64, int64
  use profile_correction
  implicit none
  type(profile_coefficients) :: model
  integer :: status, n, nl, i, k, unit, r, repeats
  integer(int64) :: start, finish, rate
  character(len=512) :: message, path, data, text
  real(real64), allocatable :: x(:, :), mu(:), fields(:, :, :), profile(:, :)
  call get_command_argument(1, path)
  call get_command_argument(2, data)
  call get_command_argument(3, text)
  read (text, *) repeats
  call profile_read_coefficients(trim(path), model, status, message)
  if (status /= 0) error stop 'cannot read coefficients'
  open (newunit=unit, file=trim(data), status='old', action='read')
  read (unit, *) n, nl
  allocate (x(profile_n_column_features, n), mu(n), fields(nl, n, 6), profile(nl, n))
  do i = 1, n
    read (unit, *) x(:, i)
    read (unit, *) mu(i)
    do k = 1, 6
      read (unit, *) fields(:, i, k)
    end do
  end do
  close (unit)
  call system_clock(start, rate)
  do r = 1, repeats
    call profile_correct_profiles(model, n, nl, x, mu, fields(:, :, 1), fields(:, :, 2), fields(:, :, 3), &
                                  fields(:, :, 4), fields(:, :, 5), fields(:, :, 6), profile)
  end do
  call system_clock(finish)
  write (*, '(a, es12.4, a, es12.4)') 'columns_per_second ', real(n, real64) * repeats / &
      (real(finish - start, real64) / rate), ' check ', sum(profile, mask=profile == profile)
end program profile_timing
"""


def fortran_rate(document, X, fields, work):
    gfortran = shutil.which("gfortran")
    if gfortran is None:
        return None
    paths = write_fortran(document, work, np.zeros((1, len(document["features"]["names"]))), np.zeros((1, 1)))
    (work / "timing.f90").write_text(PROGRAM)
    subprocess.run([gfortran, "-std=f2008", "-O2", str(paths["module"]), "timing.f90", "-o", "timing"], cwd=work,
                   check=True, capture_output=True)
    n, nl = fields["bottom"].shape
    lines = [f"{n} {nl}"]
    for i in range(n):
        lines += [" ".join(repr(float(v)) for v in X[i]), repr(float(fields["cos_solar_zenith"][i]))]
        lines += [" ".join("NaN" if np.isnan(v) else repr(float(v)) for v in fields[key][i]) for key in KEYS]
    (work / "columns.txt").write_text("\n".join(lines) + "\n")
    repeats = 1
    while True:
        start = time.perf_counter()
        out = subprocess.run([str(work / "timing"), str(paths["coefficients"]), str(work / "columns.txt"),
                              str(repeats)], check=True, capture_output=True, text=True).stdout
        if time.perf_counter() - start > 1.0 or repeats > 10**5:
            return float(out.split()[1])
        repeats *= 4


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--pairs", required=True, help="pair table with per-layer variables")
    parser.add_argument("--coefficients", default=str(ROOT / "models" / "default" / "profile.coefficients.json"))
    parser.add_argument("--columns", type=int, default=4000)
    parser.add_argument("--json", metavar="FILE")
    args = parser.parse_args()
    document = read_coefficients(args.coefficients)
    model = CorrectionModel.from_document(document, args.coefficients)
    pairs = read_pairs(args.pairs)
    pick = np.unique(np.linspace(0, pairs.sizes["sample"] - 1, args.columns).round().astype(int))
    pairs = pairs.isel(sample=pick)
    X = feature_matrix(pairs, model.column_feature_names)
    fields = layer_fields(pairs)
    n, nl = fields["bottom"].shape
    column = np.zeros(n)
    figures = {"columns": int(n), "layers": int(nl), "load_average": os.getloadavg()[0]}
    figures["numpy_columns_per_second"] = best_rate(
        lambda: model.predict_profile(X, fields, column, check_envelope=False), n)[0]
    with tempfile.TemporaryDirectory() as work:
        figures["fortran_columns_per_second"] = fortran_rate(document, X, fields, Path(work))
    tau = np.nan_to_num(fields["optical_depth"])
    mu0 = fields["cos_solar_zenith"][:, None]
    figures["delta_eddington_band_columns_per_second"] = best_rate(
        lambda: delta_eddington(tau, 0.999, 0.85, mu0[:, 0], 0.2), n)[0]
    for key, value in figures.items():
        print(f"{key}: {value:.4g}" if isinstance(value, float) else f"{key}: {value}")
    if args.json:
        Path(args.json).write_text(json.dumps(figures, indent=2) + "\n")


if __name__ == "__main__":
    main()
