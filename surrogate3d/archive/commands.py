"""``surrogate3d list``: what an archive directory holds."""


def register(sub):
    p = sub.add_parser("list", help="list the scenes of an archive directory and the results they hold")
    p.add_argument("archive_dir", help="archive directory of scene files (*.nc)")
    p.add_argument("--csv", metavar="FILE", help="also write the listing as CSV")
    p.set_defaults(func=run)


def run(args):
    from .._atomic import write_text_atomic
    from .listing import list_archive

    table = list_archive(args.archive_dir)
    if table.empty:
        print(f"{args.archive_dir}: no scene files")
        return
    with_results = table.fillna("")
    print(with_results.to_string(index=False))
    if args.csv:
        write_text_atomic(args.csv, table.to_csv(index=False))
