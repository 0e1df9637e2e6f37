"""Outputs written safely, and JSON with NumPy values.

Every file and folder lintext writes goes to a temporary path beside its target and is
moved into place in one step, so a failure or a signal never leaves half an output behind
and never changes what was at the target before. An existing folder is replaced by
exchanging the two paths (Linux ``renameat2(RENAME_EXCHANGE)``), then removing the old copy;
where the exchange is not available, by two renames whose gap the next run on the same
target repairs (:func:`lintext.outputs.clean_leftovers`). SIGINT, SIGTERM and SIGHUP that
arrive while an output is being moved into place are held until the move and the removal of
the old copy are done (:func:`deferred_signals`); one that arrives before the move cancels it.
What may be replaced at all is decided by :mod:`lintext.outputs`.
"""

from __future__ import annotations

import contextlib
import errno
import json
import math
import os
import signal
import sys
import tempfile
import threading
from pathlib import Path
from typing import Callable

import numpy as np

from .errors import LinTextError, OutputError
from .outputs import check_output_file, check_output_folder, leftover_prefix, remove_path, write_marker

# Called with the name of each step of a replace ("filled", "marked", "ready", "exchanged" or
# "moved-aside" then "renamed", "removed"); tests set it to pause or signal between the steps.
step_hook: Callable[[str], None] | None = None
# Set to False to use the two-rename fallback even where the exchange is available (tests).
use_exchange = True
# Targets moved into place by this process, most recent last (the command line names them when
# a signal arrives after an output was already complete).
written: list[Path] = []
SIGNALS = tuple(getattr(signal, name) for name in ("SIGINT", "SIGTERM", "SIGHUP") if hasattr(signal, name))


def atomic_directory(target: Path, fill: Callable[[Path], object], kind: str = "output", force: bool = False) -> Path:
    """Fill a temporary directory beside ``target``, mark it as a lintext output of ``kind``, and move it into place.

    ``target`` is checked first (:func:`lintext.outputs.check_output_folder`): an existing
    folder is replaced only when it is a lintext output of the same kind, unless ``force``.
    An existing ``target`` is replaced only once the new directory is complete; on any
    failure, or a signal, the temporary directory is removed and ``target`` is left as it
    was. Operating-system errors become :class:`~lintext.errors.OutputError` naming the target.
    """
    shown = target
    target = check_output_folder(target, kind, force)
    try:
        target.parent.mkdir(parents=True, exist_ok=True)
        tmp = Path(tempfile.mkdtemp(prefix=leftover_prefix(target.name, "tmp"), dir=target.parent))
        os.chmod(tmp, 0o777 & ~umask())  # mkdtemp makes 0700; give the usual permissions
    except OSError as exc:
        raise _output_error(shown, exc) from None
    try:
        fill(tmp)
        _step("filled")
        write_marker(tmp, kind)
        _step("marked")
        _commit(tmp, target)
    except OSError as exc:
        remove_path(tmp)
        raise _output_error(shown, exc, tmp) from None
    except BaseException:
        remove_path(tmp)
        raise
    return target


def _commit(tmp: Path, target: Path) -> None:
    """Move the finished ``tmp`` to ``target`` in one step, signals held (see the module docstring)."""
    with deferred_signals() as received:
        _step("ready")
        if received:
            remove_path(tmp)  # a signal came first: cancel, the target stays as it was
            return
        if not os.path.lexists(target):
            _rename_new(tmp, target)
            written.append(target)
            _step("renamed")
            return
        if use_exchange and _exchange(tmp, target):
            written.append(target)
            _step("exchanged")
            remove_path(tmp)  # now the old copy
            _step("removed")
            return
        old = Path(tempfile.mkdtemp(prefix=leftover_prefix(target.name, "old"), dir=target.parent))
        os.rmdir(old)
        os.rename(target, old)
        _step("moved-aside")
        try:
            os.rename(tmp, target)
        except BaseException:
            os.rename(old, target)
            raise
        written.append(target)
        _step("renamed")
        remove_path(old)
        _step("removed")


def _step(name: str) -> None:
    if step_hook is not None:
        step_hook(name)


@contextlib.contextmanager
def deferred_signals():
    """Hold SIGINT, SIGTERM and SIGHUP while the block runs; deliver the first one after it.

    Yields the list of signals received so far, so the block can cancel its work when one
    came before its point of no return. Outside the main thread nothing is held (Python
    runs signal handlers in the main thread only).
    """
    received: list[int] = []
    if threading.current_thread() is not threading.main_thread():
        yield received
        return
    saved = {}
    try:
        for sig in SIGNALS:
            saved[sig] = signal.signal(sig, lambda signum, frame: received.append(signum))
        yield received
    finally:
        for sig, handler in saved.items():
            signal.signal(sig, signal.SIG_DFL if handler is None else handler)
        if received:
            signal.raise_signal(received[0])


# ---------------------------------------------------------------- renames

_AT_FDCWD, _RENAME_NOREPLACE, _RENAME_EXCHANGE = -100, 1, 2
_renameat2 = None


