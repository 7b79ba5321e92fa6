"""The longwave host features and host interface in generated Fortran against the numpy reference.

``surrogate3d.pairs.longwave_features.longwave_host_features`` on a periodic domain (the
Fortran given the domain with a halo filled by periodic copy) must agree with
``NAME_host_features`` to 1e-10 relative (1e-12 absolute near zero) for every longwave
feature, on random fields with exact zeros and ones and on the host fields of a generated
scene; the four sub-domains of a split give the whole domain's Fortran features bit for
bit; ``NAME_correct_host`` of the shipped ``models/longwave`` models returns the numpy
runtime's corrections (to 1e-9 W m-2), envelope flags and the host's fields plus the
corrections; bad input gives the documented status and a message naming the field and
the index, and the numpy runtime refuses the same input in one line; the host-model
guide's commands (a scene written as longwave host field files, whole and split, the
generated example driver) give the numpy runtime's corrections.  The modules are
compiled with ``gfortran -std=f2008 -Wall -Werror -O2``; fields go to the test program as
stream-binary doubles, which read back exactly.
"""

import re
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from surrogate3d.errors import ValidationError
from surrogate3d.export.fortran_longwave import longwave_features_module_text, longwave_host_files
from surrogate3d.export.fortran import fortran_files
from surrogate3d.core.coefficient_file import read_coefficients
from surrogate3d.pairs.longwave_features import (LONGWAVE_FEATURES, LONGWAVE_TARGETS, LongwaveFeatureRecipe,
                                                 longwave_halo_width, longwave_host_features)
from surrogate3d.runtime import load_coefficients
from surrogate3d.runtime.host_field_file import CLEAR_SKY_FIELDS, read_host_field_file

ROOT = Path(__file__).resolve().parents[2]
GFORTRAN = shutil.which("gfortran")
FLAGS = ["-std=f2008", "-Wall", "-Werror", "-O2"]
needs_gfortran = pytest.mark.skipif(GFORTRAN is None, reason="gfortran is not installed "
                                    "(make test installs Debian's gfortran)")

#: Host column sizes of the random fields [m]: unequal, so x and y cannot be swapped unnoticed.
DX, DY = 1000.0, 1500.0

_PROGRAM = """\
program longwave_check
  use, intrinsic :: iso_fortran_env, only: real64, int32
  use {p}_features
  {host_use}
  implicit none
  integer(int32) :: dims(5)
  integer :: nx, ny, nz, hx, hy, status, u
  real(real64) :: dx, dy
  real(real64), allocatable :: z(:), cf(:, :, :), ta(:, :, :), tcf(:, :), edge(:, :), lwp(:, :), ts(:, :)
  real(real64), allocatable :: eps(:, :), clear(:, :, :), flx(:, :, :), out(:, :)
  character(len=400) :: message
  {host_declarations}
  open (newunit=u, file='fields.bin', access='stream', form='unformatted', status='old')
  read (u) dims
  nx = dims(1); ny = dims(2); nz = dims(3); hx = dims(4); hy = dims(5)
  read (u) dx, dy
  allocate (z(nz + 1), cf(1 - hx:nx + hx, 1 - hy:ny + hy, nz), ta(1 - hx:nx + hx, 1 - hy:ny + hy, nz))
  allocate (tcf(1 - hx:nx + hx, 1 - hy:ny + hy), edge(1 - hx:nx + hx, 1 - hy:ny + hy))
  allocate (lwp(1 - hx:nx + hx, 1 - hy:ny + hy), ts(1 - hx:nx + hx, 1 - hy:ny + hy))
  allocate (eps(1 - hx:nx + hx, 1 - hy:ny + hy), clear(1 - hx:nx + hx, 1 - hy:ny + hy, 2))
  allocate (flx(1 - hx:nx + hx, 1 - hy:ny + hy, 5))
  read (u) z, cf, ta, tcf, edge, lwp, ts, eps, clear, flx
  close (u)
  {call}
  open (newunit=u, file='out.bin', access='stream', form='unformatted', status='replace')
  write (u) int(status, int32)
  write (u) out
  close (u)
  if (status /= 0) print '(a)', trim(message)
end program longwave_check
"""

