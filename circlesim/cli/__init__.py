"""The ``circlesim`` command line.

Each subcommand lives in its own module with two functions: ``add_parser(subparsers)`` and
``run(args) -> int``. Add a new module's name to :data:`COMMANDS` to make it available.
"""

from __future__ import annotations

import argparse
import importlib
import sys

from circlesim.base.cautions import CAUTION
from circlesim.base.files import FileExistsNotOverwrittenError
from circlesim.base.validation import InputError
from circlesim.engine.simulate import SimulationError

#: Subcommand modules, in the order ``circlesim --help`` lists them.
COMMANDS = ("run", "compare", "oxygen", "population", "advise", "emerge", "check", "fit",
            "calibrate", "review")


def build_parser() -> argparse.ArgumentParser:
    """The argument parser with every subcommand."""
    parser = argparse.ArgumentParser(
        prog="circlesim",
        description="Predict gas kinetics in a circle breathing system for a plan of fresh gas "
                    "flows and vaporizer settings. " + CAUTION)
    parser.add_argument("--version", action="version", version="circlesim 0.1.0")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    sub.required = True
    for name in COMMANDS:
        module = importlib.import_module(f"{__name__}.{name}")
        module.add_parser(sub)
    return parser


def main(argv: list[str] | None = None) -> int:
    """Entry point of the ``circlesim`` console script."""
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        return int(args.handler(args) or 0)
    except (InputError, FileExistsNotOverwrittenError, SimulationError) as exc:
        print(f"circlesim {args.command}: error: {exc}", file=sys.stderr)
        return 2
    except OSError as exc:  # a file or folder the command could not read or write
        where = f" {exc.filename}" if exc.filename else ""
        print(f"circlesim {args.command}: error:{where}: {exc.strerror or exc}", file=sys.stderr)
        return 2


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
