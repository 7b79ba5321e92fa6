"""The host features in the generated Fortran (``NAME_features``) against the numpy reference.

``surrogate3d.pairs.features.compute_features`` on a periodic domain (the Fortran given
the domain with a halo filled by periodic copy) and
``surrogate3d.runtime.halo.subdomain_features`` on sub-domains with halos must agree with
the Fortran to 1e-10 relative (1e-12 absolute near zero), for every feature the module
writes (all but the slant-path family), on random fields with exact zeros and ones and
on a scene of smooth round clouds, sun zenith angles 0-80 degrees and beam azimuths all
around; bad input gives the documented status and a message naming what is wrong.  The
shipped recipe with the slant-path family of :mod:`surrogate3d.export.fortran_slant`
(the direct-beam priors computed in one pass) is checked the same way with and without
the host's cap on the slant paths' reach (``slant_path_reach``).  The modules are
compiled once (``gfortran -std=f2008 -Wall -Werror -O2``); fields go to the test program
as stream-binary doubles, which read back exactly.
"""

import shutil
import subprocess
import sys
import tomllib
import types
from pathlib import Path

import numpy as np
import pytest

import surrogate3d.export
from surrogate3d.core.data_model import TARGETS
from surrogate3d.errors import ValidationError
from surrogate3d.export.fortran_features import IMPLEMENTED_FEATURES, features_module_text
from surrogate3d.pairs.features import FEATURES, compute_features
from surrogate3d.pairs.recipe import FeatureRecipe
from surrogate3d.runtime.halo import halo_width, subdomain_features

ROOT = Path(__file__).resolve().parents[2]
GFORTRAN = shutil.which("gfortran")
FLAGS = ["-std=f2008", "-Wall", "-Werror", "-O2"]
needs_gfortran = pytest.mark.skipif(GFORTRAN is None, reason="gfortran is not installed "
                                    "(make test installs Debian's gfortran)")

#: The slant-path family of the interface contract, written by surrogate3d/export/fortran_slant.py.
SLANT_FAMILY = {"slant_optical_depth", "slant_minus_vertical_optical_depth", "direct_beam_prior",
                "direct_beam_prior_minus_independent_column", "direct_beam_prior_slant_minus_vertical",
                "direct_beam_interception_tilted", "direct_beam_interception_tilted_minus_vertical",
                "direct_beam_interception_relative_change"}

#: A 40-character prefix, the longest a model name gives: every generated line must still fit.
LONG_PREFIX = "every_feature_" + "x" * 26

_PLANES = ("surface_albedo", "total_cloud_fraction", "column_optical_depth_mean", "column_optical_depth_std",
           "cloud_edge_length")
_LAYERS = ("layer_cloud_fraction", "layer_optical_depth", "layer_clear_sky_optical_depth")


def shipped_recipe():
    """training/features.toml without the slant-path family."""
    data = tomllib.loads((ROOT / "training" / "features.toml").read_text())
    assert set(data["features"]) - IMPLEMENTED_FEATURES <= SLANT_FAMILY
    return FeatureRecipe([f for f in data["features"] if f in IMPLEMENTED_FEATURES], data["parameters"],
                         name="shipped")


def every_recipe():
    """Every feature of the module, in registry order, with parameters off the defaults: radii below
    one column and between columns, a layer cloud-fraction threshold, a side distance of 1.5 columns."""
    return FeatureRecipe([f for f in FEATURES if f in IMPLEMENTED_FEATURES],
                         {"neighbour_radii": [700.0, 2500.0], "edge_cloud_fraction": 0.3, "edge_distance_cap": 3000.0,
                          "layer_cloud_fraction_threshold": 0.1, "cloud_side_distance": 1500.0}, name="every")


