"""``surrogate3d train``: learn the 3D corrections of a training recipe from a pairs table."""


def register(sub):
    p = sub.add_parser("train", help="learn ridge and gradient-boosted 3D corrections from a training-pair table",
                       description="Hold out whole scenes, pick hyperparameters by scene-grouped cross-validation, "
                                   "refit on all training scenes and write one subdirectory per model.")
    p.add_argument("pairs", metavar="PAIRS", help="training-pair table (NetCDF) written by 'surrogate3d pairs'")
    p.add_argument("--recipe", required=True, metavar="FILE", help="training recipe (TOML), e.g. training/default.toml")
    p.add_argument("--out", required=True, metavar="MODEL_DIR", help="model directory to write (new or empty)")
    p.add_argument("--overwrite", action="store_true", help="replace an existing model directory as a whole")
    p.add_argument("--quiet", action="store_true", help="no progress bars or summary")
    p.set_defaults(func=run, interrupted="nothing was written")


def _check_model_directory(path, overwrite):
    """The new model directory: refuse one that holds files, unless it is a model directory and ``overwrite``."""
    from .._outputs import check_output_directory, visible_entries
    from ..errors import OutputError
    from .model_directory import MODEL_CARD, TRAINING_FILE

    out = check_output_directory(path, "--out")
    held = visible_entries(out)
    if not held:
        return out, []
    models = sorted(p.parent.name for p in out.glob(f"*/{MODEL_CARD}"))
    if not ((out / TRAINING_FILE).is_file() or models):
        raise OutputError(f"--out {str(path)!r} holds files that are not a model directory ({', '.join(held[:3])}"
                          f"{', ...' if len(held) > 3 else ''}); choose a new or empty directory")
    if not overwrite:
        raise OutputError(f"--out {str(path)!r} already holds a model directory (models {', '.join(models) or 'none'});"
                          " use --overwrite to replace it, or choose a new directory")
    return out, models


def run(args):
    from .._outputs import staged_directory
    from .model_directory import TRAINING_FILE
    from .train import train_models

    out, replaced = _check_model_directory(args.out, args.overwrite)
    with staged_directory(out, replace=True, marker=TRAINING_FILE) as staging:
        record = train_models(args.pairs, args.recipe, staging, quiet=args.quiet)
    if args.quiet:
        return
    if replaced:
        print(f"replaced the model directory {args.out} (models {', '.join(replaced)} dropped)")
    split = record["split"]
    print(f"trained {', '.join(record['models'])} on {len(split['training_scenes'])} scenes "
          f"({split['n_training_samples']} samples); {len(split['held_out_scenes'])} scenes held out")
    for name, cv in record["cross_validation"].items():
        print(f"  {name}: cross-validated skill {cv['best_score']:.3f} ({cv['folds']} folds by "
              f"{cv.get('grouping', 'scene')}), "
              f"parameters {cv['best_params']}")
    if split["left_out_families"]:
        print(f"  'surrogate3d evaluate' leaves out in turn: {', '.join(split['left_out_families'])}")
    print(f"wrote {args.out}")
