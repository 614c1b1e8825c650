"""Helpers shared by the subcommands: output paths and the caution banner."""

from __future__ import annotations

import importlib
import textwrap
from pathlib import Path
from types import ModuleType

from circlesim.base.cautions import CAUTION
from circlesim.base.validation import InputError


def caution_banner(width: int = 88) -> str:
    """The standing caution, wrapped, for terminal output."""
    return "\n".join(textwrap.wrap("CAUTION: " + CAUTION, width))


def add_report_options(parser, report_default: str, csv_help: str) -> None:
    """The ``--report``, ``--no-report``, ``--csv`` and ``--overwrite`` options of commands
    that print a table and write an HTML report."""
    parser.add_argument("--report", type=Path, default=None,
                        help=f"HTML report path (default {report_default}; an existing file is "
                             "never replaced unless --overwrite is given, a free name is chosen "
                             "instead)")
    parser.add_argument("--no-report", action="store_true", help="only print the table")
    parser.add_argument("--csv", type=Path, default=None, help=csv_help)
    parser.add_argument("--overwrite", action="store_true",
                        help="replace existing output files")


def add_parallel_options(p) -> None:
    """The ``--scheduler``, ``--fallback-local`` and ``--workers`` options of commands that run
    many independent pieces of work (:func:`circlesim.base.distributed.map_chunks`)."""
    p.add_argument("--scheduler", default=None,
                   help="address of a Dask scheduler (e.g. tcp://10.0.0.5:8786) to run on "
                        "instead of local processes")
    p.add_argument("--fallback-local", action="store_true",
                   help="if the scheduler cannot be reached, run on local processes instead "
                        "of stopping")
    p.add_argument("--workers", type=int, default=None,
                   help="local worker processes (default one per core; 1 runs in this "
                        "process)")


def output_path(path: Path | None, default: Path, overwrite: bool) -> Path:
    """Where to write an output file: ``path`` (or ``default`` when None); unless
    ``overwrite``, the first free name next to it, so an existing file is never replaced."""
    target = default if path is None else path
    return target if overwrite else free_path(target)


def free_path(path: Path) -> Path:
    """``path`` if no file is there yet, else the first free ``stem-1.suffix``, ``stem-2``…"""
    if not path.exists():
        return path
    k = 1
    while True:
        candidate = path.with_name(f"{path.stem}-{k}{path.suffix}")
        if not candidate.exists():
            return candidate
        k += 1


def report_module(name: str) -> ModuleType:
    """``circlesim.reports.<name>``, or a clear error when plotly (the app extra) is missing."""
    try:
        return importlib.import_module(f"circlesim.reports.{name}")
    except ImportError as exc:
        raise InputError(f"the HTML report needs plotly ({exc}); install the app extra "
                         "(pip install 'circlesim[app]') or pass --no-report.") from None
