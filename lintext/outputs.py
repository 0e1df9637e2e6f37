"""What lintext may replace: output markers, the output-path guard and leftovers of interrupted runs.

Every folder lintext writes (a model, a sweep, a probe, a feature store) holds a small marker
file, :data:`MARKER`, naming its kind and listing the files lintext put there. An existing
``--out`` folder is replaced only when it is a lintext output of the same kind holding no file
lintext did not write (or an empty folder); anything else is refused with one line naming the
path and the reason, unless the caller forces it. Folders written before markers existed are
recognised by their files (:data:`LEGACY_FILES`). Files are recognised by their content: the
header of a predictions CSV, the generator line of an HTML page.

Some targets are refused even when forced: an empty path, the file-system root, the home
folder, the current folder or one of its parents, and any path that is, or holds, an input of
the same command.

Temporary and set-aside copies live beside the target as ``.NAME.tmp-PID-XXXX`` and
``.NAME.old-PID-XXXX``. :func:`clean_leftovers` removes those of runs that are no longer alive
and, when the target itself is missing (a run killed between the two renames of the fallback
replace), puts the set-aside copy back first.
"""

from __future__ import annotations

import csv
import errno
import hashlib
import json
import os
import re
import shutil
import stat
import tempfile
from pathlib import Path

from . import __version__
from .errors import OutputError

MARKER = ".lintext.json"
FOLDER_KINDS = ("model", "sweep", "probe", "store", "output")
FILE_KINDS = ("predictions", "page")
NAME_MAX = 255  # bytes; the file-system's own limit is asked for where it can be

_MODEL_FILES = frozenset({"model.json", "weights.npz", "vocabulary.tsv", "feature_stats.npz", "confusion.npz", "confusion.csv",
                          "features.csv", "report.html"})
# Files a kind of folder held before markers existed (lintext 0.1.0). Also accepted beside a
# marker: ``lintext report`` adds features.csv and report.html to a model folder later.
LEGACY_FILES = {
    "model": _MODEL_FILES,
    "sweep": frozenset({"sweep.csv", "sweep.json", "sweep.html"} | {f"best/{n}" for n in _MODEL_FILES | {MARKER}}),
    "probe": frozenset({"probe.csv", "probe.json", "probe.html"}),
}
_PREDICTION_VALUES = ("probability", "score")
_PAGE_SIGNS = ('<meta name="generator" content="lintext', '<p class="kicker">lintext</p>')


# ---------------------------------------------------------------- markers


def write_marker(folder: Path, kind: str) -> None:
    """Write the marker of a finished output folder: its kind and every file in it."""
    files = sorted(relative_files(folder))
    content = {"written_by": "lintext", "kind": kind, "lintext_version": __version__, "files": files}
    with open(folder / MARKER, "w", encoding="utf-8") as fh:
        json.dump(content, fh, indent=1)
        fh.write("\n")


def read_marker(folder: Path) -> dict | None:
    """The marker of ``folder`` as a dict, or None when it has none (or an unreadable one)."""
    try:
        with open(Path(folder) / MARKER, encoding="utf-8") as fh:
            data = json.load(fh)
    except (OSError, ValueError):
        return None
    if not isinstance(data, dict) or data.get("written_by") != "lintext" or not isinstance(data.get("kind"), str):
        return None
    return data


def relative_files(folder: Path) -> list[str]:
    """Every file (and symbolic link) below ``folder``, as relative POSIX paths; links are not followed."""
    found = []
    for root, dirs, files in os.walk(folder):
        base = Path(root).relative_to(folder)
        for name in files + [d for d in dirs if os.path.islink(os.path.join(root, d))]:
            found.append((base / name).as_posix())
    return found


def output_kind(folder: Path) -> str | None:
    """The kind of lintext output ``folder`` is (from its marker, or by its files when older), or None."""
    marker = read_marker(folder)
    if marker is not None:
        return marker["kind"]
    return _legacy_kind(Path(folder))


def _legacy_kind(folder: Path) -> str | None:
    if (folder / "model.json").is_file() and (folder / "weights.npz").is_file():
        if re.search(rb'"format_version"\s*:\s*\d+', _head(folder / "model.json")):
            return "model"
    if (folder / "sweep.json").is_file() and _head(folder / "sweep.csv").startswith(b"run,optimizer,"):
        return "sweep"
    if (folder / "probe.json").is_file() and _head(folder / "probe.csv").startswith(b"step,learning_rate,"):
        return "probe"
    return None


def _head(path: Path, size: int = 65536) -> bytes:
    try:
        with open(path, "rb") as fh:
            return fh.read(size)
    except OSError:
        return b""


