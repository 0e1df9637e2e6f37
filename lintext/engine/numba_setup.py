"""numba set-up, imported before any kernel is compiled: the on-disk cache folder and threads.

The compiled kernels are cached beside the package (numba's default) or, when that folder is
read-only, in the user's cache folder, so that an installation in a read-only place compiles
once per user, not once per process. :mod:`lintext.engine.compiled` imports this module first.
"""

from __future__ import annotations

import os
import sys
from pathlib import Path


def numba_cache_folder(package: Path | None = None) -> str | None:
    """Where numba should keep the compiled kernels, when not beside the package.

    ``None`` (numba's default: ``__pycache__`` beside this file) when the user set
    ``NUMBA_CACHE_DIR`` or the package folder is writable; else ``lintext/numba`` in the
    user's cache folder (``$XDG_CACHE_HOME``, by default ``~/.cache``), so that an installation
    in a read-only place compiles once per user, not once per process.
    """
    if os.environ.get("NUMBA_CACHE_DIR"):
        return None
    package = Path(__file__).resolve().parent if package is None else Path(package)
    pycache = package / "__pycache__"
    if os.access(pycache if pycache.is_dir() else package, os.W_OK):
        return None
    base = os.environ.get("XDG_CACHE_HOME") or os.path.join(os.path.expanduser("~"), ".cache")
    return os.path.join(base, "lintext", "numba")


_folder = numba_cache_folder()
if _folder is not None:  # before numba reads its configuration, and before any kernel is defined
    os.environ["NUMBA_CACHE_DIR"] = _folder
    if "numba" in sys.modules:
        sys.modules["numba"].config.CACHE_DIR = _folder

import numba  # noqa: E402


def max_threads() -> int:
    """Threads numba may use in this process (``NUMBA_NUM_THREADS``, by default the cores)."""
    return max(1, int(numba.config.NUMBA_NUM_THREADS))


def resolve_threads(threads: int | None) -> int:
    """``threads`` clamped to ``[1, max_threads()]``; ``None`` or 0 means all of them."""
    if threads is None or threads <= 0:
        return max_threads()
    return max(1, min(int(threads), max_threads()))


class Threads:
    """Run numba's parallel regions of this thread on ``n`` threads, then restore the setting."""

    def __init__(self, n: int):
        self.n = n
        self.previous = None

    def __enter__(self):
        if self.n > 1:
            self.previous = numba.get_num_threads()
            numba.set_num_threads(self.n)
        return self

    def __exit__(self, *exc):
        if self.previous is not None:
            numba.set_num_threads(self.previous)