_FEATURES_CALL = """\
allocate (out({p}_n_host_features, nx * ny))
  call {p}_host_features(nx, ny, nz, hx, hy, dx, dy, z, cf, ta, tcf, edge, &
    lwp, ts, eps, clear, flx, out, status, message)"""

_HOST_CALL = """\
call {p}_read_coefficients('{data}', model, status, message)
  if (status /= 0) error stop 'cannot read the coefficients'
  allocate (out(2 * {p}_n_targets + 1, nx * ny), fluxes({p}_n_targets, nx * ny), corrections({p}_n_targets, nx * ny))
  allocate (outside(nx * ny))
  call {p}_correct_host(model, nx, ny, nz, hx, hy, dx, dy, z, cf, ta, tcf, edge, &
    lwp, ts, eps, clear, flx, fluxes, corrections, outside, n_outside, status, message)
  out(1:{p}_n_targets, :) = corrections
  out({p}_n_targets + 1:2 * {p}_n_targets, :) = fluxes
  out(2 * {p}_n_targets + 1, :) = merge(1.0_real64, 0.0_real64, outside)
  if (status == 0 .and. count(outside) /= n_outside) error stop 'n_outside is not the count of outside'"""


def random_fields(seed, nx=9, ny=7, nz=6):
    """Longwave host fields and host fluxes with exact zeros and ones, clear, overcast and broken columns."""
    rng = np.random.default_rng(seed)
    z = np.concatenate([[0.0], np.cumsum(rng.uniform(200.0, 800.0, nz))])
    layer = np.where(rng.random((nz, ny, nx)) < 0.4, rng.random((nz, ny, nx)), 0.0)
    layer[:, 0, :] = 0.0
    layer[:, 1, 0] = 1.0
    cover = np.where(rng.random((ny, nx)) < 0.2, 0.0, rng.random((ny, nx)))
    cover[2, :3] = 1.0
    centre = 0.5 * (z[1:] + z[:-1])
    fields = {"z_edge": z, "dx": DX, "dy": DY, "layer_cloud_fraction": layer, "total_cloud_fraction": cover,
              "layer_air_temperature": 290.0 - 0.0065 * centre[:, None, None] + rng.normal(0.0, 1.0, (nz, ny, nx)),
              "liquid_water_path": rng.uniform(0.0, 200.0, (ny, nx)) * (cover > 0),
              "surface_temperature": rng.uniform(270.0, 305.0, (ny, nx)),
              "surface_longwave_emissivity": rng.uniform(0.9, 1.0, (ny, nx)),
              "cloud_edge_length": rng.uniform(0.0, 3e-3, (ny, nx)) * (cover > 0) * (cover < 1),
              "longwave_clear_sky_surface_downward_flux": rng.uniform(250.0, 320.0, (ny, nx)),
              "longwave_clear_sky_toa_upward_flux": rng.uniform(240.0, 280.0, (ny, nx))}
    fluxes = {t: (rng.normal(0.0, 30.0, (ny, nx)) if "net_absorption" in t else rng.uniform(280.0, 380.0, (ny, nx)))
              for t in LONGWAVE_TARGETS}
    return fields, fluxes


def padded(fields, fluxes, hx, hy, x0=0, y0=0, nx=None, ny=None):
    """The fields of the own columns [x0, x0 + nx) x [y0, y0 + ny) with a periodic halo."""
    ny_all, nx_all = np.shape(fields["total_cloud_fraction"])
    nx, ny = nx or nx_all, ny or ny_all
    rows, cols = np.arange(y0 - hy, y0 + ny + hy) % ny_all, np.arange(x0 - hx, x0 + nx + hx) % nx_all
    out = {k: (np.asarray(v)[..., rows, :][..., cols] if np.ndim(v) >= 2 else v) for k, v in fields.items()}
    out.update({k: np.asarray(v)[rows][:, cols] for k, v in fluxes.items()})
    return out