def _tail(path: Path, size: int = 16384) -> bytes:
    try:
        with open(path, "rb") as fh:
            fh.seek(max(0, os.fstat(fh.fileno()).st_size - size))
            return fh.read()
    except OSError:
        return b""


def replace_refusal(folder: Path, kind: str) -> str | None:
    """Why the existing folder must not be replaced by an output of ``kind``; None when it may."""
    files = relative_files(folder)
    if not files:
        return None  # an empty folder: nothing to lose
    marker = read_marker(folder)
    found = marker["kind"] if marker else _legacy_kind(folder)
    if found is None:
        return f"is a folder lintext did not write (it holds {_some(files)})"
    if found != kind:
        return f"is a lintext {found} folder, not a {kind} folder"
    allowed = set(LEGACY_FILES.get(kind, ())) | {MARKER}
    if marker is not None:
        allowed |= {f for f in marker.get("files", []) if isinstance(f, str)}
    foreign = [f for f in files if f not in allowed]
    if foreign:
        return f"holds {_some(foreign)}, which lintext did not write"
    return None


def _some(names: list[str]) -> str:
    names = sorted(names)
    shown = ", ".join(names[:3])
    return shown + (f" and {len(names) - 3} more" if len(names) > 3 else "")


def file_refusal(path: Path, kind: str) -> str | None:
    """Why the existing file must not be replaced by an output of ``kind``; None when it may."""
    if path.stat().st_size == 0:
        return None
    if kind == "predictions":
        first = _head(path, 65536).split(b"\n", 1)[0]
        try:
            header = next(csv.reader([first.decode("utf-8").rstrip("\r")]), [])
        except (UnicodeDecodeError, csv.Error):
            header = []
        if "label" in header and any(name in header for name in _PREDICTION_VALUES):
            return None
        return "is a file lintext did not write (not a predictions CSV)"
    if kind == "page":
        if any(sign.encode() in _head(path) for sign in _PAGE_SIGNS) and b"Written by lintext" in _tail(path):
            return None
        return "is a file lintext did not write (not a lintext page)"
    raise ValueError(f"unknown kind of output file {kind!r}")


# ---------------------------------------------------------------- the guard


def check_output_folder(target, kind: str, force: bool = False, inputs=(), option: str = "--out") -> Path:
    """Check an output folder before any work; returns the real path that will be written.

    Refused with :class:`~lintext.errors.OutputError` (one line, naming ``option`` and the
    path): see the module docstring. ``force`` allows replacing a folder or file lintext did
    not write, never a protected path or an input. Leftovers of interrupted runs on the same
    target are cleaned first (:func:`clean_leftovers`).
    """
    real = _check_common(target, inputs, option)
    clean_leftovers(real)
    if real.exists():
        if not real.is_dir():
            if not force:
                raise OutputError(target, "is a file, not a folder lintext wrote; give another path (or --force to replace it)", option)
        else:
            reason = replace_refusal(real, kind)
            if reason is not None and not force:
                raise OutputError(target, f"{reason}; refusing to replace it: give another path (or --force to replace it)", option)
    return real


def check_output_file(target, kind: str, force: bool = False, inputs=(), option: str = "--out") -> Path:
    """Check an output file before any work (see :func:`check_output_folder`); returns its real path.

    A folder given where a file is expected, and a special file (a device, a pipe) are refused
    even when forced.
    """
    real = _check_common(target, inputs, option)
    clean_leftovers(real)
    if real.is_dir():
        raise OutputError(target, "is a folder; give a file name", option)
    if real.exists():
        if not stat.S_ISREG(real.stat().st_mode):
            raise OutputError(target, "is not a regular file (a device or a pipe); give a file name", option)
        reason = file_refusal(real, kind)
        if reason is not None and not force:
            raise OutputError(target, f"{reason}; refusing to replace it: give another path (or --force to replace it)", option)
    return real


def _check_common(target, inputs, option: str) -> Path:
    if target is None or not str(target).strip():
        raise OutputError(repr(str(target or "")), "is an empty path", option)
    path = Path(os.path.expanduser(str(target)))
    try:
        real = path.resolve()
    except (OSError, RuntimeError) as exc:  # a symbolic-link loop
        raise OutputError(target, f"cannot be resolved ({_reason(exc)})", option) from None
    protected = {Path(real.anchor), Path.home().resolve()}
    cwd = Path.cwd().resolve()
    if real in protected or real == cwd or real in cwd.parents:
        what = "the current folder or one of its parents" if (real == cwd or real in cwd.parents) else "a protected folder"
        raise OutputError(target, f"is {what}; lintext never replaces it", option)
    for item in inputs:
        if item is None or isinstance(item, (list, tuple)) and not item:
            continue
        for one in item if isinstance(item, (list, tuple)) else [item]:
            if not isinstance(one, (str, os.PathLike)):
                continue
            source = Path(one).resolve()
            if source == real or real in source.parents:
                raise OutputError(target, f"is or holds {one}, which this command reads; give another path", option)
    _check_parent(real, target, option)
    return real


