"""``surrogate3d host-fields``: a scene's host fields split into sub-domains with halos, for a Fortran host driver."""

import math


def register(sub):
    p = sub.add_parser(
        "host-fields", help="write a scene's host fields as sub-domains with halos for the Fortran host driver",
        description="Coarse-grain one scene to host columns, solve the host's own independent columns with "
                    "delta-Eddington (a clear and a cloudy sub-column), and write the host fields of the whole "
                    "periodic domain and of its sub-domains, each with the halo the models need, as plain-text host "
                    "field files (surrogate3d.runtime.host_field_file) that the exported Fortran driver reads.")
    p.add_argument("scene", metavar="SCENE_FILE", help="scene file (NetCDF) written by 'surrogate3d scenes'")
    p.add_argument("--out", required=True, metavar="DIR",
                   help="directory to write whole.txt and subdomain_N.txt to (its old content is replaced)")
    p.add_argument("--model", nargs="+", required=True, metavar="COEFFICIENTS",
                   help="exported coefficient file(s) (.coefficients.json or .nc): the halo is the widest they need")
    p.add_argument("--zenith", type=float, required=True, metavar="DEG", help="solar zenith angle in degrees, [0, 90)")
    p.add_argument("--azimuth", type=float, default=0.0, metavar="DEG",
                   help="direction the beam travels in degrees, counterclockwise from +x (default 0)")
    p.add_argument("--host-resolution", type=float, default=1000.0, metavar="M",
                   help="host column size in m, a whole multiple of the scene cell size (default 1000)")
    p.add_argument("--slant-path-reach", type=float, default=None, metavar="M",
                   help="the host's cap on the slant paths' horizontal travel in m (beyond it they rise vertically), "
                        "which bounds the halo at low sun (default: no cap)")
    p.add_argument("--split", type=int, nargs=2, default=[2, 2], metavar=("PX", "PY"),
                   help="sub-domains along x and y; each must divide the host grid (default 2 2)")
    p.add_argument("--quiet", action="store_true", help="print nothing on success")
    p.set_defaults(func=run, interrupted="nothing was written",
                   parameter_flags={"solar_zenith_angle": "--zenith", "host_resolution": "--host-resolution",
                                    "parts": "--split"})


def run(args):
    from .._outputs import check_output_directory, staged_directory
    from ..archive import read_scene
    from ..core.slant_path import check_solar_zenith_angle
    from ..core.validation import check_number
    from ..pairs.coarsen import scene_host_fields
    from ..pairs.host_fields import host_two_stream_fluxes
    from ..runtime import load_coefficients
    from ..runtime.halo import halo_width, path_reach
    from ..runtime.host_field_file import split_periodic, stacked_fields, write_host_field_file

    zenith = check_solar_zenith_angle(args.zenith, "--zenith")
    check_number("--azimuth", args.azimuth)
    check_number("--host-resolution", args.host_resolution, 0.0, None, low_open=True)
    if args.slant_path_reach is not None:
        check_number("--slant-path-reach", args.slant_path_reach, 0.0, None)
    models = [load_coefficients(path) for path in args.model]
    out = check_output_directory(args.out, "--out")
    scene = read_scene(args.scene, results=False)
    fields = scene_host_fields(scene, args.host_resolution)
    fields["solar_zenith_angle"], fields["solar_beam_azimuth"] = zenith, math.fmod(args.azimuth, 360.0)
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
    # The directory holds exactly these files: sub-domains of an earlier, finer split would
    # otherwise be read as part of this domain by a driver globbing subdomain_*.txt.
    with staged_directory(out, replace=True) as staging:
        (whole, origin), = split_periodic(fields, (1, 1), halo)
        write_host_field_file(staging / "whole.txt", whole, halo, origin, (nx, ny))
        parts = split_periodic(fields, args.split, halo)
        for n, (sub, origin) in enumerate(parts, start=1):
            write_host_field_file(staging / f"subdomain_{n}.txt", sub, halo, origin, (nx, ny))
    if not args.quiet:
        print(f"wrote the {nx} x {ny} host columns of {args.scene} (sun {zenith:g} degrees from the zenith, beam "
              f"toward {fields['solar_beam_azimuth']:g} degrees) as whole.txt and {len(parts)} sub-domains with a "
              f"halo of {halo[0]} x {halo[1]} columns to {out}")
