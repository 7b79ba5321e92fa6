"""The slant-path features in generated Fortran against the project's numpy reference.

A test module ``t_features`` holds the procedures of :mod:`surrogate3d.export.fortran_slant`;
a test program reads host fields with a halo (written from numpy) and, optionally, the host's
cap on the paths' horizontal travel (``slant_path_reach``), evaluates every feature with
:func:`slant_call`, the three direct-beam priors together with :func:`slant_priors_call`,
every reach with :func:`slant_reach_call` and the optical depth above every layer, and writes
them back.  They must equal :func:`surrogate3d.pairs.features.compute_features` on periodic
domains (halo filled by periodic copy), :func:`surrogate3d.runtime.halo.subdomain_features` on
sub-domains, :func:`surrogate3d.pairs.profiles.slant_optical_depth_above` and the reach of
:data:`surrogate3d.runtime.halo.REACH`, to 1e-10 relative (1e-12 absolute near zero), with
and without a cap.
"""

import re
import shutil
import subprocess

import numpy as np
import pytest

from surrogate3d.errors import ParameterError
from surrogate3d.export.fortran_slant import (PRIOR_FEATURES, SLANT_DEPTH_ABOVE, SLANT_FEATURES, slant_call,
                                              slant_declarations, slant_depth_above_procedure, slant_priors_call,
                                              slant_procedures, slant_reach_call)
from surrogate3d.pairs.features import compute_features
from surrogate3d.pairs.profiles import slant_optical_depth_above
from surrogate3d.pairs.recipe import FeatureRecipe
from surrogate3d.runtime.halo import REACH, feature_reach, halo_width, subdomain_features

GFORTRAN = shutil.which("gfortran")
FLAGS = ["-std=f2008", "-Wall", "-Werror", "-O2"]
needs_gfortran = pytest.mark.skipif(GFORTRAN is None, reason="gfortran is not installed (make test installs "
                                                             "Debian's gfortran)")

#: The features in priority order: the shipped recipe's first (training/features.toml).
FEATURES = ["slant_optical_depth", "slant_minus_vertical_optical_depth", "direct_beam_prior",
            "direct_beam_prior_minus_independent_column", "direct_beam_prior_slant_minus_vertical",
            "direct_beam_interception_tilted", "direct_beam_interception_tilted_minus_vertical",
            "direct_beam_interception_relative_change"]
#: The priors as slant_priors_call computes them together (written after the features).
PRIORS = [name for name in FEATURES if name in PRIOR_FEATURES]
RECIPE = FeatureRecipe(FEATURES)
ICA = ("surface_downward_flux", "surface_downward_direct_flux", "surface_downward_diffuse_flux", "toa_upward_flux",
       "atmosphere_absorption")
RTOL, ATOL = 1e-10, 1e-12


def module_text(prefix, needed, public=None):
    """A module of the procedures for ``needed``; private but for ``public`` if given, as an assembler makes it."""
    access = "" if public is None else "  private\n" + (f"  public :: {', '.join(sorted(public))}\n" if public else "")
    return (f"module {prefix}_features\n  use, intrinsic :: iso_fortran_env, only: real64\n  implicit none\n"
            f"{access}{slant_declarations(prefix, needed)}\ncontains\n{slant_procedures(prefix, needed)}\n"
            f"end module {prefix}_features\n")


