"""``surrogate3d evaluate``: the held-out skill report of a trained model directory."""


def register(sub):
    p = sub.add_parser("evaluate", help="score trained corrections on held-out scenes and write the skill report",
                       description="Score every model of MODEL_DIR on the scenes its training held out and, "
                                   "trained without each family (regime) in turn, on that family, against no "
                                   "correction and the published baselines, and write an HTML report with CSV and "
                                   "Markdown tables.")
    p.add_argument("model_dir", metavar="MODEL_DIR", help="model directory written by 'surrogate3d train'")
    p.add_argument("pairs", metavar="PAIRS", help="training-pair table holding the held-out scenes")
    p.add_argument("--out", required=True, metavar="REPORT_DIR", help="report directory to write")
    p.add_argument("--no-consistency", action="store_true",
                   help="score learned corrections as predicted, without clipping and energy balance")
    p.add_argument("--learning-curve-points", type=int, default=4, metavar="N",
                   help="subset sizes of the learning curve (0 skips it; default 4)")
    p.add_argument("--importance-repeats", type=int, default=3, metavar="N",
                   help="permutations per feature for the importance (0 skips it; default 3)")
    p.add_argument("--map-scenes", type=int, default=2, metavar="N", help="held-out scenes shown as maps (default 2)")
    p.add_argument("--seed", type=int, default=0, help="seed of permutations and learning-curve order (default 0)")
    p.add_argument("--quiet", action="store_true", help="no progress bars or summary")
    p.set_defaults(func=run, interrupted="nothing was written")

    from .score_command import register as register_score

    register_score(sub)


def run(args):
    from .._outputs import check_output_directory, staged_directory
    from ..core.validation import check_integer
    from .predictions import skill_lines
    from .report import HELD_OUT, evaluate, write_report

    for name in ("learning_curve_points", "importance_repeats", "map_scenes", "seed"):
        check_integer(f"--{name.replace('_', '-')}", getattr(args, name), 0)
    out = check_output_directory(args.out, "--out")
    evaluation = evaluate(args.model_dir, args.pairs, consistency=not args.no_consistency,
                          learning_curve_points=args.learning_curve_points,
                          importance_repeats=args.importance_repeats, seed=args.seed, quiet=args.quiet)
    with staged_directory(out, marker="report.html") as staging:
        page = out / write_report(evaluation, staging, map_scenes=args.map_scenes).relative_to(staging)
    if args.quiet:
        return
    table = evaluation.table
    rows = table[(table["evaluation_set"] == HELD_OUT) & (table["breakdown"] == "all") & (table["units"] == "W m-2")]
    print(f"skill on {HELD_OUT} (RMSE in W m-2):")
    print("\n".join(skill_lines(rows)))
    print(f"wrote {page}")
