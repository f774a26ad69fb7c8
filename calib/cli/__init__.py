"""Command line: ``python -m calib COMMAND ...``.

Thin by design: each command module (``solve``, ``flowtest``, ``fit``) defines ``register(subparsers)``
which adds its parser and sets ``func(args) -> int``. Domain errors become one clear message on
stderr and a non-zero exit: 2 for bad input, 1 when a computation could not be carried out.
"""

from __future__ import annotations

import argparse
import importlib
import os
import sys

from calib import __version__
from calib.errors import CalibError, InputError

COMMANDS = ("solve", "flowtest", "fit", "fireflow", "check", "closures", "plan")


def _chosen(argv: list[str] | None) -> str | None:
    """The command named first on the command line, if it is one of ``COMMANDS`` (else None)."""
    words = [a for a in (argv or []) if not a.startswith("-")]
    return words[0] if words and words[0] in COMMANDS else None


def build_parser(argv: list[str] | None = None) -> argparse.ArgumentParser:
    """The parser; given ``argv`` naming a command, only that command's module is imported (a
    command loads what it needs, not what the others need); otherwise every command's."""
    chosen = _chosen(argv)
    parser = argparse.ArgumentParser(
        prog="python -m calib",
        description="Hydrant flow tests and Hazen-Williams C-factor calibration.")
    parser.add_argument("--version", action="version", version=f"%(prog)s {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for name in COMMANDS:
        if chosen is None or name == chosen:
            importlib.import_module(f"calib.cli.{name}").register(sub)
    return parser




def main(argv: list[str] | None = None) -> int:
    """Run the command line; returns the exit code (0 ok, 1 computation failed, 2 bad input)."""
    from calib import unused_modules
    unused_modules.defer()  # numpy.f2py, numpy.testing: loaded by a star-import in scipy, never used
    parser = build_parser(sys.argv[1:] if argv is None else argv)
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:  # argparse exits 2 on bad usage, 0 on --help
        return int(exc.code or 0)
    if not getattr(args, "func", None):
        parser.print_help(sys.stderr)
        return 2
    try:
        return int(args.func(args) or 0)
    except InputError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2
    except CalibError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 1
    except KeyboardInterrupt:
        print("interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:
        # The reader went away (e.g. `| head`): stop quietly, as Unix tools do.
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return 141
