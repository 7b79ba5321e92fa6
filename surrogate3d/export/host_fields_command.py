"""``surrogate3d host-fields``: a scene's host fields split into sub-domains with halos, for a Fortran host driver.

For shortwave models the host's own independent columns come from delta-Eddington; for
longwave models (``--model`` files of longwave corrections) the longwave host field files
(:mod:`surrogate3d.runtime.host_field_file`) hold the longwave fields, the host's own
independent-column longwave fields (the two-stream solver on the scene's columns,
host-column means, as ``surrogate3d pairs --spectrum longwave`` makes them) and its
clear-sky fluxes.
"""

import math


def register(sub):
    p = sub.add_parser(
        "host-fields", help="write a scene's host fields as sub-domains with halos for the Fortran host driver",
        description="Coarse-grain one scene to host columns, solve the host's own independent columns with "
                    "delta-Eddington (a clear and a cloudy sub-column; for longwave models the longwave two-stream "
                    "solver), and write the host fields of the whole periodic domain and of its sub-domains, each "
                    "with the halo the models need, as plain-text host field files "
                    "(surrogate3d.runtime.host_field_file) that the exported Fortran driver reads.")
    p.add_argument("scene", metavar="SCENE_FILE", help="scene file (NetCDF) written by 'surrogate3d scenes'")
    p.add_argument("--out", required=True, metavar="DIR",
                   help="directory to write whole.txt and subdomain_N.txt to (its old content is replaced)")
    p.add_argument("--model", nargs="+", required=True, metavar="COEFFICIENTS",
                   help="exported coefficient file(s) (.coefficients.json or .nc): the halo is the widest they need")
    p.add_argument("--zenith", type=float, metavar="DEG",
                   help="solar zenith angle in degrees, [0, 90) (required for shortwave models)")
    p.add_argument("--azimuth", type=float, default=None, metavar="DEG",
                   help="shortwave models: direction the beam travels in degrees, counterclockwise from +x (default 0)")
    p.add_argument("--host-resolution", type=float, default=1000.0, metavar="M",
                   help="host column size in m, a whole multiple of the scene cell size (default 1000)")
    p.add_argument("--slant-path-reach", type=float, default=None, metavar="M",
                   help="the host's cap on the slant paths' horizontal travel in m (beyond it they rise vertically), "
                        "which bounds the halo at low sun (default: no cap)")
    p.add_argument("--split", type=int, nargs=2, default=[2, 2], metavar=("PX", "PY"),
                   help="sub-domains along x and y; each must divide the host grid (default 2 2)")
    p.add_argument("--longwave-resolution", type=float, default=None, metavar="CM-1",
                   help="longwave models: widest spectral interval of the host's own longwave solves in cm-1 "
                        "(default 10)")
    p.add_argument("--quiet", action="store_true", help="print nothing on success")
    p.set_defaults(func=run, interrupted="nothing was written",
                   parameter_flags={"solar_zenith_angle": "--zenith", "host_resolution": "--host-resolution",
                                    "parts": "--split", "resolution": "--longwave-resolution"})


def run(args):
    from .._outputs import check_output_directory
    from ..archive import read_scene
    from ..errors import ParameterError
    from ..core.slant_path import check_solar_zenith_angle
    from ..core.validation import check_number
    from ..pairs.coarsen import scene_host_fields
    from ..pairs.host_fields import host_two_stream_fluxes
    from ..runtime import load_coefficients
    from ..runtime.halo import halo_width, path_reach
    from ..runtime.host_field_file import stacked_fields

    check_number("--host-resolution", args.host_resolution, 0.0, None, low_open=True)
    models = [load_coefficients(path) for path in args.model]
    spectra = sorted({model.spectrum for model in models})
    if len(spectra) > 1:
        raise ParameterError("--model mixes shortwave and longwave models; give models of one spectrum")
    solar = {"--zenith": args.zenith, "--azimuth": args.azimuth, "--slant-path-reach": args.slant_path_reach}
    if spectra == ["longwave"]:
        given = [flag for flag, value in solar.items() if value is not None]
        if given:
            raise ParameterError(f"{', '.join(given)} apply to shortwave models only; the models given are longwave")
        out = check_output_directory(args.out, "--out")
        return _run_longwave(args, models, out)
    if args.longwave_resolution is not None:
        raise ParameterError("--longwave-resolution applies to longwave models only; the models given are shortwave")
    if args.zenith is None:
        raise ParameterError("--zenith is required for shortwave models")
    zenith = check_solar_zenith_angle(args.zenith, "--zenith")
    azimuth = 0.0 if args.azimuth is None else check_number("--azimuth", args.azimuth)
    if args.slant_path_reach is not None:
        check_number("--slant-path-reach", args.slant_path_reach, 0.0, None)
    out = check_output_directory(args.out, "--out")
    scene = read_scene(args.scene, results=False)
    _check_split(scene, args.host_resolution, args.split)
    fields = scene_host_fields(scene, args.host_resolution)
    fields["solar_zenith_angle"], fields["solar_beam_azimuth"] = zenith, math.fmod(azimuth, 360.0)
    solved = host_two_stream_fluxes(scene, args.host_resolution, zenith, layers=True)
    for flux, value in solved.items():
        if flux != "layer_absorption":
            fields[f"independent_column_{flux}"] = value
    fields = stacked_fields(fields, solved["layer_absorption"])
    if args.slant_path_reach is not None:
        fields["slant_path_reach"] = args.slant_path_reach
    geometry = (fields["z_edge"], fields["dx"], fields["dy"], zenith, fields["solar_beam_azimuth"],
                args.slant_path_reach)
    widths = [halo_width(model.recipe, *geometry) for model in models]
    if any(model.layer_feature_names for model in models):
        widths.append(path_reach(*geometry))
    halo = (max(w[0] for w in widths), max(w[1] for w in widths))
    ny, nx = fields["surface_albedo"].shape
    parts = _write_files(out, fields, args.split, halo, longwave=False)
    if not args.quiet:
        print(f"wrote the {nx} x {ny} host columns of {args.scene} (sun {zenith:g} degrees from the zenith, beam "
              f"toward {fields['solar_beam_azimuth']:g} degrees) as whole.txt and {len(parts)} sub-domains with a "
              f"halo of {halo[0]} x {halo[1]} columns to {out}")


