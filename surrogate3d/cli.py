"""The ``surrogate3d`` command line.

Each pipeline stage registers its own subcommands from a ``commands`` module, so this
file only assembles them and turns errors into one-line messages with a non-zero exit.
A subcommand may set the defaults ``parameter_flags`` (Python parameter -> the option
that sets it, so that messages name what the user typed) and ``interrupted`` (what an
interrupt leaves behind).
"""

import argparse
import contextlib
import importlib
import os
import re
import signal
import sys
import threading

from . import __version__
from ._outputs import os_error_message
from .errors import ParameterError, Surrogate3DError

#: Modules that define ``register(subparsers)``, in the order of the pipeline.
COMMAND_MODULES = [
    "surrogate3d.scenes.commands",
    "surrogate3d.archive.commands",
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


class Terminated(KeyboardInterrupt):
    """SIGTERM, raised like Ctrl-C so that every clean-up on the way out runs."""


def _raise_terminated(signum, frame):
    raise Terminated()


@contextlib.contextmanager
def _terminate_like_interrupt():
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    previous = signal.signal(signal.SIGTERM, _raise_terminated)
    try:
        yield
    finally:
        signal.signal(signal.SIGTERM, previous)


def with_flags(message, flags):
    """``message`` with each Python parameter name of ``flags`` replaced by its command-line option."""
    for name, flag in sorted(flags.items(), key=lambda item: -len(item[0])):
        # Whole words only, and never inside a path or a quoted value.
        message = re.sub(rf"(?<![\w./'-]){re.escape(name)}(?![\w/'-])", flag, message)
    return message


def main(argv=None):
    """Run the command line; returns the process exit status."""
    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "func", None):
        parser.print_help()
        return 2
    prefix = f"surrogate3d {args.command}"
    try:
        with _terminate_like_interrupt():
            args.func(args)
    except Surrogate3DError as exc:
        message = str(exc)
        if isinstance(exc, ParameterError):
            message = with_flags(message, getattr(args, "parameter_flags", {}))
        print(f"{prefix}: error: {' '.join(message.split())}", file=sys.stderr)
        return 1
    except KeyboardInterrupt as exc:
        what = "terminated" if isinstance(exc, Terminated) else "interrupted"
        print(f"{prefix}: {what}; {getattr(args, 'interrupted', 'finished work is kept')}", file=sys.stderr)
        return 143 if isinstance(exc, Terminated) else 130
    except BrokenPipeError:
        # The reader of our output went away (for example `| head`): not an error of ours.
        sys.stdout = open(os.devnull, "w")
        return 0
    except OSError as exc:
        # Every expected output problem is checked and named earlier; this keeps any other one to one line.
        print(f"{prefix}: error: {' '.join(os_error_message(exc, action='access').split())}", file=sys.stderr)
        return 1
    return 0


if __name__ == "__main__":
    sys.exit(main())
