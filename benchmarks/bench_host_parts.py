"""Where the time of the Fortran host interface goes: features, prediction, envelope check, clear-sky gate.

Per host column, for the shipped column models (``ridge`` and ``boosted`` of
``models/default/fortran``, or of ``--fortran DIR``, e.g. an older revision's), each on
the host fields of ``bench_host_interface.py`` (a generated scattered cumulus scene at 1
km, 40 layers, tiled to 96 x 96 host columns, halo 5, sun at 45 degrees):

- ``NAME_host_corrections``: step 1 of ``NAME_correct_host``, all of it;
- ``NAME_host_features`` alone, into an array allocated once;
- ``NAME_correct_columns`` without the envelope flags: the prediction (clear-sky gate and
  target transforms included);
- ``NAME_correct_columns`` with them: the prediction and the envelope check (ranges and
  Mahalanobis distance);
- the gate: ``NAME_clear_sky_column`` of every column.

What ``NAME_host_corrections`` costs beyond the parts (its features array, fresh memory
from the system) is the first figure minus the second, fourth and fifth.  The timing
program is the generated example driver ``NAME_host_driver.f90`` with its ``--repeat``
timing replaced by these; it reports processor time (``cpu_time``), best of three runs of
``--sweeps`` sweeps, which other jobs on a shared machine disturb less than wall time.
The features by group (direct-beam priors, neighbour windows, the rest) are
``bench_host_fortran.py --features-only``'s.

    .venv/bin/python benchmarks/bench_host_parts.py [--fortran DIR] [--sweeps 6] [--json FILE]
"""

import argparse
import json
import os
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))

from bench_host_fortran import FLAGS, time_program  # noqa: E402
from bench_host_interface import SHIPPED, host_field_file  # noqa: E402

from surrogate3d._atomic import write_text_atomic  # noqa: E402
from surrogate3d.runtime import load_coefficients  # noqa: E402

#: The figures of the timing program, in the order it prints them.
PARTS = ("host_corrections", "host_features", "prediction", "prediction_envelope", "gate")

_TIMING = """\
  !> The parts of step 1 (bench_host_parts.py): microseconds of processor time per own column, best of three.
  subroutine time_parts(d)
    type(subdomain), intent(inout) :: d
    real(real64) :: start, finish, best(5), checksum
    real(real64), allocatable :: features(:, :)
    integer :: sweep, trial, part, i
    character(len=24), parameter :: names(5) = [character(len=24) :: &
        {names}]
    allocate (d%corrections({p}_n_targets, d%nx * d%ny), d%gated(d%nx * d%ny), d%outside(d%nx * d%ny))
    allocate (features({p}_n_host_features, d%nx * d%ny))
    d%gated = .false.
    best = huge(1.0_real64)
    checksum = 0.0_real64
    do trial = 1, 3
      do part = 1, 5
        call cpu_time(start)
        do sweep = 1, n_repeat
          select case (part)
          case (1)
            call {p}_host_corrections(model, d%nx, d%ny, d%nz, d%hx, d%hy, d%dx, d%dy, d%zenith, d%azimuth, &
                d%z_edge, d%cloud_fraction, d%optical_depth, d%clear_sky, d%albedo, d%cover, d%depth_mean, &
                d%depth_std, d%edge_length, d%ica, d%corrections, d%gated, d%outside, n_outside, status, message, &
                slant_path_reach=d%reach)
          case (2)
            call {p}_host_features(d%nx, d%ny, d%nz, d%hx, d%hy, d%dx, d%dy, d%zenith, d%azimuth, &
                d%z_edge, d%cloud_fraction, d%optical_depth, d%clear_sky, d%albedo, d%cover, d%depth_mean, &
                d%depth_std, d%edge_length, d%ica, features, status, message, slant_path_reach=d%reach)
          case (3)
            call {p}_correct_columns(model, d%nx * d%ny, features, d%corrections)
          case (4)
            call {p}_correct_columns(model, d%nx * d%ny, features, d%corrections, d%outside, n_outside)
          case (5)
            do i = 1, d%nx * d%ny
              d%gated(i) = {p}_clear_sky_column(model, features(:, i))
            end do
          end select
          call stop_on(status, message)
          ! Results read, so that no sweep is skipped.
          i = 1 + mod(sweep, d%nx * d%ny)
          checksum = checksum + d%corrections(1, i) + features(1, i) + merge(1.0_real64, 0.0_real64, d%gated(i))
        end do
        call cpu_time(finish)
        best(part) = min(best(part), finish - start)
      end do
    end do
    do part = 1, 5
      write (*, '(a, 1x, es15.8)') trim(names(part)), &
          1.0e6_real64 * best(part) / real(n_repeat * d%nx * d%ny, real64)
    end do
    write (*, '(a, 1x, i0)') 'columns', d%nx * d%ny
    write (*, '(a, 1x, es15.8)') 'checksum', checksum
  end subroutine time_parts

"""


