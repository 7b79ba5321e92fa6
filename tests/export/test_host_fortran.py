"""The one-call host interface in Fortran (``NAME_host``) against the numpy runtime, whole and split.

A scene of our own is written as host field files (``surrogate3d host-fields``): the whole
periodic domain and four sub-domains with halos.  The generated driver corrects them with
the shipped boosted model and its heating-rate model: the whole domain in one call, the
sub-domains as four processes of a decomposed host.  Both must equal the numpy result on
the periodic domain (features, prediction, gate, the profile's column sum in the
consistency step, layers matched) to 1e-10: the Fortran and numpy code paths are the same
arithmetic, and the halo makes a sub-domain's features those of the whole domain.
"""

import re
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from surrogate3d.cli import main
from surrogate3d.core.data_model import TARGETS
from surrogate3d.learn import apply_correction
from surrogate3d.pairs.layer_features import layer_sum
from surrogate3d.pairs.profiles import slant_optical_depth_above
from surrogate3d.runtime import load_coefficients
from surrogate3d.runtime.host_field_file import read_host_field_file
from surrogate3d.runtime.profile import match_column_integral

REPO = Path(__file__).resolve().parents[2]
SHIPPED = REPO / "models" / "default"
GUIDE = REPO / "docs" / "host-model-guide.md"

pytestmark = pytest.mark.skipif(shutil.which("gfortran") is None,
                                reason="gfortran is not installed (make test installs it)")


def _guide_commands():
    """The shell block of the guide's section on the decomposed Fortran host."""
    text = GUIDE.read_text()
    section = text[text.index("## Corrected fluxes in a Fortran host"):]
    block = re.search(r"```sh\n(.*?)```", section, re.S).group(1)
    return block


@pytest.fixture(scope="module")
def guide_run(tmp_path_factory):
    """The guide's commands, run in a fresh directory beside a link to models/."""
    work = tmp_path_factory.mktemp("host")
    (work / "models").symlink_to(REPO / "models")
    script = _guide_commands()
    # The environment's own command line (the venv the tests run in).
    bin_dir = Path(sys.executable).parent
    env = {"PATH": f"{bin_dir}:/usr/bin:/bin", "HOME": str(work)}
    done = subprocess.run(["bash", "-e", "-c", script], cwd=work, env=env, capture_output=True, text=True)
    assert done.returncode == 0, done.stderr[-2000:]
    return work


def _driver_output(path):
    rows = np.loadtxt(path, ndmin=2)
    order = np.lexsort((rows[:, 0], rows[:, 1]))          # row-major (iy, ix)
    return rows[order, 2:]


def _numpy_reference(whole_file):
    """Corrected fluxes and layers of the periodic domain from the numpy runtime."""
    fields, layout = read_host_field_file(whole_file)
    hx, hy = layout["halo"]
    inner = {}
    for key, value in fields.items():
        inner[key] = value[..., hy:value.shape[-2] - hy, hx:value.shape[-1] - hx] if np.ndim(value) >= 2 else value
    for m, flux in enumerate(TARGETS):
        inner[f"independent_column_{flux}"] = inner["independent_column_fluxes"][m]
    del inner["independent_column_fluxes"]
    layer_absorption = inner.pop("independent_column_layer_absorption")
    model = load_coefficients(SHIPPED / "boosted.coefficients.json")
    profile = load_coefficients(SHIPPED / "profile.coefficients.json")
    features = model.host_features(inner)
    correction = model.predict(features, check_envelope=False)
    gated = model.clear_sky_mask(features)
    nz, ny, nx = inner["layer_optical_depth"].shape
    z = inner["z_edge"]
    slant = slant_optical_depth_above(inner["layer_optical_depth"], z, inner["dx"], inner["dy"],
                                      inner["solar_zenith_angle"], inner["solar_beam_azimuth"],
                                      reach=inner.get("slant_path_reach"))

    def per_column(a):
        return np.moveaxis(a, 0, -1).reshape(ny * nx, nz)

    layer_fields = {"bottom": np.broadcast_to(z[:-1], (ny * nx, nz)), "top": np.broadcast_to(z[1:], (ny * nx, nz)),
                    "optical_depth": per_column(inner["layer_optical_depth"]),
                    "cloud_fraction": per_column(inner["layer_cloud_fraction"]),
                    "independent_column_absorption": per_column(layer_absorption),
                    "slant_optical_depth_above": per_column(slant),
                    "cos_solar_zenith": np.full(ny * nx, np.cos(np.radians(inner["solar_zenith_angle"])))}
    layers = profile.predict_profile(features, layer_fields, check_envelope=False)
    layers = np.where(gated[:, None] & np.isfinite(layers), 0.0, layers)
    m = TARGETS.index("atmosphere_absorption")
    correction[:, m] = layer_sum(layers)
    ica = np.stack([inner[f"independent_column_{flux}"].reshape(-1) for flux in TARGETS], axis=1)
    out = apply_correction(ica, correction, inner["surface_albedo"].reshape(-1), np.zeros(ny * nx, int),
                           clear_sky=gated)
    fluxes = out.flux
    matched = match_column_integral(layers, fluxes[:, m] - ica[:, m], layer_fields["independent_column_absorption"])
    return np.concatenate([fluxes, matched], axis=1)