def write_fields(path, block, hx, hy):
    """A block with its halo (numpy order) as the test program reads it."""
    ny, nx = np.shape(block["total_cloud_fraction"])
    nz = np.size(block["z_edge"]) - 1
    with open(path, "wb") as f:
        np.array([nx - 2 * hx, ny - 2 * hy, nz, hx, hy], dtype=np.int32).tofile(f)
        np.array([block["dx"], block["dy"]], dtype=np.float64).tofile(f)
        for a in (block["z_edge"], block["layer_cloud_fraction"], block["layer_air_temperature"],
                  block["total_cloud_fraction"], block["cloud_edge_length"], block["liquid_water_path"],
                  block["surface_temperature"], block["surface_longwave_emissivity"],
                  np.stack([block["longwave_clear_sky_surface_downward_flux"],
                            block["longwave_clear_sky_toa_upward_flux"]]),
                  np.stack([block[t] for t in LONGWAVE_TARGETS])):
            np.ascontiguousarray(a, dtype=np.float64).tofile(f)


class Program:
    """A compiled test program: ``run(block, hx, hy)`` gives (status, rows of output, message)."""

    def __init__(self, directory, rows):
        self.directory, self.rows = directory, rows

    def run(self, block, hx, hy):
        write_fields(self.directory / "fields.bin", block, hx, hy)
        done = subprocess.run(["./check"], cwd=self.directory, capture_output=True, text=True, timeout=60)
        assert done.returncode == 0, done.stderr
        raw = (self.directory / "out.bin").read_bytes()
        status = int(np.frombuffer(raw[:4], dtype=np.int32)[0])
        out = np.frombuffer(raw[4:], dtype=np.float64).reshape(-1, self.rows)
        return status, out, done.stdout.strip()


def compile_program(directory, sources, prefix, rows, host_data=None):
    """Compile the module sources and the test program (``host_data``: the host interface with that data file)."""
    directory.mkdir(parents=True, exist_ok=True)
    names = []
    for name, text in sources:
        (directory / name).write_text(text)
        names.append(name)
    host = host_data is not None
    text = _PROGRAM.format(
        p=prefix, host_use=f"use {prefix}_correction\n  use {prefix}_host" if host else "",
        host_declarations=(f"type({prefix}_coefficients) :: model\n  real(real64), allocatable :: fluxes(:, :), "
                           "corrections(:, :)\n  logical, allocatable :: outside(:)\n  integer :: n_outside")
        if host else "",
        call=(_HOST_CALL.format(p=prefix, data=host_data) if host else _FEATURES_CALL.format(p=prefix)))
    (directory / "check.f90").write_text(text)
    built = subprocess.run([GFORTRAN, *FLAGS, *names, "check.f90", "-o", "check"], cwd=directory,
                           capture_output=True, text=True)
    assert built.returncode == 0, built.stderr
    return Program(directory, rows)


@pytest.fixture(scope="module")
def every_feature(tmp_path_factory):
    names = list(LONGWAVE_FEATURES)
    text = longwave_features_module_text("every_longwave_" + "x" * 25, LongwaveFeatureRecipe(), names)
    return names, compile_program(tmp_path_factory.mktemp("every"), [("m_features.f90", text)],
                                  "every_longwave_" + "x" * 25, len(names))


def numpy_features(fields, fluxes, names):
    values = longwave_host_features(fields, fluxes)
    return np.stack([np.asarray(values[n], dtype=np.float64).ravel() for n in names], axis=1)


@needs_gfortran
@pytest.mark.parametrize("seed", [0, 1])
def test_every_longwave_feature_equals_numpy_on_a_periodic_domain(every_feature, seed):
    names, program = every_feature
    fields, fluxes = random_fields(seed)
    hx, hy = longwave_halo_width(LongwaveFeatureRecipe(names), DX, DY)
    assert (hx, hy) == (10, 7)   # the 10 km window: ceiling(10 km / 1 km), ceiling(10 km / 1.5 km)
    status, got, message = program.run(padded(fields, fluxes, hx, hy), hx, hy)
    assert status == 0, message
    want = numpy_features(fields, fluxes, names)
    np.testing.assert_allclose(got, want, rtol=1e-10, atol=1e-12)
    # The same arithmetic: every feature but the priors (log1p, exp) bit for bit, the windows too.
    exact = [j for j, n in enumerate(names) if not n.startswith("effective_")]
    np.testing.assert_array_equal(got[:, exact], want[:, exact])
    # The priors are not trivial here: broken columns with cloud sides change the flux.
    assert np.count_nonzero(np.abs(want[:, names.index("effective_cloud_fraction_prior")]) > 0.1) > 10