def timing_driver(driver, prefix):
    """The example driver's text with its ``--repeat`` timing replaced by the timing of the parts.

    Parameters
    ----------
    driver : str
        Text of a generated ``NAME_host_driver.f90``.
    prefix : str
        The Fortran model name ``NAME``.

    Returns
    -------
    str
        A program that, run with ``--repeat N``, prints one ``key value`` line per name of
        :data:`PARTS` (microseconds of processor time per own column), ``columns`` and
        ``checksum``.
    """
    start = driver.index("  !> With --repeat N:")
    end = driver.index("end subroutine time_corrections", start) + len("end subroutine time_corrections\n")
    names = ", ".join(f"'{name}'" for name in PARTS)
    text = driver[:start] + _TIMING.format(p=prefix, names=names) + driver[end:].lstrip("\n")
    text = text.replace("call time_corrections(parts(1))", "call time_parts(parts(1))")
    return text.replace(f"  use {prefix}_host\n",
                        f"  use {prefix}_host\n  use {prefix}_features, only: {prefix}_host_features, "
                        f"{prefix}_n_host_features\n", 1)


def time_parts(fortran, name, field_file, work, sweeps):
    """The :data:`PARTS` figures of one model, compiled with the house flags and run.

    Parameters
    ----------
    fortran : pathlib.Path
        Folder of the generated Fortran and coefficient files.
    name : str
        The model's Fortran name (``ridge``, ``boosted``).
    field_file : path
        A host field file (:func:`bench_host_interface.host_field_file`).
    work : path
        Scratch directory.
    sweeps : int
        Sweeps over the columns per timed run.

    Returns
    -------
    dict
        Name of :data:`PARTS` -> microseconds of processor time per own column, and
        ``columns``, ``checksum``.
    """
    folder = Path(work) / name
    folder.mkdir()
    program = folder / f"{name}_host_parts.f90"
    program.write_text(timing_driver((fortran / f"{name}_host_driver.f90").read_text(), name))
    sources = [fortran / f"{name}_correction.f90", fortran / "profile_correction.f90", fortran / f"{name}_features.f90",
               fortran / f"{name}_host.f90", program]
    return time_program(sources, [fortran / f"{name}.coefficients.txt", "--repeat", sweeps, field_file], folder)


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--fortran", type=Path, default=SHIPPED / "fortran",
                        help="folder of the generated Fortran and coefficient files (default models/default/fortran)")
    parser.add_argument("--sweeps", type=int, default=6, help="sweeps over the columns per timed run (6)")
    parser.add_argument("--json", metavar="FILE", help="also write the figures as JSON")
    args = parser.parse_args(argv)
    fortran = args.fortran.resolve()
    models = [load_coefficients(SHIPPED / f"{name}.coefficients.json") for name in ("ridge", "boosted", "profile")]
    rows = {}
    with tempfile.TemporaryDirectory(prefix="bench_host_parts_") as work:
        field_file = Path(work) / "fields.txt"
        start = time.perf_counter()
        columns, halo = host_field_file(field_file, "scattered_cumulus", 0, 240, 4, 45.0, 30.0, models)
        print(f"{columns} host columns, halo {halo[0]} x {halo[1]} ({time.perf_counter() - start:.1f} s); Fortran "
              f"of {fortran}; load average {', '.join(f'{v:.2f}' for v in os.getloadavg())} on {os.cpu_count()} cores")
        for name in ("ridge", "boosted"):
            rows[name] = time_parts(fortran, name, field_file, work, args.sweeps)
    print(f"{'microseconds per column':<32}" + "".join(f"{name:>10}" for name in rows))
    for part in PARTS:
        print(f"{part:<32}" + "".join(f"{rows[name][part]:>10.3f}" for name in rows))
    rest = {name: r["host_corrections"] - r["host_features"] - r["prediction_envelope"] - r["gate"]
            for name, r in rows.items()}
    print(f"{'host_corrections minus the parts':<32}" + "".join(f"{rest[name]:>10.3f}" for name in rows))
    print(f"gfortran {' '.join(FLAGS)}, processor time, best of three runs of {args.sweeps} sweeps; load average "
          f"after: {', '.join(f'{v:.2f}' for v in os.getloadavg())}")
    if args.json:
        write_text_atomic(args.json, json.dumps({"fortran": str(fortran), "columns": columns, "timings": rows},
                                                indent=2) + "\n")
    return rows


if __name__ == "__main__":
    main()