def slant_stub():
    """A stand-in for surrogate3d/export/fortran_slant.py implementing slant_optical_depth along the
    vertical (exact at zenith 0) with a fixed reach of (2, 3) columns: the assembler's wiring only."""
    def procedures(prefix, needed):
        assert needed == {"slant_optical_depth"}
        return f"""\
  pure subroutine {prefix}_stub_slant(nx, ny, nz, hx, hy, layer_optical_depth, solar_zenith_angle, out)
    integer, intent(in) :: nx, ny, nz, hx, hy
    real(real64), intent(in) :: layer_optical_depth(1-hx:nx+hx, 1-hy:ny+hy, nz), solar_zenith_angle
    real(real64), intent(out) :: out(nx, ny)
    integer :: k
    out = layer_optical_depth(1:nx, 1:ny, 1)
    do k = 2, nz
      out = out + layer_optical_depth(1:nx, 1:ny, k)
    end do
    out = out / cos(solar_zenith_angle * {prefix}_degree * {prefix}_stub_one)
  end subroutine {prefix}_stub_slant
"""
    return types.SimpleNamespace(
        SLANT_FEATURES=frozenset({"slant_optical_depth"}),
        PRIOR_FEATURES=frozenset(),
        slant_procedures=procedures,
        slant_call=lambda prefix, feature, out, reach=None: (f"call {prefix}_stub_slant(nx, ny, nz, hx, hy, "
                                                             f"layer_optical_depth, solar_zenith_angle, {out})"),
        slant_reach_call=lambda prefix, feature, rx, ry, reach=None: f"{rx} = 2; {ry} = 3",
        slant_declarations=lambda prefix, needed: f"  real(real64), parameter :: {prefix}_stub_one = 1.0_real64\n")


def stub_recipe():
    return FeatureRecipe(["cloud_fraction", "slant_optical_depth"], name="stub")


def _use_slant(monkeypatch, module):
    # "from . import fortran_slant" reads the package attribute first, then sys.modules.
    monkeypatch.setattr(surrogate3d.export, "fortran_slant", module, raising=False)
    monkeypatch.setitem(sys.modules, "surrogate3d.export.fortran_slant", module)
    if module is None:
        monkeypatch.delattr(surrogate3d.export, "fortran_slant")


def sun_recipe():
    """A feature that reads no field: every argument of the module unread (compiles without warnings)."""
    return FeatureRecipe(["cos_solar_zenith"], name="sun")


def full_recipe():
    """training/features.toml as it is (the slant-path features and priors included) and the tilted
    interceptions: every family of fortran_slant.py beside the windows."""
    data = tomllib.loads((ROOT / "training" / "features.toml").read_text())
    features = data["features"] + ["direct_beam_interception_tilted", "direct_beam_interception_relative_change"]
    return FeatureRecipe(features, data["parameters"], name="full")


#: Test modules: (prefix, recipe); "stub" with the stand-in of slant_stub, the others with fortran_slant.py.
MODULES = {"shipped": ("shipped", shipped_recipe), "every": (LONG_PREFIX, every_recipe), "stub": ("stub", stub_recipe),
           "sun": ("sun", sun_recipe), "full": ("full", full_recipe)}