def program_text():
    """The test program: reaches first; the features only when the halo covers every reach. The cap is an
    allocatable scalar, absent from the calls (an optional argument not present) unless allocated."""
    reaches, calls = [], []
    for name in FEATURES + [SLANT_DEPTH_ABOVE]:
        reaches += [f"  {slant_reach_call('t', name, 'rx', 'ry', reach='cap')}", "  write (unit) rx, ry",
                    "  fits = fits .and. rx <= hx .and. ry <= hy"]
    for name in FEATURES:
        calls += [f"  {slant_call('t', name, 'out', reach='cap')}", "  write (unit) out"]
    calls += [f"  {slant_priors_call('t', {name: f'priors(:, :, {j})' for j, name in enumerate(PRIORS, 1)}, 'cap')}",
              "  write (unit) priors"]
    newline = "\n"
    return f"""\
program slant_check
  use, intrinsic :: iso_fortran_env, only: real64
  use t_features
  implicit none
  character(len=1024) :: input, output
  integer :: unit, nx, ny, nz, hx, hy, rx, ry, has_cap
  logical :: fits
  real(real64) :: dx, dy, solar_zenith_angle, solar_beam_azimuth, cap_value
  real(real64), allocatable :: z_edge(:), out(:, :), slant(:, :), priors(:, :, :), cap
  real(real64), allocatable, dimension(:, :, :) :: layer_cloud_fraction, layer_optical_depth, &
      layer_clear_sky_optical_depth, independent_column_fluxes
  real(real64), allocatable, dimension(:, :) :: total_cloud_fraction, column_optical_depth_std, cloud_edge_length
  call get_command_argument(1, input)
  call get_command_argument(2, output)
  open (newunit=unit, file=trim(input), access='stream', form='unformatted', status='old', action='read')
  read (unit) nx, ny, nz, hx, hy
  read (unit) dx, dy, solar_zenith_angle, solar_beam_azimuth
  read (unit) has_cap, cap_value
  if (has_cap /= 0) cap = cap_value
  allocate (z_edge(nz + 1), out(nx, ny), slant(nz, nx * ny), priors(nx, ny, {len(PRIORS)}))
  allocate (layer_cloud_fraction(1-hx:nx+hx, 1-hy:ny+hy, nz), layer_optical_depth(1-hx:nx+hx, 1-hy:ny+hy, nz), &
            layer_clear_sky_optical_depth(1-hx:nx+hx, 1-hy:ny+hy, nz), total_cloud_fraction(1-hx:nx+hx, 1-hy:ny+hy), &
            column_optical_depth_std(1-hx:nx+hx, 1-hy:ny+hy), cloud_edge_length(1-hx:nx+hx, 1-hy:ny+hy), &
            independent_column_fluxes(1-hx:nx+hx, 1-hy:ny+hy, 5))
  read (unit) z_edge, layer_cloud_fraction, layer_optical_depth, layer_clear_sky_optical_depth, &
      total_cloud_fraction, column_optical_depth_std, cloud_edge_length, independent_column_fluxes
  close (unit)
  open (newunit=unit, file=trim(output), access='stream', form='unformatted', status='replace', action='write')
  fits = .true.
{newline.join(reaches)}
  if (fits) then
{newline.join(calls)}
    call t_slant_depth_above(nx, ny, nz, hx, hy, dx, dy, solar_zenith_angle, solar_beam_azimuth, z_edge, &
                             layer_optical_depth, slant, cap)
    write (unit) slant
  end if
  close (unit)
end program slant_check
"""


@pytest.fixture(scope="module")
def program(tmp_path_factory):
    """The test program, compiled once."""
    if GFORTRAN is None:
        pytest.skip("gfortran is not installed")
    work = tmp_path_factory.mktemp("fortran_slant")
    (work / "t_features.f90").write_text(module_text("t", set(SLANT_FEATURES) | {SLANT_DEPTH_ABOVE}))
    (work / "check.f90").write_text(program_text())
    subprocess.run([GFORTRAN, *FLAGS, "t_features.f90", "check.f90", "-o", "check"], cwd=work, check=True,
                   capture_output=True)
    return work / "check"