def _check_parent(real: Path, target, option: str) -> None:
    """The parent must be (or become) a writable folder, and the names must fit."""
    ancestor = real.parent
    while not ancestor.exists():
        if ancestor.is_symlink():
            raise OutputError(target, f"{ancestor} is a broken symbolic link", option)
        ancestor = ancestor.parent
    if not ancestor.is_dir():
        raise OutputError(target, f"{ancestor} is a file, not a folder", option)
    limit = _name_max(ancestor)
    for part in real.relative_to(ancestor).parts:
        if len(os.fsencode(part)) > limit:
            raise OutputError(target, f"the name {part[:40]}… is longer than {limit} bytes", option)
    try:  # a real probe: catches permissions, read-only file systems, quotas on entries
        probe = tempfile.mkdtemp(prefix=leftover_prefix(real.name, "tmp"), dir=ancestor)
        os.rmdir(probe)
    except OSError as exc:
        raise OutputError(target, f"cannot write in {ancestor} ({_reason(exc)})", option) from None


def _name_max(folder: Path) -> int:
    try:
        return int(os.pathconf(folder, "PC_NAME_MAX"))
    except (OSError, ValueError, AttributeError):
        return NAME_MAX


def _reason(exc: BaseException) -> str:
    if isinstance(exc, OSError) and exc.strerror:
        return exc.strerror
    return str(exc) or type(exc).__name__


# ---------------------------------------------------------------- leftovers


def short_name(name: str) -> str:
    """``name`` itself, or (when long) a prefix and a hash, so that temporary names stay below the limit."""
    if len(os.fsencode(name)) <= 180:
        return name
    digest = hashlib.sha1(os.fsencode(name)).hexdigest()[:10]
    head = os.fsdecode(os.fsencode(name)[:160]).rstrip("\udc80\udcff")
    return f"{head}~{digest}"


def leftover_prefix(name: str, role: str) -> str:
    """The prefix of this process's temporary (``tmp``) or set-aside (``old``) copy of ``name``."""
    return f".{short_name(name)}.{role}-{os.getpid()}-"


def clean_leftovers(target: Path) -> list[Path]:
    """Remove the leftovers of interrupted runs on ``target``; restore a set-aside copy if the target is gone.

    Only leftovers of processes that are no longer alive are touched (and those of this
    process), so two runs on the same target never remove each other's work. Returns what
    was restored (at most the target itself).
    """
    parent, restored = Path(target).parent, []
    if not parent.is_dir():
        return restored
    stem = short_name(Path(target).name)
    found = {"tmp": [], "old": []}
    try:
        entries = list(os.scandir(parent))
    except OSError:
        return restored
    for entry in entries:
        for role in found:
            prefix = f".{stem}.{role}-"
            if entry.name.startswith(prefix) and not _alive(entry.name[len(prefix):]):
                found[role].append(Path(entry.path))
    if found["old"] and not os.path.lexists(target):
        newest = max(found["old"], key=lambda p: p.lstat().st_mtime_ns)
        try:
            os.rename(newest, target)
        except OSError:
            return restored  # leave everything as it is: the set-aside copy is the only one
        found["old"].remove(newest)
        restored.append(Path(target))
    for leftover in found["tmp"] + found["old"]:
        remove_path(leftover)
    return restored


def _alive(rest: str) -> bool:
    """Whether the process that made a leftover (``PID-XXXX`` after the prefix) is another live one."""
    pid = rest.split("-", 1)[0]
    if not pid.isdigit() or "-" not in rest:
        return False  # written before names carried the process id
    return int(pid) != os.getpid() and process_alive(int(pid))


def process_alive(pid: int) -> bool:
    """Whether a process with this id exists (another user's counts)."""
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except OSError as exc:
        return exc.errno == errno.EPERM  # alive, another user's
    return True


def remove_path(path: Path) -> None:
    """Remove a file, link or folder tree; errors are ignored (a later run tries again)."""
    try:
        if os.path.isdir(path) and not os.path.islink(path):
            shutil.rmtree(path, ignore_errors=True)
        else:
            os.unlink(path)
    except OSError:
        pass