def _program():
    cases = []
    for key, (prefix, _) in MODULES.items():
        cases.append(f"""\
  case ('{key}')
    n_features = {prefix}_n_host_features
    allocate (features(n_features, nx * ny))
    call {prefix}_halo_needed(nz, z_edge, scalars(1), scalars(2), scalars(3), scalars(4), &
        hx_needed, hy_needed, cap)
    call {prefix}_host_features(nx, ny, nz, hx, hy, scalars(1), scalars(2), scalars(3), &
        scalars(4), z_edge, layers(:, :, :, 1), layers(:, :, :, 2), layers(:, :, :, 3), planes(:, :, 1), planes(:, :, 2), &
        planes(:, :, 3), planes(:, :, 4), planes(:, :, 5), fluxes, features, status, message, cap)""")
    uses = "\n".join(f"  use {prefix}_features" for prefix, _ in MODULES.values())
    return f"""\
program features_check
  use, intrinsic :: iso_fortran_env, only: real64, int32
{uses}
  implicit none
  character(len=512) :: which, input, output
  character(len=400) :: message
  integer(int32) :: header(6)
  integer :: unit, nx, ny, nz, hx, hy, hx_needed, hy_needed, status, n_features
  real(real64) :: scalars(5)
  real(real64), allocatable :: z_edge(:), layers(:, :, :, :), planes(:, :, :), fluxes(:, :, :), features(:, :)
  ! The cap slant_path_reach: passed unallocated (an absent optional argument) unless header(6) says there is one.
  real(real64), allocatable :: cap
  call get_command_argument(1, which)
  call get_command_argument(2, input)
  call get_command_argument(3, output)
  open (newunit=unit, file=trim(input), access='stream', form='unformatted', status='old', action='read')
  read (unit) header
  nx = header(1)
  ny = header(2)
  nz = header(3)
  hx = header(4)
  hy = header(5)
  allocate (z_edge(nz + 1), layers(1-hx:nx+hx, 1-hy:ny+hy, nz, 3), planes(1-hx:nx+hx, 1-hy:ny+hy, 5), &
            fluxes(1-hx:nx+hx, 1-hy:ny+hy, 5))
  read (unit) scalars, z_edge, layers, planes, fluxes
  close (unit)
  if (header(6) /= 0) cap = scalars(5)
  select case (trim(which))
{chr(10).join(cases)}
  case default
    stop 'unknown module'
  end select
  open (newunit=unit, file=trim(output), access='stream', form='unformatted', status='replace', action='write')
  write (unit) int(status, int32), int(hx_needed, int32), int(hy_needed, int32), int(n_features, int32), message
  write (unit) features
  close (unit)
end program features_check
"""


@pytest.fixture(scope="module")
def program(tmp_path_factory):
    """The test program and the three generated modules, compiled once."""
    if GFORTRAN is None:
        pytest.skip("gfortran is not installed")
    folder = tmp_path_factory.mktemp("fortran_features")
    sources = []
    for key, (prefix, recipe) in MODULES.items():
        recipe = recipe()
        with pytest.MonkeyPatch.context() as patch:
            if key == "stub":
                _use_slant(patch, slant_stub())
            text = features_module_text(prefix, recipe, recipe.column_names())
        path = folder / f"{prefix}_features.f90"
        path.write_text(text)
        sources.append(path.name)
    (folder / "check.f90").write_text(_program())
    done = subprocess.run([GFORTRAN, *FLAGS, *sources, "check.f90", "-o", "check"], cwd=folder,
                          capture_output=True, text=True)
    assert done.returncode == 0, done.stderr
    return folder / "check"


def run(program, which, fields, halo):
    """Run the Fortran on fields given with a halo of (hx, hy) columns: status, halo needed, message,
    features (n_columns, n_features) in numpy's row order."""
    hx, hy = halo
    nz = len(fields["z_edge"]) - 1
    nyb, nxb = fields["total_cloud_fraction"].shape
    folder = program.parent
    input_path, output_path = folder / f"{which}.in", folder / f"{which}.out"
    absent = np.zeros((nyb, nxb))
    with open(input_path, "wb") as stream:
        np.array([nxb - 2 * hx, nyb - 2 * hy, nz, hx, hy, "slant_path_reach" in fields], dtype="<i4").tofile(stream)
        np.array([fields[k] for k in ("dx", "dy", "solar_zenith_angle", "solar_beam_azimuth")]
                 + [fields.get("slant_path_reach", 0.0)], "<f8").tofile(stream)
        np.asarray(fields["z_edge"], "<f8").tofile(stream)
        np.stack([fields.get(k, np.zeros((nz, nyb, nxb))) for k in _LAYERS]).astype("<f8").tofile(stream)
        np.stack([fields.get(k, absent) for k in _PLANES]).astype("<f8").tofile(stream)
        np.stack([fields.get(f"independent_column_{f}", absent) for f in TARGETS]).astype("<f8").tofile(stream)
    subprocess.run([str(program), which, str(input_path), str(output_path)], check=True, timeout=60)
    raw = output_path.read_bytes()
    status, hx_needed, hy_needed, n_features = np.frombuffer(raw[:16], "<i4")
    message = raw[16:416].decode().strip()
    features = np.frombuffer(raw[416:], "<f8").reshape(-1, n_features)
    return int(status), (int(hx_needed), int(hy_needed)), message, features