def random_fields(seed, nx=10, ny=12, dx=1000.0, dy=1000.0):
    """Periodic host fields: cloud fractions with exact 0 and 1, clear layers, zero and clipped optical depths."""
    rng = np.random.default_rng(seed)
    nz = int(rng.integers(6, 11))
    shape = (nz, ny, nx)
    z_edge = np.concatenate([[0.0], np.cumsum(rng.uniform(150.0, 450.0, nz))])
    fraction = rng.uniform(0.0, 1.0, shape)
    fraction[rng.uniform(size=shape) < 0.5] = 0.0
    fraction[rng.uniform(size=shape) < 0.15] = 1.0
    fraction[[0, nz // 2]] = 0.0                        # layers without cloud
    fraction[nz - 2, :, : nx // 2] = 1.0                 # an overcast deck over half the domain
    clear = rng.uniform(0.0, 0.05, shape) * (rng.uniform(size=shape) > 0.1)
    cloud = np.where(fraction > 0.0, fraction * rng.gamma(1.5, 1.0, shape), 0.0)
    # Cloud optical depth without cloud fraction ("loose"), and a few layers thinner than clear sky.
    cloud += np.where((fraction == 0.0) & (rng.uniform(size=shape) < 0.1), rng.uniform(0.0, 0.5, shape), 0.0)
    tau = clear + cloud
    thinner = rng.uniform(size=shape) < 0.05
    tau[thinner] = 0.5 * clear[thinner]
    empty = rng.uniform(size=shape) < 0.05
    tau[empty], clear[empty] = 0.0, 0.0

    def plane(low, high, zero=0.15, one=0.0):
        u = rng.uniform(size=(ny, nx))
        return np.where(u < zero, 0.0, np.where(u > 1.0 - one, high, rng.uniform(low, high, (ny, nx))))

    fields = {"layer_cloud_fraction": fraction, "layer_optical_depth": tau, "layer_clear_sky_optical_depth": clear,
              "z_edge": z_edge, "dx": dx, "dy": dy, "surface_albedo": rng.uniform(0.05, 0.4, (ny, nx)),
              "total_cloud_fraction": plane(0.0, 1.0, 0.2, 0.15), "column_optical_depth_mean": tau.sum(axis=0),
              "column_optical_depth_std": plane(0.0, 6.0), "cloud_edge_length": plane(0.0, 2e-3)}
    for flux in ICA:
        fields[f"independent_column_{flux}"] = rng.uniform(0.0, 1.0, (ny, nx))
    return fields


def with_halo(fields, hx, hy):
    """The fields padded by a periodic halo (np.pad wrap, which repeats the domain for a halo wider than it)."""
    out = {}
    for key, value in fields.items():
        if np.ndim(value) == 2:
            out[key] = np.pad(value, ((hy, hy), (hx, hx)), mode="wrap")
        elif np.ndim(value) == 3:
            out[key] = np.pad(value, ((0, 0), (hy, hy), (hx, hx)), mode="wrap")
        else:
            out[key] = value
    return out


def run(program, tmp_path, padded, hx, hy):
    """Run the program on fields with a halo (and the cap ``slant_path_reach`` if they hold one): the reaches
    and, if the halo covers them, the features (the priors of slant_priors_call as "NAME together") and the
    optical depths above."""
    ny, nx = padded["total_cloud_fraction"].shape[0] - 2 * hy, padded["total_cloud_fraction"].shape[1] - 2 * hx
    nz = padded["layer_optical_depth"].shape[0]
    source, target = tmp_path / "fields.bin", tmp_path / "features.bin"
    with open(source, "wb") as f:
        np.array([nx, ny, nz, hx, hy], dtype=np.int32).tofile(f)
        np.array([padded[k] for k in ("dx", "dy", "solar_zenith_angle", "solar_beam_azimuth")],
                 dtype=np.float64).tofile(f)
        np.array(["slant_path_reach" in padded], dtype=np.int32).tofile(f)
        np.array([padded.get("slant_path_reach", 0.0)], dtype=np.float64).tofile(f)
        for key in ("z_edge", "layer_cloud_fraction", "layer_optical_depth", "layer_clear_sky_optical_depth",
                    "total_cloud_fraction", "column_optical_depth_std", "cloud_edge_length"):
            np.ascontiguousarray(padded[key], dtype=np.float64).tofile(f)
        np.stack([padded[f"independent_column_{flux}"] for flux in ICA]).astype(np.float64).tofile(f)
    subprocess.run([str(program), str(source), str(target)], check=True, capture_output=True)
    data = target.read_bytes()
    n_reach = len(FEATURES) + 1
    reach = np.frombuffer(data[:8 * n_reach], dtype=np.int32).reshape(n_reach, 2)
    reaches = {name: tuple(int(v) for v in r) for name, r in zip(FEATURES + [SLANT_DEPTH_ABOVE], reach)}
    if len(data) == 8 * n_reach:
        return reaches, None, None
    values = np.frombuffer(data[8 * n_reach:], dtype=np.float64)
    n = nx * ny
    columns = FEATURES + [f"{name} together" for name in PRIORS]
    features = values[:len(columns) * n].reshape(len(columns), ny, nx)
    slant = values[len(columns) * n:].reshape(ny, nx, nz)
    return reaches, dict(zip(columns, features)), slant


def assert_close(fortran, numpy, name):
    bad = np.abs(fortran - numpy) > RTOL * np.abs(numpy) + ATOL
    assert not bad.any(), (f"{name}: {bad.sum()} columns differ, first at (iy, ix) {np.argwhere(bad)[0]}: "
                           f"Fortran {fortran[bad][0]!r}, numpy {numpy[bad][0]!r}")


def geometry(fields):
    """Layer edges, column size and sun angles, and the cap (None without one): halo.py's arguments."""
    return (fields["z_edge"], fields["dx"], fields["dy"], fields["solar_zenith_angle"], fields["solar_beam_azimuth"],
            fields.get("slant_path_reach"))


def assert_features_close(features, expected, where=""):
    """Every feature, and the priors computed together, equal numpy's (expected: (ny, nx, feature))."""
    for j, name in enumerate(FEATURES):
        assert_close(features[name], expected[..., j], name + where)
        if name in PRIORS:
            assert_close(features[f"{name} together"], expected[..., j], f"{name} together{where}")


def check_periodic(program, tmp_path, fields):
    """The Fortran reaches, features and optical depths above on the periodic domain equal numpy's."""
    ny, nx = fields["total_cloud_fraction"].shape
    hx, hy = halo_width(RECIPE, *geometry(fields))
    reaches, features, slant = run(program, tmp_path, with_halo(fields, hx, hy), hx, hy)
    reach = feature_reach(RECIPE, *geometry(fields))
    # The optical depth above reads as far as the path from the surface (halo.py's _path of all of z_edge).
    assert reaches == {**reach, SLANT_DEPTH_ABOVE: reach["slant_optical_depth"]}
    assert_features_close(features, compute_features(fields, RECIPE).reshape(ny, nx, -1))
    *path, cap = geometry(fields)
    above = slant_optical_depth_above(fields["layer_optical_depth"], *path, reach=cap)
    assert_close(slant, above.transpose(1, 2, 0), SLANT_DEPTH_ABOVE)


CASES = [(zenith, azimuth) for zenith in (0.0, 30.0, 60.0, 80.0) for azimuth in (0.0, 37.0, 90.0, 200.0, 315.0)]


@needs_gfortran
@pytest.mark.parametrize("zenith, azimuth", CASES)
def test_periodic_domain_equals_numpy(program, tmp_path, zenith, azimuth):
    # Columns of unequal sides (dx != dy) at the azimuth 37 degrees.
    dy = 700.0 if azimuth == 37.0 else 1000.0
    fields = dict(random_fields(int(zenith + azimuth), dy=dy), solar_zenith_angle=zenith, solar_beam_azimuth=azimuth)
    check_periodic(program, tmp_path, fields)


@needs_gfortran
@pytest.mark.parametrize("azimuth", [0.0, 45.0, 90.0, 180.0, 270.0])
def test_paths_through_column_faces_and_corners_equal_numpy(program, tmp_path, azimuth):
    # At 45 degrees over layers of whole columns the paths meet column faces (and at 45 degrees of azimuth
    # corners) exactly where layers end: the cuts coincide up to round-off, as in numpy.
    fields = dict(random_fields(11, dx=500.0, dy=500.0), solar_zenith_angle=45.0, solar_beam_azimuth=azimuth)
    fields["z_edge"] = 500.0 * np.arange(fields["layer_optical_depth"].shape[0] + 1)
    check_periodic(program, tmp_path, fields)


#: Caps of the paths' horizontal travel [m]: none at all (0), within the first layers, across a few columns,
#: and beyond any travel of these fields (no cap in effect).
CAPS = [0.0, 1200.0, 2500.0, 5000.0, 1.0e7]


@needs_gfortran
@pytest.mark.parametrize("cap", CAPS)
@pytest.mark.parametrize("zenith", [0.0, 30.0, 60.0, 80.0])
def test_capped_paths_equal_numpy(program, tmp_path, cap, zenith):
    # Azimuths all around, one per (cap, zenith); columns of unequal sides at 37 degrees.
    azimuth = (0.0, 37.0, 90.0, 200.0, 315.0, 142.0)[(CAPS.index(cap) + int(zenith) // 10) % 6]
    dy = 700.0 if azimuth == 37.0 else 1000.0
    fields = dict(random_fields(int(zenith + cap) % 1000, dy=dy), solar_zenith_angle=zenith,
                  solar_beam_azimuth=azimuth, slant_path_reach=cap)
    check_periodic(program, tmp_path, fields)


@needs_gfortran
@pytest.mark.parametrize("cap", [500.0, 1000.0, 1500.0])
@pytest.mark.parametrize("azimuth", [45.0, 180.0])
def test_cap_on_column_faces_and_layer_edges_equals_numpy(program, tmp_path, cap, azimuth):
    # At 45 degrees over layers of 500 m the cap's height z_cap = cap / tan(45 deg) falls on a layer edge (up to
    # the rounding of tan) and the path on column faces there: the cut layer gets a share of 0 or 1 of a part.
    fields = dict(random_fields(13, dx=500.0, dy=500.0), solar_zenith_angle=45.0, solar_beam_azimuth=azimuth,
                  slant_path_reach=cap)
    fields["z_edge"] = 500.0 * np.arange(fields["layer_optical_depth"].shape[0] + 1)
    check_periodic(program, tmp_path, fields)


@needs_gfortran
def test_cap_bounds_the_reach_of_a_low_sun(program, tmp_path):
    # At 89 degrees the paths cross more than 100 columns; a cap of 2500 m keeps them within 3 (and 6 for the
    # interception, out and back).
    fields = dict(random_fields(17), solar_zenith_angle=89.0, solar_beam_azimuth=120.0, slant_path_reach=2500.0)
    assert halo_width(RECIPE, *geometry(fields)[:-1])[0] > 100
    assert max(halo_width(RECIPE, *geometry(fields))) <= 6
    check_periodic(program, tmp_path, fields)


@needs_gfortran
@pytest.mark.parametrize("cap", [-1.0, float("nan"), float("inf")])
def test_a_cap_neither_finite_nor_positive_has_no_reach(program, tmp_path, cap):
    # The reach procedures refuse it: huge() (the halo check fails), and nothing is computed.
    fields = dict(random_fields(5), solar_zenith_angle=30.0, solar_beam_azimuth=10.0, slant_path_reach=cap)
    reaches, features, _ = run(program, tmp_path, with_halo(fields, 3, 3), 3, 3)
    assert set(reaches.values()) == {(2 ** 31 - 1, 2 ** 31 - 1)} and features is None


def cut(fields, y0, y1, x0, x1, hx, hy):
    """Sub-domain rows y0:y1, columns x0:x1 with a halo taken from the periodic domain."""
    ny, nx = fields["total_cloud_fraction"].shape
    rows, cols = np.arange(y0 - hy, y1 + hy) % ny, np.arange(x0 - hx, x1 + hx) % nx
    out = {}
    for key, value in fields.items():
        if np.ndim(value) == 2:
            out[key] = value[np.ix_(rows, cols)]
        elif np.ndim(value) == 3:
            out[key] = value[:, rows][:, :, cols]
        else:
            out[key] = value
    return out


@needs_gfortran
@pytest.mark.parametrize("zenith, azimuth, dy, cap", [(60.0, 200.0, 800.0, None), (30.0, 315.0, 1000.0, None),
                                                      (80.0, 60.0, 800.0, 2500.0), (70.0, 250.0, 1000.0, 1200.0)])
def test_sub_domains_equal_numpy(program, tmp_path, zenith, azimuth, dy, cap):
    # Four sub-domains of unequal size, each with the halo the recipe needs (with the cap, if any).
    fields = dict(random_fields(7, dy=dy), solar_zenith_angle=zenith, solar_beam_azimuth=azimuth)
    if cap is not None:
        fields["slant_path_reach"] = cap
    hx, hy = halo_width(RECIPE, *geometry(fields))
    for y0, y1 in ((0, 5), (5, 12)):
        for x0, x1 in ((0, 6), (6, 10)):
            part = cut(fields, y0, y1, x0, x1, hx, hy)
            _, features, _ = run(program, tmp_path, part, hx, hy)
            expected = subdomain_features(part, RECIPE, (hx, hy)).reshape(y1 - y0, x1 - x0, -1)
            assert_features_close(features, expected, f" of sub-domain ({y0}:{y1}, {x0}:{x1})")


@needs_gfortran
def test_sun_at_the_horizon_has_no_reach(program, tmp_path):
    # No halo suffices for a sun at the horizon: every reach is huge() and nothing is computed.
    fields = dict(random_fields(3), solar_zenith_angle=90.0, solar_beam_azimuth=10.0)
    reaches, features, _ = run(program, tmp_path, with_halo(fields, 2, 2), 2, 2)
    assert set(reaches.values()) == {(2 ** 31 - 1, 2 ** 31 - 1)} and features is None


@needs_gfortran
@pytest.mark.parametrize("needed", [{"slant_optical_depth", "direct_beam_prior_slant_minus_vertical"},
                                    {"direct_beam_interception_relative_change"}, {SLANT_DEPTH_ABOVE}])
def test_a_part_of_the_family_compiles_alone(tmp_path, needed):
    # In a private module every emitted procedure must be used (-Wall -Werror refuses unused ones) once the
    # assembler calls the features and their reach.
    called = {re.match(r"call (\w+)\(", statement).group(1) for name in needed
              for statement in ([slant_reach_call("p", name, "rx", "ry")]
                                + ([slant_call("p", name, "out")] if name in SLANT_FEATURES else []))}
    declared_public = {"p_slant_depth_above", "p_path_reach"} if SLANT_DEPTH_ABOVE in needed else set()
    (tmp_path / "p_features.f90").write_text(module_text("p", needed, called - declared_public))
    result = subprocess.run([GFORTRAN, *FLAGS, "-c", "p_features.f90"], cwd=tmp_path, capture_output=True, text=True)
    assert result.returncode == 0, result.stderr


def test_lines_fit_free_form_with_the_longest_prefix():
    prefix = "m" * 40          # export.fortran.fortran_name keeps at most 40 characters
    everything = set(SLANT_FEATURES) | {SLANT_DEPTH_ABOVE}
    texts = [slant_declarations(prefix, everything), slant_procedures(prefix, everything),
             slant_depth_above_procedure(prefix)]
    texts += ["        " + slant_call(prefix, name, "features_of_every_column(:, :)") for name in SLANT_FEATURES]
    texts += ["        " + slant_reach_call(prefix, name, "reach_x", "reach_y") for name in everything]
    longest = max(len(line) for text in texts for line in text.splitlines())
    assert longest < 132
    # Fortran 2008 names have at most 63 characters.
    assert max(len(name) for text in texts for name in re.findall(rf"\b{prefix}_\w+", text)) <= 63


def test_every_slant_feature_has_the_reach_of_halo_py():
    assert SLANT_FEATURES <= set(REACH)
    assert {name for name in REACH if "slant" in name or name.startswith("direct_beam")} == SLANT_FEATURES


def test_an_unknown_feature_is_named():
    with pytest.raises(ParameterError, match="cloud_top_height"):
        slant_call("t", "cloud_top_height", "out")
    with pytest.raises(ParameterError, match="no_such_feature"):
        slant_procedures("t", {"slant_optical_depth", "no_such_feature"})
