"""The Fortran port of the delta-Eddington column solver (benchmarks/fortran/) against numpy and physics.

The port is the reference cost of one band solve per column for the host-side speed
benchmark (benchmarks/bench_host_fortran.py), so it must compute what
``surrogate3d.solvers.two_stream.delta_eddington`` computes: every output agrees to
1e-10 relative (1e-12 absolute) on random 40-layer columns. Two checks of the Fortran
on its own: a conservative column absorbs nothing (energy conservation; Joseph,
Wiscombe and Weinman 1976 state it for the delta-Eddington method), and the direct beam
of a non-scattering column follows Beer-Lambert, ``exp(-tau / mu0)``.
"""

import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest

from surrogate3d.solvers.two_stream import delta_eddington

GFORTRAN = shutil.which("gfortran")
pytestmark = pytest.mark.skipif(GFORTRAN is None, reason="gfortran is not installed (make test installs "
                                                         "Debian's gfortran)")
FLAGS = ["-std=f2008", "-Wall", "-Werror", "-O2"]
SOURCES = Path(__file__).resolve().parents[2] / "benchmarks" / "fortran"
NZ = 40
PROFILES = ("upward_flux", "downward_direct_flux", "downward_diffuse_flux")
SUMMARY = ("toa_upward_flux", "surface_downward_direct_flux", "surface_downward_diffuse_flux",
           "surface_upward_flux", "atmosphere_absorption")


def _compile(work, program):
    result = subprocess.run([GFORTRAN, *FLAGS, str(SOURCES / "delta_eddington_band.f90"),
                             str(SOURCES / f"{program}.f90"), "-o", program],
                            cwd=work, capture_output=True, text=True)
    assert result.returncode == 0, result.stderr
    return work / program


@pytest.fixture(scope="module")
def programs(tmp_path_factory):
    """The solve and timing programs, compiled once with the house flags."""
    work = tmp_path_factory.mktemp("delta_eddington_fortran")
    return work, {name: _compile(work, name) for name in ("solve_delta_eddington", "time_delta_eddington")}


def _write_columns(path, tau, ssa, g, mu0, albedo):
    """The programs' input: C-ordered (ncol, nz) arrays are Fortran's (nz, ncol)."""
    with open(path, "wb") as f:
        for a in (tau, ssa, g, mu0, albedo):
            np.ascontiguousarray(a, dtype=np.float64).tofile(f)


def _fortran(programs, tau, ssa, g, mu0, albedo):
    """delta_eddington_column on each column: a dict with the keys of numpy's delta_eddington."""
    work, exe = programs
    ncol, nz = tau.shape
    _write_columns(work / "in.bin", tau, ssa, g, mu0, albedo)
    result = subprocess.run([str(exe["solve_delta_eddington"]), "in.bin", "out.bin", str(nz), str(ncol)],
                            cwd=work, capture_output=True, text=True)
    assert result.returncode == 0, result.stderr
    values = np.fromfile(work / "out.bin", dtype=np.float64)
    sizes = [ncol * (nz + 1)] * 3 + [ncol * nz, ncol * 5]
    assert values.size == sum(sizes)
    parts = np.split(values, np.cumsum(sizes)[:-1])
    out = {name: part.reshape(ncol, nz + 1) for name, part in zip(PROFILES, parts[:3])}
    out["layer_absorption"] = parts[3].reshape(ncol, nz)
    out.update(zip(SUMMARY, parts[4].reshape(ncol, 5).T))
    return out


def _random_columns(rng, ncol, nz=NZ):
    """Layers over the ranges the host columns span, with zero optical depths and conservative scattering."""
    shape = (ncol, nz)
    tau = np.where(rng.random(shape) < 0.5, rng.uniform(0.0, 50.0, shape), 10.0 ** rng.uniform(-8.0, 0.0, shape))
    tau[rng.random(shape) < 0.1] = 0.0
    ssa = rng.uniform(0.0, 1.0, shape)
    ssa[rng.random(shape) < 0.3] = 1.0
    ssa[rng.random(shape) < 0.05] = 0.0
    g = rng.uniform(-0.5, 0.9, shape)
    mu0 = rng.uniform(0.1, 1.0, ncol)
    albedo = rng.uniform(0.0, 0.9, ncol)
    albedo[:10] = 0.0
    return tau, ssa, g, mu0, albedo