@needs_gfortran
def test_sub_domains_give_the_whole_domains_features_bit_for_bit(every_feature):
    names, program = every_feature
    fields, fluxes = random_fields(2, nx=10, ny=8)
    hx, hy = 10, 7
    status, whole, _ = program.run(padded(fields, fluxes, hx, hy), hx, hy)
    assert status == 0
    whole = whole.reshape(8, 10, len(names))
    for x0, nx in ((0, 4), (4, 6)):
        for y0, ny in ((0, 5), (5, 3)):
            status, part, message = program.run(padded(fields, fluxes, hx, hy, x0, y0, nx, ny), hx, hy)
            assert status == 0, message
            np.testing.assert_array_equal(part.reshape(ny, nx, len(names)), whole[y0:y0 + ny, x0:x0 + nx])


@needs_gfortran
@pytest.mark.parametrize("change, status, text", [
    (lambda f: f["layer_air_temperature"].__setitem__((2, 3, 4), np.nan), 2,
     "layer_air_temperature(-5, -3, 3) = NaN: not finite"),
    (lambda f: f["surface_temperature"].__setitem__((0, 0), 0.0), 3, "surface_temperature(-9, -6) = 0"),
    (lambda f: f["surface_longwave_emissivity"].__setitem__((1, 2), 1.5), 3,
     "surface_longwave_emissivity(-7, -5) = 1.5000000000000000: outside [0, 1]"),
    (lambda f: f["longwave_surface_downward_flux"].__setitem__((0, 1), -1.0), 3,
     "longwave_fluxes(-8, -6, 1) (longwave_surface_downward_flux) = -1.0000000000000000: outside [0, inf)"),
    (lambda f: f["longwave_clear_sky_toa_upward_flux"].__setitem__((0, 1), np.inf), 2,
     "clear_sky_fluxes(-8, -6, 2) (longwave_clear_sky_toa_upward_flux) = Inf: not finite"),
    (lambda f: f["z_edge"].__setitem__(3, f["z_edge"][2]), 3, "z_edge(4) ="),
    (lambda f: f["z_edge"].__setitem__(0, np.nan), 2, "z_edge(1) = NaN m: not finite"),
    (lambda f: f.__setitem__("dx", 0.0), 3, "dx = 0"),
    (lambda f: f.__setitem__("dy", np.nan), 2, "dy = NaN m: must be finite"),
    (lambda f: f["layer_cloud_fraction"].__setitem__((1, 0, 0), 1.25), 3,
     "layer_cloud_fraction(-9, -6, 2) = 1.2500000000000000: outside [0, 1]"),
    (lambda f: f["cloud_edge_length"].__setitem__((0, 0), -1e-3), 3, "cloud_edge_length(-9, -6) = -0.1"),
])
def test_bad_input_gives_a_status_and_names_the_field_and_index(every_feature, change, status, text):
    names, program = every_feature
    fields, fluxes = random_fields(3)
    block = padded(fields, fluxes, 10, 7)
    block["z_edge"] = np.array(block["z_edge"], dtype=np.float64)
    change(block)
    got_status, out, message = program.run(block, 10, 7)
    assert got_status == status and text in message, message
    assert np.all(np.isnan(out))


@needs_gfortran
def test_a_narrow_halo_gives_status_1_naming_the_widest_window(every_feature):
    names, program = every_feature
    fields, fluxes = random_fields(4)
    status, _, message = program.run(padded(fields, fluxes, 9, 7), 9, 7)
    assert status == 1
    assert message == ("feature neighbour_mean_cloud_fraction_10000m reads 10 columns along x and 7 along y; the halo "
                       "has 9 and 7")


@needs_gfortran
def test_no_own_column_or_a_negative_halo_gives_status_3(every_feature):
    names, program = every_feature
    fields, fluxes = random_fields(3, nx=9, ny=7)
    status, _, message = program.run(padded(fields, fluxes, 10, 7), 10, -1)
    assert status == 3 and "hx, hy = 10, -1 >= 0" in message


