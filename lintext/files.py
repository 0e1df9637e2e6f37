"""Outputs written safely, and JSON with NumPy values.

Every file and folder lintext writes goes to a temporary path beside its target and is
renamed into place, so a failure or an interrupt never leaves half an output behind and
never changes what was at the target before.
"""

from __future__ import annotations

import json
import math
import os
import shutil
import tempfile
from pathlib import Path
from typing import Callable

import numpy as np

from .errors import LinTextError


def atomic_directory(target: Path, fill: Callable[[Path], object]) -> Path:
    """Fill a temporary directory beside ``target``, then rename it into place.

    An existing ``target`` is replaced only once the new directory is complete;
    on any failure (or Ctrl-C) the temporary directory is removed and
    ``target`` is left as it was.
    """
    target = Path(target).resolve()
    target.parent.mkdir(parents=True, exist_ok=True)
    if target.exists() and not target.is_dir():
        raise LinTextError(f"{target}: exists and is not a directory")
    tmp = Path(tempfile.mkdtemp(prefix=f".{target.name}.tmp-", dir=target.parent))
    os.chmod(tmp, 0o777 & ~umask())  # mkdtemp makes 0700; give the usual permissions
    old = None
    try:
        fill(tmp)
        if target.exists():
            old = Path(tempfile.mkdtemp(prefix=f".{target.name}.old-", dir=target.parent))
            os.rename(target, old / "previous")
        os.rename(tmp, target)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        if old is not None and (old / "previous").exists() and not target.exists():
            os.rename(old / "previous", target)
        raise
    finally:
        if old is not None:
            shutil.rmtree(old, ignore_errors=True)
    return target


def atomic_file(target: Path, write: Callable[[object], object], newline: str = "") -> Path:
    """Write a text file through a temporary file beside ``target``, then rename it into place."""
    target = Path(target).resolve()
    target.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.tmp-", dir=target.parent)
    os.chmod(tmp, 0o666 & ~umask())
    try:
        with os.fdopen(fd, "w", encoding="utf-8", newline=newline) as fh:
            write(fh)
        os.replace(tmp, target)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
    return target


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


def write_json(target: Path, data, indent: int | None = 2) -> Path:
    """Write ``data`` as UTF-8 JSON (NumPy numbers and arrays allowed, NaN refused) atomically."""
    def write(fh):
        json.dump(data, fh, indent=indent, ensure_ascii=False, allow_nan=False, default=json_default)
        fh.write("\n")

    return atomic_file(Path(target), write, newline="\n")


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