def _renameat2_function():
    global _renameat2
    if _renameat2 is None:
        _renameat2 = False
        if sys.platform.startswith("linux"):
            import ctypes  # only where the exchange exists

            try:
                function = getattr(ctypes.CDLL(None, use_errno=True), "renameat2")
                function.argtypes = [ctypes.c_int, ctypes.c_char_p, ctypes.c_int, ctypes.c_char_p, ctypes.c_uint]
                function.restype = ctypes.c_int
                _renameat2 = function
            except (OSError, AttributeError):
                pass
    return _renameat2


def _call_renameat2(source: Path, target: Path, flags: int) -> bool:
    """True when done; False when the system or the file system lacks the call or the flag."""
    function = _renameat2_function()
    if not function:
        return False
    if function(_AT_FDCWD, os.fsencode(source), _AT_FDCWD, os.fsencode(target), flags) == 0:
        return True
    import ctypes

    code = ctypes.get_errno()
    if code in (errno.ENOSYS, errno.EINVAL, errno.EOPNOTSUPP, errno.ENOTSUP):
        return False
    raise OSError(code, os.strerror(code), str(target))


def _exchange(source: Path, target: Path) -> bool:
    """Swap two existing paths in one step (Linux ``renameat2`` with ``RENAME_EXCHANGE``)."""
    return _call_renameat2(source, target, _RENAME_EXCHANGE)


def _rename_new(source: Path, target: Path) -> None:
    """Rename to a path that does not exist, never over one that appeared meanwhile."""
    if not _call_renameat2(source, target, _RENAME_NOREPLACE):
        os.rename(source, target)


# ---------------------------------------------------------------- files


def atomic_file(target: Path, write: Callable[[object], object], newline: str = "", kind: str | None = None,
                force: bool = False) -> Path:
    """Write a text file through a temporary file beside ``target``, then rename it into place.

    With ``kind`` (``"predictions"`` or ``"page"``) the target is an output the user named,
    checked first by :func:`lintext.outputs.check_output_file`: an existing file is replaced
    only when lintext wrote it, unless ``force``. Operating-system errors become
    :class:`~lintext.errors.OutputError` naming the target.
    """
    shown = target
    target = check_output_file(target, kind, force) if kind else Path(target).resolve()
    try:
        target.parent.mkdir(parents=True, exist_ok=True)
        fd, tmp = tempfile.mkstemp(prefix=leftover_prefix(target.name, "tmp"), dir=target.parent)
        os.chmod(tmp, 0o666 & ~umask())
    except OSError as exc:
        raise _output_error(shown, exc, option="--out" if kind else "") from None
    try:
        with os.fdopen(fd, "w", encoding="utf-8", newline=newline) as fh:
            write(fh)
        os.replace(tmp, target)
    except OSError as exc:
        Path(tmp).unlink(missing_ok=True)
        raise _output_error(shown, exc, option="--out" if kind else "") from None
    except UnicodeEncodeError as exc:
        Path(tmp).unlink(missing_ok=True)
        raise LinTextError(f"{shown}: cannot write {exc.object[exc.start:exc.end]!r} as UTF-8 (a lone surrogate)") from None
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
    return target


def _output_error(target, exc: OSError, tmp: Path | None = None, option: str = "--out") -> OutputError:
    reason = exc.strerror or str(exc)
    inside = ""
    if tmp is not None and exc.filename and str(exc.filename).startswith(str(tmp) + os.sep):
        inside = f" (while writing {os.path.relpath(exc.filename, tmp)})"
    return OutputError(target, f"{reason}{inside}", option)


def umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


def json_default(value):
    if isinstance(value, np.integer):
        return int(value)
    if isinstance(value, np.floating):
        return float(value)
    if isinstance(value, np.ndarray):
        return value.tolist()
    if isinstance(value, tuple):
        return list(value)
    raise TypeError(f"cannot write {type(value).__name__} to JSON")


def json_text(data, indent: int | None = 2, compact_above: int = 1_000_000) -> str:
    """``data`` as JSON text (NumPy numbers and arrays allowed, NaN refused), indented unless
    the compact form is longer than ``compact_above`` characters (indentation would only add bulk)."""
    options = dict(ensure_ascii=False, allow_nan=False, default=json_default)
    text = json.dumps(data, **options)
    if indent is not None and len(text) <= compact_above:
        text = json.dumps(data, indent=indent, **options)
    return text + "\n"


def write_json(target: Path, data, indent: int | None = 2) -> Path:
    """Write ``data`` as UTF-8 JSON (see :func:`json_text`) atomically."""
    text = json_text(data, indent)
    return atomic_file(Path(target), lambda fh: fh.write(text), newline="\n")


def csv_value(value) -> str:
    """A value as a CSV cell that reads back exactly: text as is, integers in full, floats with
    ``repr`` (round-trip), whole floats as integers, NaN, infinity and ``None`` as empty cells."""
    if value is None:
        return ""
    if isinstance(value, str):
        return value
    if isinstance(value, (bool, np.bool_)):
        return "true" if value else "false"
    if isinstance(value, (int, np.integer)):
        return str(int(value))
    value = float(value)
    if not math.isfinite(value):
        return ""
    if value.is_integer() and abs(value) < 2**53:
        return str(int(value))
    return repr(value)