def test_guide_commands_give_the_numpy_corrections_whole_and_split(guide_run):
    whole = _driver_output(guide_run / "host-demo" / "whole.out")
    split = _driver_output(guide_run / "host-demo" / "split.out")
    reference = _numpy_reference(guide_run / "host-demo" / "fields" / "whole.txt")
    assert whole.shape == reference.shape == split.shape
    # Split over four sub-domains with halos: the periodic single-domain result (issue: 1e-10).
    np.testing.assert_allclose(split, whole, rtol=1e-10, atol=1e-12)
    np.testing.assert_allclose(whole, reference, rtol=1e-10, atol=1e-12)
    assert np.isfinite(whole).all()


def _run_driver(guide_run, files):
    fortran = SHIPPED / "fortran"
    done = subprocess.run([str(guide_run / "host-demo" / "host_driver"), str(fortran / "boosted.coefficients.txt"),
                           "--profile", str(fortran / "profile.coefficients.txt"), *(str(f) for f in files)],
                          capture_output=True, text=True)
    assert done.returncode == 0, done.stderr
    rows = np.array([[float(v) for v in line.split()] for line in done.stdout.splitlines()])
    return rows[np.lexsort((rows[:, 0], rows[:, 1])), 2:]


@pytest.mark.parametrize("zenith, azimuth, cap", [(20.0, 200.0, None), (75.0, 123.0, None), (80.0, 250.0, 2500.0)])
def test_other_suns_whole_and_split_equal_numpy(guide_run, tmp_path, zenith, azimuth, cap):
    # High and low sun, beams all around: the halo grows with the slant paths (75 degrees:
    # the largest the 4 km scene needs) unless the host caps their reach (80 degrees, 2.5 km:
    # a halo of 5 instead of 23), and four sub-domains still give the whole domain.
    scene = guide_run / "host-demo" / "scenes" / "open_cells_00000.nc"
    out = tmp_path / "fields"
    assert main(["host-fields", str(scene), "--model", str(SHIPPED / "boosted.coefficients.json"),
                 str(SHIPPED / "profile.coefficients.json"), "--zenith", str(zenith), "--azimuth", str(azimuth),
                 "--split", "2", "2", "--out", str(out), "--quiet"]
                + ([] if cap is None else ["--slant-path-reach", str(cap)])) == 0
    fields, layout = read_host_field_file(out / "whole.txt")
    assert fields.get("slant_path_reach") == cap and (cap is None or max(layout["halo"]) <= 5)
    whole = _run_driver(guide_run, [out / "whole.txt"])
    split = _run_driver(guide_run, sorted(out.glob("subdomain_*.txt")))
    np.testing.assert_allclose(split, whole, rtol=1e-10, atol=1e-12)
    np.testing.assert_allclose(whole, _numpy_reference(out / "whole.txt"), rtol=1e-10, atol=1e-12)


def test_narrow_halo_is_refused_naming_the_feature(guide_run, tmp_path):
    fields = guide_run / "host-demo" / "fields"
    narrow = tmp_path / "narrow.txt"
    text = (fields / "whole.txt").read_text().splitlines()
    # Keep the file's arrays but claim a smaller halo: rewrite it from the numpy reader with a cut halo.
    data, layout = read_host_field_file(fields / "whole.txt")
    from surrogate3d.runtime.host_field_file import write_host_field_file
    hx, hy = layout["halo"]
    cut = {k: (v[..., 1:v.shape[-2] - 1, 1:v.shape[-1] - 1] if np.ndim(v) >= 2 else v) for k, v in data.items()}
    write_host_field_file(narrow, cut, (hx - 1, hy - 1), layout["origin"], layout["domain"])
    assert text[0] == "surrogate3d host fields 2"
    driver = guide_run / "host-demo" / "host_driver"
    done = subprocess.run([str(driver), str(SHIPPED / "fortran" / "boosted.coefficients.txt"), str(narrow)],
                          capture_output=True, text=True)
    assert done.returncode != 0
    assert "halo" in done.stderr and "feature" in done.stderr, done.stderr


