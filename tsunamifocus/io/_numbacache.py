"""A writable cache folder for the compiled kernels, or a temporary one with one warning.

The kernels are compiled with ``cache=True``. numba looks for a cache folder next to the source
(``__pycache__``), in ``NUMBA_CACHE_DIR`` or in the user cache; when none is writable (a
read-only installation and a read-only home) it refuses to define the functions at all, so every
command would fail on import. :func:`ensure_cache_folder` finds that out by defining one cached
function in this folder (exactly what the kernels do) and, if numba refuses, points numba at a
temporary folder for this process (removed at exit). The one warning saying so is given when a
kernel is first used (:func:`warn_cache_fallback`), not on import, so the command line has its
logging set up by then (``-q`` silences it, the message is one line).
"""

from __future__ import annotations

import os
import shutil
import tempfile
import warnings
import weakref

import numba

from ..errors import TsunamiFocusWarning

__all__ = ["ensure_cache_folder", "warn_cache_fallback"]

_DONE: list[str] = []
_PENDING: list[str] = []


class _Owner:
    """Holds the temporary cache folder's finalizer (removed when the process exits)."""


_OWNER = _Owner()


def _probe(x):
    return x


def ensure_cache_folder() -> str | None:
    """Make sure numba can cache the kernels of this folder; returns the temporary folder if one was needed."""
    if _DONE:
        return _DONE[0] or None
    try:
        numba.njit(cache=True)(_probe)
        _DONE.append("")
        return None
    except RuntimeError as exc:
        if "cache" not in str(exc):
            raise
    d = tempfile.mkdtemp(prefix="tsunamifocus-numba-cache-")
    weakref.finalize(_OWNER, shutil.rmtree, d, True)  # removed at exit (finalizers run at exit)
    numba.config.CACHE_DIR = d
    os.environ["NUMBA_CACHE_DIR"] = d  # worker processes of an ensemble inherit it
    _DONE.append(d)
    _PENDING.append(
        f"numba cache: no writable cache folder (beside {os.path.dirname(__file__)}, NUMBA_CACHE_DIR or the "
        f"user cache); compiled kernels are cached in {d} for this process only (slower start); set "
        "NUMBA_CACHE_DIR to a writable folder to keep them")
    return d


def warn_cache_fallback() -> None:
    """Give the warning of :func:`ensure_cache_folder`'s fallback, once per process."""
    while _PENDING:
        warnings.warn(_PENDING.pop(), TsunamiFocusWarning, stacklevel=3)