def test_fortran_equals_numpy(programs):
    # The project's own numpy solver is the reference here: the port must reproduce it.
    columns = _random_columns(np.random.default_rng(2026), 400)
    got = _fortran(programs, *columns)
    expected = delta_eddington(*columns)
    for name, value in got.items():
        np.testing.assert_allclose(value, expected[name], rtol=1e-10, atol=1e-12, err_msg=name)


def test_conservative_column_conserves_energy(programs):
    # Energy conservation (Joseph, Wiscombe and Weinman 1976): layers with ssa = 1 absorb
    # nothing, so R + (1 - A) T = 1 with T the total downward flux at the surface; R + T = 1
    # over a black surface (A = 0).
    rng = np.random.default_rng(7)
    ncol = 20
    tau = rng.uniform(0.0, 50.0, (ncol, NZ))
    tau[:, ::5] = 0.0
    albedo = np.linspace(0.0, 0.9, ncol)
    out = _fortran(programs, tau, np.ones_like(tau), rng.uniform(-0.5, 0.9, tau.shape),
                   rng.uniform(0.1, 1.0, ncol), albedo)
    transmitted = out["surface_downward_direct_flux"] + out["surface_downward_diffuse_flux"]
    np.testing.assert_allclose(out["toa_upward_flux"] + (1.0 - albedo) * transmitted, 1.0, rtol=0, atol=1e-12)
    np.testing.assert_allclose(out["layer_absorption"], 0.0, rtol=0, atol=1e-12)
    assert (transmitted > 0).all() and (out["toa_upward_flux"] > 0).all()


def test_non_scattering_column_follows_beer_lambert(programs):
    # Beer-Lambert: without scattering the beam at each level is exp(-tau_above / mu0) and
    # no diffuse light arises over a black surface.
    rng = np.random.default_rng(11)
    ncol = 20
    tau = rng.uniform(0.0, 0.2, (ncol, NZ))
    tau[:, 3] = 0.0
    mu0 = rng.uniform(0.1, 1.0, ncol)
    out = _fortran(programs, tau, np.zeros_like(tau), rng.uniform(-0.5, 0.9, tau.shape), mu0, np.zeros(ncol))
    above = np.concatenate([np.cumsum(tau[:, ::-1], axis=1)[:, ::-1], np.zeros((ncol, 1))], axis=1)
    np.testing.assert_allclose(out["downward_direct_flux"], np.exp(-above / mu0[:, None]), rtol=1e-13, atol=0)
    np.testing.assert_array_equal(out["downward_diffuse_flux"], 0.0)
    np.testing.assert_array_equal(out["toa_upward_flux"], 0.0)
    np.testing.assert_allclose(out["atmosphere_absorption"], 1.0 - out["surface_downward_direct_flux"],
                               rtol=0, atol=1e-13)


def test_bad_input_names_variable_and_index(programs):
    tau, ssa, g, mu0, albedo = _random_columns(np.random.default_rng(3), 4)
    ssa[2, 6] = 1.5
    work, exe = programs
    _write_columns(work / "bad.bin", tau, ssa, g, mu0, albedo)
    result = subprocess.run([str(exe["solve_delta_eddington"]), "bad.bin", "bad_out.bin", str(NZ), "4"],
                            cwd=work, capture_output=True, text=True)
    assert result.returncode != 0
    assert "column 3: ssa(7) must be in [0, 1]" in result.stderr


def test_timing_program_prints_its_figures(programs):
    # Only the form of the output: tests never assert on wall time.
    work, exe = programs
    ncol = 8
    _write_columns(work / "time.bin", *_random_columns(np.random.default_rng(5), ncol))
    result = subprocess.run([str(exe["time_delta_eddington"]), "time.bin", str(NZ), str(ncol), "0", "2"],
                            cwd=work, capture_output=True, text=True)
    assert result.returncode == 0, result.stderr
    figures = dict(line.split() for line in result.stdout.splitlines())
    assert {"columns", "layers", "sweeps", "repeats", "seconds_per_column", "microseconds_per_column",
            "microseconds_per_column_worst", "columns_per_second", "checksum"} <= set(figures)
    assert int(figures["columns"]) == ncol and int(figures["layers"]) == NZ
    assert float(figures["microseconds_per_column"]) > 0