def _check_split(scene, host_resolution, split):
    """ParameterError naming --split unless it divides the host grid into equal sub-domains (checked before
    the host's own columns are solved)."""
    from ..errors import ParameterError
    from ..pairs.coarsen import host_factors

    fy, fx = host_factors(scene, host_resolution)
    nx, ny = scene.sizes["x"] // fx, scene.sizes["y"] // fy
    px, py = split
    if px < 1 or py < 1 or nx % px or ny % py:
        raise ParameterError(f"--split {px} {py} must divide the {nx} x {ny} host columns into equal sub-domains")


def _write_files(out, fields, split, halo, longwave):
    """Write the whole domain and its sub-domains as host field files in ``out``; return the sub-domains."""
    from .._outputs import staged_directory
    from ..runtime.host_field_file import split_periodic, write_host_field_file

    ny, nx = fields["total_cloud_fraction"].shape
    # The directory holds exactly these files: sub-domains of an earlier, finer split would
    # otherwise be read as part of this domain by a driver globbing subdomain_*.txt.
    with staged_directory(out, replace=True) as staging:
        (whole, origin), = split_periodic(fields, (1, 1), halo)
        write_host_field_file(staging / "whole.txt", whole, halo, origin, (nx, ny), longwave)
        parts = split_periodic(fields, split, halo)
        for n, (sub, origin) in enumerate(parts, start=1):
            write_host_field_file(staging / f"subdomain_{n}.txt", sub, halo, origin, (nx, ny), longwave)
    return parts


def _run_longwave(args, models, out):
    from ..archive import read_scene
    from ..core.validation import check_number
    from ..pairs.coarsen import host_factors
    from ..pairs.longwave_features import LONGWAVE_TARGETS, LongwaveFeatureRecipe, longwave_halo_width
    from ..pairs.longwave_pairs import coarsen_longwave_result, host_clear_sky_fluxes, longwave_host_fields
    from ..runtime.host_field_file import stacked_longwave_fields
    from ..scenes.longwave_optics import DEFAULT_RESOLUTION, PER_CM
    from ..solvers.longwave_scene import solve_longwave_scene

    resolution = DEFAULT_RESOLUTION
    if args.longwave_resolution is not None:
        resolution = check_number("--longwave-resolution", args.longwave_resolution, 0.0, None, low_open=True) * PER_CM
    scene = read_scene(args.scene, results=False)
    _check_split(scene, args.host_resolution, args.split)
    fields = longwave_host_fields(scene, args.host_resolution)
    fields.update(host_clear_sky_fluxes(scene, args.host_resolution, resolution))
    own = coarsen_longwave_result(solve_longwave_scene(scene, "longwave_two_stream", resolution=resolution,
                                                       label=str(args.scene)),
                                  *host_factors(scene, args.host_resolution))
    fields = stacked_longwave_fields(fields, {flux: own[flux] for flux in LONGWAVE_TARGETS})
    widths = [longwave_halo_width(LongwaveFeatureRecipe(model.column_feature_names), fields["dx"], fields["dy"])
              for model in models]
    halo = (max(w[0] for w in widths), max(w[1] for w in widths))
    parts = _write_files(out, fields, args.split, halo, longwave=True)
    if not args.quiet:
        ny, nx = fields["total_cloud_fraction"].shape
        print(f"wrote the {nx} x {ny} longwave host columns of {args.scene} as whole.txt and {len(parts)} "
              f"sub-domains with a halo of {halo[0]} x {halo[1]} columns to {out}")
