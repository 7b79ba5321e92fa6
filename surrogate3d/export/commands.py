"""``surrogate3d export``: coefficient files (and a Fortran module) of trained models."""


def register(sub):
    p = sub.add_parser("export", help="write coefficient files (NetCDF and JSON) and optionally a Fortran module",
                       description="Write each trained model of MODEL_DIR as a NetCDF coefficient file and its JSON "
                                   "twin (read by the numpy-only surrogate3d.runtime); with --fortran also a "
                                   "Fortran 2008 module, an example driver and sample features in DIR/fortran/.")
    p.add_argument("model_dir", metavar="MODEL_DIR", help="model directory written by 'surrogate3d train'")
    p.add_argument("--out", required=True, metavar="DIR", help="directory to write the files to")
    p.add_argument("--model", metavar="NAME", help="export only this model (default: every model of the run)")
    p.add_argument("--fortran", action="store_true", help="also write the Fortran module, driver and data files")
    p.add_argument("--report", metavar="REPORT_DIR",
                   help="report directory of 'surrogate3d evaluate': store the model's held-out skill rows")
    p.add_argument("--pairs", metavar="PAIRS",
                   help="pairs table for the Fortran sample features (default: the training file in model.json)")
    p.add_argument("--sample-columns", type=int, default=64, metavar="N",
                   help="columns in the Fortran sample features file (default 64)")
    p.add_argument("--quiet", action="store_true", help="print nothing on success")
    p.set_defaults(func=run, interrupted="nothing was written")
    from .host_fields_command import register as register_host_fields
    register_host_fields(sub)


def run(args):
    import os

    from .._outputs import check_output_directory, staged_directory
    from ..core.validation import check_integer
    from .exporter import export_training_run

    check_integer("--sample-columns", args.sample_columns, 1)
    out = check_output_directory(args.out, "--out")
    with staged_directory(out) as staging:
        exported = export_training_run(args.model_dir, staging, model=args.model, report_dir=args.report,
                                       fortran=args.fortran, pairs_path=args.pairs,
                                       n_sample_columns=args.sample_columns)
    exported = {name: {key: out / path.relative_to(staging) for key, path in paths.items()}
                for name, paths in exported.items()}
    if args.quiet:
        return
    for name, paths in exported.items():
        sizes = ", ".join(f"{p.name} ({os.path.getsize(p) / 1024:.1f} KiB)" for key, p in paths.items()
                          if key in ("netcdf", "json"))
        print(f"{name}: {sizes}")
        if "module" in paths:
            print(f"  fortran: {paths['module'].name}, {paths['driver'].name}, {paths['coefficients'].name}, "
                  f"{paths['sample_features'].name}")
        if "host_module" in paths:
            host = [paths[key].name for key in ("features_module", "host_module", "host_driver", "halo")]
            print(f"  host interface: {', '.join(host)}")
    print(f"wrote {args.out}")