def random_fields(seed, nx, ny, dx=1000.0, dy=1000.0, zenith=30.0, azimuth=37.0, nz=6):
    """Random host fields on a periodic (ny, nx) domain: cloud fractions with exact zeros, ones and values
    at the edge thresholds, optical depths with zeros (whole columns of zero optical depth)."""
    rng = np.random.default_rng(seed)
    shape = (nz, ny, nx)
    fraction = rng.uniform(0.0, 1.0, shape)
    draw = rng.uniform(size=shape)
    fraction[draw < 0.35] = 0.0
    fraction[draw > 0.85] = 1.0
    fraction[(draw > 0.35) & (draw < 0.38)] = 0.1          # at the layer threshold of every_recipe
    clear_sky = rng.uniform(0.0, 0.05, shape)
    tau = clear_sky + fraction * rng.exponential(8.0, shape)
    empty = rng.uniform(size=(ny, nx)) < 0.15
    tau[:, empty] = 0.0
    fraction[:, empty] = 0.0
    total = np.clip(fraction.max(axis=0) * rng.uniform(1.0, 1.6, (ny, nx)), 0.0, 1.0)
    pick = rng.uniform(size=(ny, nx))
    total[pick < 0.08] = 0.5                                  # at edge_cloud_fraction of the shipped recipe
    total[(pick > 0.08) & (pick < 0.14)] = 0.3                # and of every_recipe
    mean = tau.sum(axis=0) * rng.uniform(0.8, 1.2, (ny, nx))
    mean[rng.uniform(size=(ny, nx)) < 0.1] = 0.0
    direct, diffuse = rng.uniform(0.0, 0.7, (ny, nx)), rng.uniform(0.02, 0.4, (ny, nx))
    fields = {
        "dx": dx, "dy": dy, "solar_zenith_angle": zenith, "solar_beam_azimuth": azimuth,
        "z_edge": np.concatenate([[0.0], np.cumsum(rng.uniform(200.0, 900.0, nz))]),
        "layer_cloud_fraction": fraction, "layer_optical_depth": tau, "layer_clear_sky_optical_depth": clear_sky,
        "surface_albedo": rng.uniform(0.0, 0.9, (ny, nx)), "total_cloud_fraction": total,
        "column_optical_depth_mean": mean, "column_optical_depth_std": mean * rng.uniform(0.0, 1.5, (ny, nx)),
        "cloud_edge_length": rng.uniform(0.0, 3e-3, (ny, nx)) * (total > 0.0),
        "independent_column_surface_downward_direct_flux": direct,
        "independent_column_surface_downward_diffuse_flux": diffuse,
        "independent_column_toa_upward_flux": rng.uniform(0.05, 0.8, (ny, nx)),
        "independent_column_atmosphere_absorption": rng.uniform(0.05, 0.25, (ny, nx)),
    }
    return fields


def round_clouds(nx, ny, zenith, azimuth, dx=1000.0, dy=1000.0, nz=8):
    """A scene like the demo's: two smooth round clouds (cumulus-like, tops at different heights) in
    clear sky with a little haze; the host fields are smooth, with a wide clear region."""
    y, x = np.mgrid[0:ny, 0:nx].astype(float)
    z_edge = np.linspace(0.0, 4000.0, nz + 1)
    fraction = np.zeros((nz, ny, nx))
    tau = np.full((nz, ny, nx), 0.01)
    for cx, cy, radius, top_layer, depth in ((3.5, 4.0, 3.0, 5, 20.0), (9.0, 10.0, 2.2, 3, 8.0)):
        cover = np.clip(1.2 - np.hypot(x - cx, y - cy) / radius, 0.0, 1.0)
        fraction[1:top_layer + 1] = np.maximum(fraction[1:top_layer + 1], cover)
        tau[1:top_layer + 1] += depth * cover / top_layer
    total = fraction.max(axis=0)
    fields = {"dx": dx, "dy": dy, "solar_zenith_angle": zenith, "solar_beam_azimuth": azimuth, "z_edge": z_edge,
              "layer_cloud_fraction": fraction, "layer_optical_depth": tau,
              "layer_clear_sky_optical_depth": np.full((nz, ny, nx), 0.01), "surface_albedo": np.full((ny, nx), 0.15),
              "total_cloud_fraction": total, "column_optical_depth_mean": tau.sum(axis=0),
              "column_optical_depth_std": 0.3 * tau.sum(axis=0) * total,
              "cloud_edge_length": 4e-4 * total * (1.0 - total),
              "independent_column_surface_downward_direct_flux": np.exp(-tau.sum(axis=0)),
              "independent_column_surface_downward_diffuse_flux": 0.2 * (1.0 - np.exp(-tau.sum(axis=0))),
              "independent_column_toa_upward_flux": 0.1 + 0.5 * total,
              "independent_column_atmosphere_absorption": np.full((ny, nx), 0.18)}
    return fields