def test_driver_refuses_files_that_do_not_cover_the_domain_once(guide_run, tmp_path):
    # One energy balance per domain: a sub-domain read twice, or one missing, would close
    # the wrong budget; the driver stops naming the column.
    fields = guide_run / "host-demo" / "fields"
    driver = guide_run / "host-demo" / "host_driver"
    coefficients = str(SHIPPED / "fortran" / "boosted.coefficients.txt")
    for files, count in (([fields / "subdomain_1.txt", fields / "subdomain_1.txt"], "in 2 of"),
                         ([fields / "subdomain_1.txt", fields / "subdomain_2.txt"], "in 0 of")):
        done = subprocess.run([str(driver), coefficients, *map(str, files)], capture_output=True, text=True)
        assert done.returncode != 0 and count in done.stderr, done.stderr


PARTIAL = """\
program partial
  use, intrinsic :: iso_fortran_env, only: real64
  use boosted_correction
  use boosted_host
  implicit none
  type(boosted_coefficients) :: model
  real(real64) :: one(1, 1, 1), plane(1, 1), ica(1, 1, 5), fluxes(5, 1), layers(1, 1)
  logical :: outside(1)
  integer :: n_outside, status
  character(len=256) :: message
  one = 0.0_real64
  plane = 0.0_real64
  ica = 0.0_real64
  call boosted_correct_host(model, 1, 1, 1, 0, 0, 1000.0_real64, 1000.0_real64, 30.0_real64, 0.0_real64, &
    [0.0_real64, 1000.0_real64], one, one, one, plane, plane, plane, plane, plane, ica, fluxes, outside, n_outside, &
    status, message, layers=layers, independent_column_layer_absorption=one)
  print '(i0, 1x, a)', status, trim(message)
end program partial
"""


def test_heating_rate_arguments_go_together(tmp_path):
    # The layers without the heating-rate model would come back unset: refused (status 3).
    fortran = SHIPPED / "fortran"
    (tmp_path / "partial.f90").write_text(PARTIAL)
    sources = [fortran / f"{name}.f90" for name in ("boosted_correction", "profile_correction", "boosted_features",
                                                    "boosted_host")] + [tmp_path / "partial.f90"]
    built = subprocess.run(["gfortran", "-std=f2008", "-Wall", "-Werror", "-O2", *map(str, sources), "-o", "partial"],
                           cwd=tmp_path, capture_output=True, text=True)
    assert built.returncode == 0, built.stderr
    done = subprocess.run([str(tmp_path / "partial")], capture_output=True, text=True)
    assert done.stdout.startswith("3 profile_model, independent_column_layer_absorption and layers go together")


def test_host_fields_command_replaces_an_earlier_split(guide_run, tmp_path):
    scene = guide_run / "host-demo" / "scenes" / "open_cells_00000.nc"
    out = tmp_path / "fields"
    for split in (["3", "2"], ["2", "2"]):
        assert main(["host-fields", str(scene), "--model", str(SHIPPED / "boosted.coefficients.json"), "--zenith",
                     "30", "--split", *split, "--out", str(out), "--quiet"]) == 0
    assert sorted(p.name for p in out.iterdir()) == ["subdomain_1.txt", "subdomain_2.txt", "subdomain_3.txt",
                                                      "subdomain_4.txt", "whole.txt"]


def test_host_fields_command_refuses_bad_split(tmp_path, capsys):
    scene = tmp_path / "scenes"
    assert main(["scenes", "--regime", "scattered_cumulus", "--count", "1", "--nx", "100", "--ny", "100",
                 "--nz", "10", "--out", str(scene), "--quiet"]) == 0
    code = main(["host-fields", str(next(scene.glob("*.nc"))), "--model", str(SHIPPED / "boosted.coefficients.json"),
                 "--zenith", "30", "--split", "3", "2", "--out", str(tmp_path / "fields")])
    assert code != 0
    assert "divide" in capsys.readouterr().err
    assert not (tmp_path / "fields").exists()
