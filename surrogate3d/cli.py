"""The ``surrogate3d`` command line.

Each pipeline stage registers its own subcommands from a ``commands`` module, so this
file only assembles them and turns errors into one-line messages with a non-zero exit.
"""

import argparse
import importlib
import os
import sys

from . import __version__
from .errors import Surrogate3DError

#: Modules that define ``register(subparsers)``, in the order of the pipeline.
COMMAND_MODULES = [
    "surrogate3d.scenes.commands",
    "surrogate3d.archive.commands",
    "surrogate3d.solvers.commands",
    "surrogate3d.pairs.commands",
    "surrogate3d.learn.commands",
    "surrogate3d.evaluation.commands",
    "surrogate3d.export.commands",
    "surrogate3d.demo",
]


def build_parser():
    parser = argparse.ArgumentParser(
        prog="surrogate3d",
        description="Learn, validate and export corrections for 3D cloud radiative effects that "
                    "independent-column radiation schemes miss.")
    parser.add_argument("--version", action="version", version=f"surrogate3d {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for name in COMMAND_MODULES:
        importlib.import_module(name).register(sub)
    return parser


def main(argv=None):
    """Run the command line; returns the process exit status."""
    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "func", None):
        parser.print_help()
        return 2
    try:
        args.func(args)
    except Surrogate3DError as exc:
        print(f"surrogate3d {args.command}: error: {' '.join(str(exc).split())}", file=sys.stderr)
        return 1
    except KeyboardInterrupt:
        print(f"surrogate3d {args.command}: interrupted; finished work is kept", file=sys.stderr)
        return 130
    except BrokenPipeError:
        # The reader of our output went away (for example `| head`): not an error of ours.
        sys.stdout = open(os.devnull, "w")
        return 0
    return 0


if __name__ == "__main__":
    sys.exit(main())