def with_halo(fields, hx, hy):
    """The fields of a periodic domain with a halo of periodic copies (numpy's pad mode 'wrap')."""
    out = dict(fields)
    for key, value in fields.items():
        if np.ndim(value) >= 2 and key != "z_edge":
            pad = [(0, 0)] * (np.ndim(value) - 2) + [(hy, hy), (hx, hx)]
            out[key] = np.pad(value, pad, mode="wrap")
    return out


def sub_block(fields, x0, y0, width, height):
    """Columns [x0, x0 + width) x [y0, y0 + height) of the planes and layer fields."""
    return {k: (v[..., y0:y0 + height, x0:x0 + width] if np.ndim(v) >= 2 and k != "z_edge" else v)
            for k, v in fields.items()}


def assert_equal_features(fortran, numpy, names):
    """Equal to 1e-10 relative, 1e-12 absolute near zero (the contract's tolerance)."""
    assert fortran.shape == numpy.shape
    assert np.all(np.isfinite(fortran))
    bad = ~np.isclose(fortran, numpy, rtol=1e-10, atol=1e-12)
    if bad.any():
        row, column = np.argwhere(bad)[0]
        raise AssertionError(f"{names[column]} row {row}: Fortran {fortran[row, column]!r}, numpy {numpy[row, column]!r}"
                             f" ({bad.sum()} values differ)")


GEOMETRIES = [(zenith, azimuth) for zenith in (0.0, 30.0, 60.0, 80.0) for azimuth in (0.0, 37.0, 90.0, 200.0, 315.0)]


@needs_gfortran
@pytest.mark.parametrize("key", ["shipped", "every"])
def test_periodic_domain_equals_numpy(program, key):
    recipe = MODULES[key][1]()
    names = recipe.column_names()
    for i, (zenith, azimuth) in enumerate(GEOMETRIES):
        fields = random_fields(i, 12, 14, zenith=zenith, azimuth=azimuth)
        halo = halo_width(recipe, fields["z_edge"], 1000.0, 1000.0, zenith, azimuth)
        status, needed, message, features = run(program, key, with_halo(fields, *halo), halo)
        assert (status, message) == (0, "")
        assert needed == halo
        assert_equal_features(features, compute_features(fields, recipe), names)


@needs_gfortran
@pytest.mark.parametrize("key", ["shipped", "every"])
def test_round_clouds_equal_numpy(program, key):
    recipe = MODULES[key][1]()
    for zenith, azimuth in ((0.0, 0.0), (60.0, 37.0), (80.0, 200.0)):
        fields = round_clouds(14, 16, zenith, azimuth)
        halo = (6, 7)                                        # wider than needed: halo_width is (5, 5) at most
        status, _, message, features = run(program, key, with_halo(fields, *halo), halo)
        assert (status, message) == (0, "")
        assert_equal_features(features, compute_features(fields, recipe), recipe.column_names())


@needs_gfortran
def test_columns_of_unequal_size(program):
    # dx != dy: the windows and edge distances reach further along y (8 columns at 700 m), more than
    # half the domain, so numpy's periodic windows wrap past themselves.
    recipe = shipped_recipe()
    fields = random_fields(40, 12, 14, dx=1000.0, dy=700.0, zenith=60.0, azimuth=115.0)
    halo = halo_width(recipe, fields["z_edge"], 1000.0, 700.0, 60.0, 115.0)
    assert halo == (5, 8)
    status, needed, message, features = run(program, "shipped", with_halo(fields, *halo), halo)
    assert (status, message, needed) == (0, "", halo)
    assert_equal_features(features, compute_features(fields, recipe), recipe.column_names())


