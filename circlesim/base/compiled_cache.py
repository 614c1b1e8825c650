"""Keep numba's on-disk cache honest when compiled code depends on another module.

numba checks only the source file of a cached function. The compiled integrator in
``solver.py`` inlines the model's right-hand side from ``model.py``; when the model changes and
the solver does not, numba would load stale machine code and compute with the old equations.
:func:`discard_stale_cache` removes a module's cached code whenever a file it depends on has
changed since the cache was written.
"""

from __future__ import annotations

import hashlib
from collections.abc import Iterable
from pathlib import Path

__all__ = ["discard_stale_cache"]


def discard_stale_cache(module_file: str, depends_on: Iterable[str]) -> bool:
    """Delete numba's cache of ``module_file`` if any file in ``depends_on`` changed.

    Parameters
    ----------
    module_file : str
        ``__file__`` of the module whose functions are compiled with ``cache=True``.
    depends_on : iterable of str
        Source files whose code the module's compiled functions include.

    Returns
    -------
    bool
        True if cached files were removed.
    """
    module = Path(module_file)
    cache_dir = module.parent / "__pycache__"
    digest = hashlib.sha256()
    for path in sorted(depends_on):
        digest.update(Path(path).read_bytes())
    stamp = cache_dir / f"{module.stem}.depends"
    wanted = digest.hexdigest()
    try:
        if stamp.read_text() == wanted:
            return False
    except OSError:
        pass
    removed = False
    try:
        for cached in cache_dir.glob(f"{module.stem}.*.nb[ic]"):
            cached.unlink()
            removed = True
        cache_dir.mkdir(exist_ok=True)
        stamp.write_text(wanted)
    except OSError:  # a read-only install: numba then cannot cache either
        pass
    return removed
