"""Writing files safely: atomically, and never over a user's file unless asked."""

from __future__ import annotations

import os
import tempfile
import tomllib
from pathlib import Path
from typing import Any

from circlesim.base.validation import InputError

__all__ = ["FileExistsNotOverwrittenError", "read_toml", "write_text_atomic"]


def read_toml(path: str | os.PathLike, what: str) -> dict[str, Any]:
    """Parse the TOML file at ``path``; ``what`` names it in messages ("case record", ...).

    Raises
    ------
    InputError
        If the path is a folder, does not exist, cannot be read, is not UTF-8 or not TOML.
    """
    path = Path(path)
    if path.is_dir():
        raise InputError(f"{what} {path} is a folder; give the path of its .toml file.")
    try:
        return tomllib.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise InputError(f"{what} {path} does not exist.") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"{what} {path} cannot be read: {exc}.") from None
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"{what} {path} is not valid TOML: {exc}.") from None


class FileExistsNotOverwrittenError(FileExistsError):
    """The target file exists and ``overwrite`` was not given."""


def write_text_atomic(path: str | os.PathLike, text: str, *, overwrite: bool = False) -> Path:
    """Write ``text`` to ``path`` atomically (temporary file, then rename).

    Parameters
    ----------
    path : path-like
        Destination file.
    text : str
        Content, written as UTF-8.
    overwrite : bool
        Replace an existing file. When false and the file exists, nothing is written.

    Returns
    -------
    pathlib.Path
        The path written.

    Raises
    ------
    FileExistsNotOverwrittenError
        If ``path`` exists and ``overwrite`` is false.
    """
    target = Path(path)
    if target.exists() and not overwrite:
        raise FileExistsNotOverwrittenError(
            f"{target} already exists; choose another name or ask to overwrite it "
            "(overwrite=True, or --overwrite on the command line).")
    target.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".tmp", dir=target.parent)
    umask = os.umask(0)
    os.umask(umask)
    os.chmod(tmp, 0o666 & ~umask)
    try:
        with os.fdopen(fd, "w", encoding="utf-8", newline="") as handle:
            handle.write(text)
            handle.flush()
            os.fsync(handle.fileno())
        if not overwrite:
            # link() fails if the target appeared meanwhile, so a file made by someone else
            # between the check above and now is never replaced.
            try:
                os.link(tmp, target)
            except FileExistsError:
                raise FileExistsNotOverwrittenError(
                    f"{target} already exists; choose another name or ask to overwrite it."
                ) from None
            except OSError:
                os.replace(tmp, target)
        else:
            os.replace(tmp, target)
    finally:
        if os.path.exists(tmp):
            os.unlink(tmp)
    return target