@needs_gfortran
@pytest.mark.parametrize("key, geometry, cap", [("shipped", (30.0, 37.0), None), ("shipped", (80.0, 315.0), None),
                                                ("every", (60.0, 200.0), None), ("full", (50.0, 30.0), None),
                                                ("full", (80.0, 315.0), 2500.0), ("full", (65.0, 130.0), 0.0)])
def test_subdomains_equal_numpy(program, key, geometry, cap):
    # A 12 x 14 domain in 4 sub-domains of 6 x 7 own columns, each with the halo the recipe needs (for the cap).
    recipe = MODULES[key][1]()
    zenith, azimuth = geometry
    fields = random_fields(50, 12, 14, zenith=zenith, azimuth=azimuth)
    if cap is not None:
        fields["slant_path_reach"] = cap
    hx, hy = halo_width(recipe, fields["z_edge"], 1000.0, 1000.0, zenith, azimuth, slant_path_reach=cap)
    padded = with_halo(fields, hx, hy)
    whole = compute_features(fields, recipe).reshape(14, 12, -1)
    names = recipe.column_names()
    # The Fortran of the whole domain: every feature of a column depends on the values it reads only, not on
    # the block, so that the sub-domains give it bit for bit (a tree's split cannot fall otherwise in another
    # decomposition).
    status, _, message, fortran_whole = run(program, key, padded, (hx, hy))
    assert (status, message) == (0, "")
    fortran_whole = fortran_whole.reshape(14, 12, -1)
    for y0 in (0, 7):
        for x0 in (0, 6):
            block = sub_block(padded, x0, y0, 6 + 2 * hx, 7 + 2 * hy)
            status, _, message, features = run(program, key, block, (hx, hy))
            assert (status, message) == (0, "")
            assert_equal_features(features, subdomain_features(block, recipe, (hx, hy)), names)
            assert_equal_features(features, whole[y0:y0 + 7, x0:x0 + 6].reshape(42, -1), names)
            np.testing.assert_array_equal(features, fortran_whole[y0:y0 + 7, x0:x0 + 6].reshape(42, -1))


#: Caps of the slant paths' horizontal travel [m]: none in effect (0), within the lowest layers, across a few
#: columns, and beyond any travel of these fields (the same as no cap).
CAPS = [0.0, 1200.0, 2500.0, 5000.0, 1.0e7]


@needs_gfortran
@pytest.mark.parametrize("cap", [None] + CAPS)
def test_slant_family_with_a_cap_equals_numpy(program, cap):
    # The shipped recipe with its slant-path features and priors (and the tilted interceptions), zenith 0-80
    # degrees, azimuths all around; the halo is what numpy's halo_width gives for the cap.
    recipe = full_recipe()
    names = recipe.column_names()
    # Every third geometry (zenith angles and azimuths mixed), from a different one for each cap.
    first = 0 if cap is None else CAPS.index(cap) + 1
    for i, (zenith, azimuth) in enumerate(GEOMETRIES[first::3]):
        fields = random_fields(100 + i, 12, 14, zenith=zenith, azimuth=azimuth)
        if cap is not None:
            fields["slant_path_reach"] = cap
        halo = halo_width(recipe, fields["z_edge"], 1000.0, 1000.0, zenith, azimuth, slant_path_reach=cap)
        status, needed, message, features = run(program, "full", with_halo(fields, *halo), halo)
        assert (status, message, needed) == (0, "", halo)
        assert_equal_features(features, compute_features(fields, recipe), names)


def test_priors_and_neighbourhood_means_are_computed_once():
    # The three direct-beam priors in one call; one neighbourhood mean per field and radius (mean, contrast and
    # excess of the same field and radius share it): 3 radii x (cloud fraction, ln(1 + tau), 3 fluxes).
    recipe = full_recipe()
    text = features_module_text("full", recipe, recipe.column_names())
    assert text.count("call full_direct_priors(") == 1
    assert text.count("call full_window_mean(") == 15


