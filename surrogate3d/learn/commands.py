"""``surrogate3d train``: learn the 3D corrections of a training recipe from a pairs table."""


def register(sub):
    p = sub.add_parser("train", help="learn ridge and gradient-boosted 3D corrections from a training-pair table",
                       description="Hold out whole scenes, pick hyperparameters by scene-grouped cross-validation, "
                                   "refit on all training scenes and write one subdirectory per model.")
    p.add_argument("pairs", metavar="PAIRS", help="training-pair table (NetCDF) written by 'surrogate3d pairs'")
    p.add_argument("--recipe", required=True, metavar="FILE", help="training recipe (TOML), e.g. training/default.toml")
    p.add_argument("--out", required=True, metavar="MODEL_DIR", help="model directory to write")
    p.add_argument("--quiet", action="store_true", help="no progress bars or summary")
    p.set_defaults(func=run)


def run(args):
    from .train import train_models

    record = train_models(args.pairs, args.recipe, args.out, quiet=args.quiet)
    if args.quiet:
        return
    split = record["split"]
    print(f"trained {', '.join(record['models'])} on {len(split['training_scenes'])} scenes "
          f"({split['n_training_samples']} samples); {len(split['held_out_scenes'])} scenes held out")
    for name, cv in record["cross_validation"].items():
        print(f"  {name}: cross-validated skill {cv['best_score']:.3f} ({cv['folds']} scene-grouped folds), "
              f"parameters {cv['best_params']}")
    if split["left_out_families"]:
        print(f"  'surrogate3d evaluate' leaves out in turn: {', '.join(split['left_out_families'])}")
    print(f"wrote {args.out}")
