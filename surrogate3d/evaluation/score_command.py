"""``surrogate3d score``: the skill report of any trained correction on any pairs table."""


def register(sub):
    p = sub.add_parser("score", help="score a coefficient file or trained model directory on any pairs table",
                       description="Score an exported coefficient file (.coefficients.json or .coefficients.nc) or a "
                                   "model directory written by 'surrogate3d train' on every sample of a pairs table "
                                   "(for example made from your own benchmarks), against no correction and the "
                                   "published baselines, and write the report of 'surrogate3d evaluate' (HTML, CSV, "
                                   "Markdown). Columns outside a model's training envelope are flagged and counted.")
    p.add_argument("source", metavar="COEFFICIENTS_OR_MODEL_DIR",
                   help="coefficient file, model directory (every model) or one model's subdirectory")
    p.add_argument("pairs", metavar="PAIRS", help="pairs table (NetCDF) written by 'surrogate3d pairs'")
    p.add_argument("--out", required=True, metavar="REPORT_DIR", help="report directory to write")
    p.add_argument("--no-consistency", action="store_true",
                   help="score learned corrections as predicted, without clipping and energy balance")
    p.add_argument("--importance-repeats", type=int, default=3, metavar="N",
                   help="permutations per feature for the importance (0 skips it; default 3)")
    p.add_argument("--map-scenes", type=int, default=2, metavar="N", help="scenes shown as maps (default 2)")
    p.add_argument("--seed", type=int, default=0, help="seed of the permutations (default 0)")
    p.add_argument("--quiet", action="store_true", help="no progress bars or summary")
    p.set_defaults(func=run)


def run(args):
    from ..core.validation import check_integer
    from .metrics import HEADLINE_UNITS
    from .predictions import skill_lines
    from .report_writer import write_report
    from .scoring import SCORED, score

    for name in ("importance_repeats", "map_scenes", "seed"):
        check_integer(f"--{name.replace('_', '-')}", getattr(args, name), 0)
    evaluation = score(args.source, args.pairs, consistency=not args.no_consistency,
                       importance_repeats=args.importance_repeats, seed=args.seed, quiet=args.quiet)
    page = write_report(evaluation, args.out, map_scenes=args.map_scenes)
    if args.quiet:
        return
    table = evaluation.table
    rows = table[(table["breakdown"] == "all") & (table["units"] == HEADLINE_UNITS)]
    print(f"skill on the {SCORED} (RMSE in W m-2):")
    print("\n".join(skill_lines(rows)))
    for name, check in evaluation.sets[0].envelope.items():
        if check.available:
            print(f"  {name}: {check.n_outside} of {check.outside.size} columns outside the training envelope")
    for note in evaluation.notes:
        print(f"note: {note}")
    print(f"wrote {page}")