@needs_gfortran
@pytest.mark.parametrize("cap", [-1.0, float("nan"), float("inf")])
def test_a_bad_cap_is_refused(program, cap):
    fields = dict(random_fields(110, 12, 14, zenith=60.0), slant_path_reach=cap)
    status, needed, message, features = run(program, "full", with_halo(fields, 5, 5), (5, 5))
    assert status == 3 and needed == (-1, -1)
    assert message.startswith("slant_path_reach = ") and message.endswith("must be finite and >= 0 (or absent: no cap)")
    assert np.all(np.isnan(features))


@needs_gfortran
def test_the_halo_check_uses_the_capped_reach(program):
    # At 85 degrees the paths cross ~60 columns; capped at 2500 m the tilted interception (out along the paths
    # and back) reads 6: that halo is enough with the cap and too narrow without it (the interception named:
    # the first column reading furthest).
    recipe = full_recipe()
    fields = random_fields(120, 12, 14, zenith=85.0, azimuth=250.0)
    capped = dict(fields, slant_path_reach=2500.0)
    halo = halo_width(recipe, fields["z_edge"], 1000.0, 1000.0, 85.0, 250.0, slant_path_reach=2500.0)
    assert halo == (5, 6)
    status, needed, message, features = run(program, "full", with_halo(capped, *halo), halo)
    assert (status, message, needed) == (0, "", halo)
    assert_equal_features(features, compute_features(capped, recipe), recipe.column_names())
    status, needed, message, _ = run(program, "full", with_halo(fields, *halo), halo)
    assert status == 1 and needed == halo_width(recipe, fields["z_edge"], 1000.0, 1000.0, 85.0, 250.0) == (18, 48)
    assert message.startswith("feature direct_beam_interception_tilted reads 18 columns along x and 48 along y")


@needs_gfortran
def test_total_surface_flux_is_direct_plus_diffuse(program):
    # The host's slot 1 (surface_downward_flux) is not read: the feature is direct + diffuse, as
    # numpy forms it from the registry's keys; NaN in slot 1 changes nothing.
    recipe = shipped_recipe()
    fields = random_fields(60, 12, 14)
    padded = with_halo(fields, 5, 5)
    padded["independent_column_surface_downward_flux"] = np.full_like(padded["surface_albedo"], np.nan)
    padded["layer_clear_sky_optical_depth"] = np.full_like(padded["layer_optical_depth"], np.nan)
    status, _, message, features = run(program, "shipped", padded, (5, 5))
    assert (status, message) == (0, "")
    column = recipe.column_names().index("independent_column_surface_downward_flux")
    total = (fields["independent_column_surface_downward_direct_flux"]
             + fields["independent_column_surface_downward_diffuse_flux"]).reshape(-1)
    np.testing.assert_array_equal(features[:, column], total)


@needs_gfortran
def test_halo_too_narrow_names_the_feature(program):
    recipe = shipped_recipe()
    fields = random_fields(70, 12, 14)
    padded = with_halo(fields, 3, 3)
    status, needed, message, features = run(program, "shipped", padded, (3, 3))
    assert status == 1 and needed == (5, 5)
    # numpy names the same feature: the first of those reading furthest.
    with pytest.raises(ValidationError, match="neighbour_mean_cloud_fraction_5000m reads 5 columns"):
        subdomain_features(padded, recipe, 3)
    assert message.startswith("feature neighbour_mean_cloud_fraction_5000m reads 5 columns along x and 5 along y; "
                              "the halo has 3 and 3")
    assert np.all(np.isnan(features))


