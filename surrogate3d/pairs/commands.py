"""``surrogate3d pairs``: the training-pair table of an archive directory."""


def register(sub):
    p = sub.add_parser(
        "pairs", help="build the training-pair table (features, 3D corrections, baselines) at host resolution",
        description="Coarse-grain every scene and sun geometry of an archive that holds both a full_3d and an "
                    "independent_column result to host columns, and write features, 3D-minus-independent-column "
                    "targets and baseline predictions to one NetCDF file (docs/pairs-format.md).")
    p.add_argument("archive_dir", help="archive directory of scene files (*.nc)")
    p.add_argument("--out", required=True, metavar="FILE", help="pair table to write (NetCDF-4)")
    p.add_argument("--host-resolution", type=float, nargs="+", default=[1000.0], metavar="M",
                   help="host column size(s) in m, whole multiples of the scene cell size (default: 1000)")
    p.add_argument("--recipe", metavar="FILE", help="feature recipe (.json or .toml); default: the built-in recipe")
    p.add_argument("--host-fluxes", choices=("monte_carlo", "two_stream_host"), default=None,
                   help="independent-column flux features from the Monte Carlo benchmark (block means) or from a "
                        "delta-Eddington solve of the host's own columns with a clear and a cloudy sub-column; "
                        "recorded in the feature recipe (default: the recipe's, else monte_carlo)")
    p.add_argument("--host-layer-edges", type=float, nargs="+", default=None, metavar="M",
                   help="the host model's layer edges in m, increasing from the surface to at least the scene top, "
                        "for the per-layer (heating-rate) targets (default: every scene's own layers)")
    p.add_argument("--spectrum", default="shortwave", metavar="{shortwave,longwave}",
                   help="shortwave: the table above (default); longwave: one row per scene and host column with "
                        "both longwave_full_3d and longwave_independent_column results, targets in W m-2 "
                        "(docs/pairs-format.md, 'Longwave pairs'); takes only --host-resolution, "
                        "--host-layer-edges and --quiet")
    p.add_argument("--quiet", action="store_true", help="no progress bar and no notices")
    p.set_defaults(func=run, interrupted="nothing was written",
                   parameter_flags={"host_resolutions": "--host-resolution", "host_resolution": "--host-resolution",
                                    "host_layer_edges": "--host-layer-edges", "spectrum": "--spectrum"})


def run(args):
    from .._outputs import check_output_file, staged_file
    from ..core.netcdf import write_dataset
    from .build import build_pairs
    from .recipe import FeatureRecipe

    from .longwave_pairs import check_spectrum

    if check_spectrum(args.spectrum) == "longwave":
        return _run_longwave(args)
    out = check_output_file(args.out, "--out")
    recipe = FeatureRecipe.read(args.recipe) if args.recipe else None
    pairs = build_pairs(args.archive_dir, args.host_resolution, recipe=recipe, quiet=args.quiet,
                        host_fluxes=args.host_fluxes, host_layer_edges=args.host_layer_edges)
    with staged_file(out) as staging:
        write_dataset(pairs, staging)
    if not args.quiet:
        import json

        skipped = json.loads(pairs.attrs["skipped"])
        scenes = len(set(pairs["scene"].values.tolist()))
        layers = f" and {pairs.sizes['host_layer']} host layers" if "host_layer" in pairs.sizes else ""
        print(f"wrote {pairs.sizes['sample']} samples x {pairs.sizes['feature']} features{layers} from {scenes} "
              f"scene(s) at host resolution(s) {', '.join(f'{r:g}' for r in args.host_resolution)} m to {out}"
              + (f"; skipped {len(skipped)} scene/sun geometr{'y' if len(skipped) == 1 else 'ies'} "
                 "without both full_3d and independent_column results" if skipped else ""))


def _run_longwave(args):
    from .._outputs import check_output_file, staged_file
    from ..core.netcdf import write_dataset
    from ..errors import ParameterError
    from .longwave_pairs import build_longwave_pairs

    given = [flag for flag, value in (("--recipe", args.recipe), ("--host-fluxes", args.host_fluxes))
             if value is not None]
    if given:
        raise ParameterError(f"{', '.join(given)} apply to shortwave pairs only; --spectrum longwave has a fixed "
                             "feature set and host fluxes from the longwave_two_stream result")
    out = check_output_file(args.out, "--out")
    pairs = build_longwave_pairs(args.archive_dir, args.host_resolution, quiet=args.quiet,
                                 host_layer_edges=args.host_layer_edges)
    with staged_file(out) as staging:
        write_dataset(pairs, staging)
    if not args.quiet:
        import json

        skipped = json.loads(pairs.attrs["skipped"])
        scenes = len(set(pairs["scene"].values.tolist()))
        print(f"wrote {pairs.sizes['sample']} longwave samples x {pairs.sizes['feature']} features from {scenes} "
              f"scene(s) at host resolution(s) {', '.join(f'{r:g}' for r in args.host_resolution)} m to {out}"
              + (f"; skipped {len(skipped)} scene(s) without both longwave_full_3d and longwave_independent_column "
                 "results" if skipped else ""))