@needs_gfortran
@pytest.mark.parametrize("names", [["cloud_fraction"], ["effective_cloud_fraction_prior"],
                                   ["effective_cloud_fraction_toa_prior", "surface_temperature"],
                                   ["effective_cloud_fraction_atmosphere_prior"],
                                   ["cloud_top_air_temperature", "neighbour_mean_cloud_fraction_3000m"]])
def test_every_recipe_compiles_cleanly_and_equals_numpy(tmp_path, names):
    # Each recipe's module compiles with -Wall -Werror (no unused argument or variable whatever it reads).
    program = compile_program(tmp_path, [("f.f90", longwave_features_module_text("one", LongwaveFeatureRecipe(names),
                                                                                   names))], "one", len(names))
    fields, fluxes = random_fields(8)
    hx, hy = longwave_halo_width(LongwaveFeatureRecipe(names), DX, DY)
    status, got, message = program.run(padded(fields, fluxes, hx, hy), hx, hy)
    assert status == 0, message
    np.testing.assert_allclose(got, numpy_features(fields, fluxes, names), rtol=1e-10, atol=1e-12)


@pytest.mark.parametrize("change, text", [
    (lambda f, q: f.__setitem__("dx", 0.0), r"host_fields\['dx'\]"),
    (lambda f, q: f.__setitem__("dy", np.nan), r"host_fields\['dy'\]"),
    (lambda f, q: f.__setitem__("layer_air_temperature", f["layer_air_temperature"][1:]),
     r"host_fields\['layer_air_temperature'\] has shape \(5, 7, 9\); expected \(6, 7, 9\)"),
    (lambda f, q: q.__setitem__("longwave_surface_net_absorption", q["longwave_surface_net_absorption"][:, 1:]),
     r"host_fields\['longwave_surface_net_absorption'\] has shape \(7, 8\); expected \(7, 9\)"),
    (lambda f, q: f["layer_air_temperature"].__setitem__((0, 0, 0), 0.0), r"layer_air_temperature"),
])
def test_the_numpy_runtime_refuses_bad_geometry_and_shapes_in_one_line(change, text):
    fields, fluxes = random_fields(5)
    change(fields, fluxes)
    with pytest.raises(ValidationError, match=text) as raised:
        longwave_host_features(fields, fluxes)
    assert "\n" not in str(raised.value)


def test_the_numpy_runtime_refuses_the_same_input_in_one_line():
    fields, fluxes = random_fields(5)
    fields["surface_longwave_emissivity"][1, 2] = 1.5
    with pytest.raises(ValidationError, match=r"surface_longwave_emissivity.*1\.5") as raised:
        longwave_host_features(fields, fluxes)
    assert "\n" not in str(raised.value)
    fields, fluxes = random_fields(5)
    fluxes["longwave_surface_upward_flux"][0, 0] = np.nan
    with pytest.raises(ValidationError, match="longwave_surface_upward_flux"):
        longwave_host_features(fields, fluxes)


@needs_gfortran
def test_fields_the_recipe_does_not_read_are_not_checked(tmp_path):
    names = ["cloud_fraction", "neighbour_mean_cloud_fraction_1000m", "host_longwave_surface_downward_flux"]
    program = compile_program(tmp_path, [("f.f90", longwave_features_module_text("few", LongwaveFeatureRecipe(names),
                                                                                   names))], "few", len(names))
    fields, fluxes = random_fields(6)
    block = padded(fields, fluxes, 1, 1)
    block["layer_air_temperature"][:] = np.nan
    block["surface_temperature"][:] = -1.0
    block["longwave_toa_upward_flux"][:] = np.nan
    status, got, message = program.run(block, 1, 1)
    assert status == 0, message
    np.testing.assert_allclose(got, numpy_features(fields, fluxes, names), rtol=1e-12, atol=1e-15)