@needs_gfortran
def test_bad_values_are_refused_with_field_and_index(program):
    fields = with_halo(random_fields(80, 12, 14), 5, 5)
    nan = dict(fields, layer_optical_depth=fields["layer_optical_depth"].copy())
    nan["layer_optical_depth"][2, 0, 3] = np.nan               # k = 3, iy = 1 - 5, ix = 4 - 5: in the halo
    status, _, message, _ = run(program, "shipped", nan, (5, 5))
    assert status == 2 and message == "layer_optical_depth(-1, -4, 3) = NaN: not finite"
    flux = dict(fields, independent_column_toa_upward_flux=fields["independent_column_toa_upward_flux"].copy())
    flux["independent_column_toa_upward_flux"][7, 9] = np.inf
    status, _, message, _ = run(program, "shipped", flux, (5, 5))
    assert status == 2 and message == "independent_column_fluxes(5, 3, 4) (toa_upward_flux) = Inf: not finite"
    over = dict(fields, total_cloud_fraction=fields["total_cloud_fraction"].copy())
    over["total_cloud_fraction"][6, 8] = 1.25
    status, _, message, _ = run(program, "shipped", over, (5, 5))
    assert status == 3 and message.startswith("total_cloud_fraction(4, 2) = 1.25") and message.endswith("[0, 1]")
    low_sun = dict(fields, solar_zenith_angle=95.0)
    status, needed, message, _ = run(program, "shipped", low_sun, (5, 5))
    assert status == 4 and message.startswith("solar_zenith_angle = 95.") and needed == (-1, -1)
    edges = dict(fields, z_edge=fields["z_edge"][[0, 2, 1, 3, 4, 5, 6]])
    status, needed, message, _ = run(program, "shipped", edges, (5, 5))
    assert status == 3 and message.startswith("z_edge(3) = ") and needed == (-1, -1)


@needs_gfortran
def test_fields_not_read_are_not_checked(program):
    fields = with_halo(random_fields(85, 12, 14, zenith=60.0), 1, 1)
    for key, value in fields.items():
        if np.ndim(value) >= 2 and key != "z_edge":
            fields[key] = np.full_like(value, np.nan)
    status, needed, message, features = run(program, "sun", fields, (1, 1))
    assert (status, message, needed) == (0, "", (0, 0))
    np.testing.assert_allclose(features, 0.5, rtol=1e-15)


@needs_gfortran
def test_slant_features_come_from_fortran_slant(program):
    # The stand-in's features at zenith 0 (a vertical path) and its reach (2, 3) in the halo.
    recipe = stub_recipe()
    fields = random_fields(90, 12, 14, zenith=0.0)
    status, needed, message, features = run(program, "stub", with_halo(fields, 3, 3), (3, 3))
    assert (status, message, needed) == (0, "", (2, 3))
    assert_equal_features(features, compute_features(fields, recipe), recipe.column_names())
    status, _, message, _ = run(program, "stub", with_halo(fields, 2, 2), (2, 2))
    assert status == 1 and message.startswith("feature slant_optical_depth reads 2 columns along x and 3 along y")


def test_missing_slant_generator_names_the_feature(monkeypatch):
    _use_slant(monkeypatch, None)
    recipe = FeatureRecipe(["cloud_fraction", "direct_beam_prior"])
    with pytest.raises(ValidationError, match=r"\['direct_beam_prior'\].*fortran_slant is not installed"):
        features_module_text("m", recipe, recipe.column_names())
    _use_slant(monkeypatch, slant_stub())
    with pytest.raises(ValidationError, match=r"\['direct_beam_prior'\].*fortran_slant writes slant_optical_depth"):
        features_module_text("m", recipe, recipe.column_names())


def test_columns_and_prefix_are_checked():
    recipe = FeatureRecipe(["cloud_fraction", "neighbour_mean_cloud_fraction"], {"neighbour_radii": [2000.0]})
    with pytest.raises(ValidationError, match="neighbour_mean_cloud_fraction_1000m"):
        features_module_text("m", recipe, ["neighbour_mean_cloud_fraction_1000m"])
    with pytest.raises(ValidationError, match="more than once"):
        features_module_text("m", recipe, ["cloud_fraction", "cloud_fraction"])
    with pytest.raises(ValidationError, match="Fortran name"):
        features_module_text("2m", recipe, ["cloud_fraction"])
    # A subset of the columns, in another order: only what is asked for is emitted.
    text = features_module_text("m", recipe, ["neighbour_mean_cloud_fraction_2000m"])
    assert "m_n_host_features = 1" in text and "m_edge_distance" not in text
