"""``surrogate3d simulate`` (:mod:`.simulate_command`) and ``surrogate3d list``: what an archive
directory holds, and whether simulate and pairs can use it."""


def register(sub):
    from .simulate_command import register as register_simulate

    register_simulate(sub)
    p = sub.add_parser("list", help="list the scenes of an archive directory and the results they hold",
                       description="One line per scene file, each checked as simulate and pairs check it; exits "
                                   "with status 1 if any file is unreadable or invalid.")
    p.add_argument("archive_dir", help="archive directory of scene files (*.nc)")
    p.add_argument("--csv", metavar="FILE", help="also write the listing as CSV")
    p.set_defaults(func=run)


def run(args):
    from .._atomic import write_text_atomic
    from .._outputs import check_output_file
    from ..errors import Surrogate3DError
    from .listing import archive_notes, list_archive

    if args.csv is not None:
        check_output_file(args.csv, "--csv")
    table = list_archive(args.archive_dir)
    if table.empty:
        print(f"{args.archive_dir}: no scene files")
    else:
        print(table.astype(object).where(table.notna(), "").to_string(index=False))
    for note in archive_notes(args.archive_dir):
        print(f"note: {note}")
    if args.csv:
        write_text_atomic(args.csv, table.to_csv(index=False))
    bad = table[table["status"] != "ok"]
    if not bad.empty:
        raise Surrogate3DError(f"{len(bad)} of {len(table)} scene files cannot be used; first: "
                               f"{bad['file'].iloc[0]}: {bad['status'].iloc[0]}")