def test_generator_refuses_unknown_or_repeated_columns():
    with pytest.raises(ValidationError, match="no longwave features"):
        longwave_features_module_text("m", LongwaveFeatureRecipe(), ["cloud_fraction", "surface_albedo"])
    with pytest.raises(ValidationError, match="more than once"):
        longwave_features_module_text("m", LongwaveFeatureRecipe(), ["cloud_fraction", "cloud_fraction"])
    with pytest.raises(ValidationError, match="prefix must be a Fortran name"):
        longwave_features_module_text("9m", LongwaveFeatureRecipe(), ["cloud_fraction"])


@needs_gfortran
@pytest.mark.parametrize("name", ["ridge", "boosted"])
def test_correct_host_of_the_shipped_longwave_models_equals_the_numpy_runtime(tmp_path, name):
    path = ROOT / "models" / "longwave" / f"{name}.coefficients.json"
    document = read_coefficients(path)
    model = load_coefficients(path)
    files = fortran_files(document, np.zeros((1, model.n_features)), np.zeros((1, model.n_targets)))
    sources = [files["module"]] + [(f, t) for f, t in longwave_host_files(document).items() if f.endswith(".f90")]
    sources = [sources[0], next(s for s in sources if s[0].endswith("_features.f90")),
               next(s for s in sources if s[0].endswith("_host.f90"))]
    (tmp_path / "coefficients.txt").write_text(files["coefficients"][1])
    program = compile_program(tmp_path, sources, name, 2 * model.n_targets + 1, host_data="coefficients.txt")
    fields, fluxes = random_fields(7, nx=8, ny=6)
    fields["dy"] = DX   # the models were trained on square 1 km columns
    hx, hy = longwave_halo_width(LongwaveFeatureRecipe(model.column_feature_names), DX, DX)
    assert (hx, hy) == (3, 3)   # the recipe's widest window reaches 3 km
    status, got, message = program.run(padded(fields, fluxes, hx, hy), hx, hy)
    assert status == 0, message
    host = {**fields, **fluxes}
    want = model.predict_host(host, check_envelope=False)
    n = model.n_targets
    np.testing.assert_allclose(got[:, :n], want, rtol=1e-10, atol=1e-9)
    own = np.stack([fluxes[t].ravel() for t in model.target_names], axis=1)
    np.testing.assert_allclose(got[:, n:2 * n], own + want, rtol=1e-12, atol=1e-9)
    flagged = model.envelope_check(model.host_features(host)).outside
    np.testing.assert_array_equal(got[:, 2 * n] == 1.0, flagged)
    # A sub-domain with its halo: the same corrections as its columns of the whole domain.
    status, part, _ = program.run(padded(fields, fluxes, hx, hy, 2, 1, 5, 4), hx, hy)
    assert status == 0
    np.testing.assert_array_equal(part.reshape(4, 5, -1), got.reshape(6, 8, -1)[1:5, 2:7])


def _guide_commands():
    """The shell block of the guide's section on the decomposed longwave Fortran host."""
    text = (ROOT / "docs" / "host-model-guide.md").read_text()
    section = text[text.index("### Longwave corrected fields in a decomposed Fortran host"):]
    return re.search(r"```sh\n(.*?)```", section, re.S).group(1)


def _driver_rows(path):
    rows = np.loadtxt(path, ndmin=2)
    return rows[np.lexsort((rows[:, 0], rows[:, 1]))]          # row-major (iy, ix)


