"""Helpers shared by the subcommands: output paths and the caution banner."""

from __future__ import annotations

import textwrap
from pathlib import Path

from ..cautions import CAUTION


def caution_banner(width: int = 88) -> str:
    """The standing caution, wrapped, for terminal output."""
    return "\n".join(textwrap.wrap("CAUTION: " + CAUTION, width))


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
