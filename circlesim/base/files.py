"""Writing files safely: atomically, and never over a user's file unless asked."""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

__all__ = ["FileExistsNotOverwrittenError", "write_text_atomic"]


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