@needs_gfortran
def test_guide_commands_give_the_numpy_corrections_whole_and_split(tmp_path):
    (tmp_path / "models").symlink_to(ROOT / "models")
    env = {"PATH": f"{Path(sys.executable).parent}:/usr/bin:/bin", "HOME": str(tmp_path)}
    done = subprocess.run(["bash", "-e", "-c", _guide_commands()], cwd=tmp_path, env=env, capture_output=True,
                          text=True, timeout=600)
    assert done.returncode == 0, done.stderr[-2000:]
    whole = _driver_rows(tmp_path / "lw-demo" / "whole.out")
    split = _driver_rows(tmp_path / "lw-demo" / "split.out")
    np.testing.assert_array_equal(split, whole)
    # The numpy runtime on the periodic domain (the whole file without its halo).
    fields, layout = read_host_field_file(tmp_path / "lw-demo" / "fields" / "whole.txt")
    assert layout["longwave"] and layout["halo"] == (3, 3)
    inner = {k: (v[..., 3:-3, 3:-3] if np.ndim(v) >= 2 else v) for k, v in fields.items()}
    inner.update(zip(CLEAR_SKY_FIELDS, inner.pop("clear_sky_fluxes")))
    inner.update(zip(LONGWAVE_TARGETS, inner.pop("longwave_fluxes")))
    model = load_coefficients(ROOT / "models" / "longwave" / "boosted.coefficients.json")
    features = model.host_features(inner)
    corrections = model.predict(features, check_envelope=False)
    n = model.n_targets
    own = np.stack([inner[t].ravel() for t in model.target_names], axis=1)
    assert whole.shape == (144, 2 + 2 * n + 1)
    np.testing.assert_allclose(whole[:, 2 + n:2 + 2 * n], corrections, rtol=1e-10, atol=1e-9)
    np.testing.assert_allclose(whole[:, 2:2 + n], own + corrections, rtol=1e-12, atol=1e-9)
    np.testing.assert_array_equal(whole[:, -1] == 1.0, model.envelope_check(features).outside)
    # Broken clouds warm the surface: the corrections are not all zero.
    assert np.abs(corrections[:, 0]).max() > 1.0


def test_host_fields_refuses_mixed_spectra_and_a_missing_zenith_in_one_line(tmp_path, capsys):
    from surrogate3d.archive import write_scene
    from surrogate3d.cli import main
    from surrogate3d.scenes.generator import generate_scene

    write_scene(generate_scene("scattered_cumulus", 0, nx=20, ny=20, nz=6), tmp_path / "scene.nc")
    shortwave, longwave = (str(ROOT / "models" / d / "boosted.coefficients.json") for d in ("default", "longwave"))
    for models, extra, text in (([shortwave, longwave], ["--zenith", "30"], "mixes shortwave and longwave models"),
                                ([shortwave], [], "--zenith is required for shortwave models"),
                                ([longwave], ["--zenith", "95"], "--zenith apply to shortwave models only"),
                                ([shortwave], ["--zenith", "30", "--longwave-resolution", "50"],
                                 "--longwave-resolution applies to longwave models only"),
                                ([longwave], ["--split", "3", "2"],
                                 "--split 3 2 must divide the 2 x 2 host columns into equal sub-domains")):
        assert main(["host-fields", str(tmp_path / "scene.nc"), "--model", *models, "--out", str(tmp_path / "out"),
                     "--host-resolution", "1000", *extra]) != 0
        err = capsys.readouterr().err.strip()
        assert text in err and "\n" not in err
        assert not (tmp_path / "out").exists()


@needs_gfortran
def test_a_window_reaching_a_sliver_past_a_column_does_not_wrap_a_sub_domain(tmp_path):
    # 20 km / 380 columns: 3 km / dx = 57.00000000000001, a sliver the halo rule does not
    # count; the window leaves it out (numpy and Fortran alike), so a sub-domain with the
    # halo the rule gives equals the whole domain bit for bit, and numpy's features.
    names = ["neighbour_mean_cloud_fraction_3000m", "neighbour_mean_cloud_fraction_1000m"]
    program = compile_program(tmp_path, [("f.f90", longwave_features_module_text("sliver", LongwaveFeatureRecipe(names),
                                                                                   names))], "sliver", len(names))
    fields, fluxes = random_fields(9, nx=12, ny=8)
    fields["dx"] = fields["dy"] = 20000.0 / 380.0
    hx, hy = longwave_halo_width(LongwaveFeatureRecipe(names), fields["dx"], fields["dy"])
    assert hx == hy == 57
    status, whole, message = program.run(padded(fields, fluxes, hx, hy), hx, hy)
    assert status == 0, message
    status, part, _ = program.run(padded(fields, fluxes, hx, hy, 3, 2, 5, 4), hx, hy)
    assert status == 0
    np.testing.assert_array_equal(part.reshape(4, 5, -1), whole.reshape(8, 12, -1)[2:6, 3:8])
    np.testing.assert_array_equal(whole, numpy_features(fields, fluxes, names))
