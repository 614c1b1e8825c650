"""Helpers shared by the subcommands: output paths and the caution banner."""

from __future__ import annotations

import textwrap
from pathlib import Path

from ..cautions import CAUTION


def caution_banner(width: int = 88) -> str:
    """The standing caution, wrapped, for terminal output."""
    return "\n".join(textwrap.wrap("CAUTION: " + CAUTION, width))


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
