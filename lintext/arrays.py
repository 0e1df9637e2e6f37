"""NumPy archives (``.npz``) read with every header and size checked before anything is read.

``numpy.load`` allocates what an array's header claims before reading its data, so a
tampered ``weights.npz`` whose header says ``(10**12, 7)`` asks for 50 TiB, and a small
zip member that inflates to gigabytes (a zip bomb) is inflated before its shape is looked
at. :func:`read_npz` instead reads each member's ``.npy`` header from the zip stream, checks
its dtype (never Python objects), its shape against the one expected, the member's declared
size against what the header implies, and the memory available, and only then reads exactly
that many bytes into a fresh array. Nothing here ever unpickles.
"""

from __future__ import annotations

import math
import zipfile
import zlib
from pathlib import Path

import numpy as np

from .errors import ModelFileError
from .resources import available_memory, size_text

KIND_NAMES = {"f": "float32/float64", "i": "int32/int64"}
CHUNK_BYTES = 1 << 18  # small enough that the CRC runs on bytes still in the cache


def read_npz(path: Path, shapes: dict, kinds: str = "f", finite: bool = True, optional: tuple = ()) -> dict:
    """Read the named arrays of an ``.npz`` file, checked before they are read.

    Parameters
    ----------
    path : the archive.
    shapes : array name -> expected shape (a tuple of ints; ``None`` for a length that may be any).
    kinds : accepted dtype kinds, ``"f"`` (float32/float64) and/or ``"i"`` (int32/int64).
    finite : refuse NaN and infinity (float arrays).
    optional : names that may be missing (left out of the result).

    Raises
    ------
    ModelFileError naming the file and the array: missing, unreadable, holding objects, of
    the wrong dtype or shape, larger than its header says, or larger than the memory available.
    """
    path = Path(path)
    if not path.is_file():
        raise ModelFileError(path, "file is missing")
    try:
        with zipfile.ZipFile(path) as archive:
            members = {info.filename: info for info in archive.infolist()}
            arrays = {}
            for name, shape in shapes.items():
                info = members.get(f"{name}.npy")
                if info is None:
                    if name in optional:
                        continue
                    raise ModelFileError(path, f"array {name!r} is missing")
                arrays[name] = _read_member(path, archive, info, name, tuple(shape), kinds)
    except ModelFileError:
        raise
    except (zipfile.BadZipFile, zipfile.LargeZipFile, ValueError, EOFError, NotImplementedError, KeyError,
            RuntimeError) as exc:
        raise ModelFileError(path, f"not a readable NumPy archive ({type(exc).__name__}: {exc})") from None
    except OSError as exc:
        raise ModelFileError(path, f"cannot be read ({exc.strerror or exc})") from None
    if finite:
        for name, array in arrays.items():
            if array.dtype.kind == "f" and array.size and not (np.isfinite(array.min()) and np.isfinite(array.max())):
                raise ModelFileError(path, f"array {name!r} holds non-finite values")  # min/max: no temporary array
    return arrays


def _read_member(path: Path, archive: zipfile.ZipFile, info: zipfile.ZipInfo, name: str, shape: tuple,
                 kinds: str) -> np.ndarray:
    with archive.open(info) as fh:
        version = np.lib.format.read_magic(fh)
        if version == (1, 0):
            header_shape, fortran, dtype = np.lib.format.read_array_header_1_0(fh)
        elif version in ((2, 0), (3, 0)):
            header_shape, fortran, dtype = np.lib.format.read_array_header_2_0(fh)
        else:
            raise ModelFileError(path, f"array {name!r} has an unknown .npy version {version}")
        if dtype.hasobject:
            raise ModelFileError(path, f"not a readable NumPy archive (array {name!r} holds Python objects, "
                                       "which lintext never loads)")
        if dtype.kind not in kinds or dtype.itemsize not in (4, 8) or dtype.fields is not None:
            expected = " or ".join(KIND_NAMES[k] for k in kinds)
            raise ModelFileError(path, f"array {name!r} has dtype {dtype}, expected {expected}")
        header_shape = tuple(header_shape)
        if len(header_shape) != len(shape) or any(e is not None and e != h for e, h in zip(shape, header_shape)):
            expected = tuple("any" if e is None else e for e in shape)
            raise ModelFileError(path, f"array {name!r} has shape {header_shape}, expected {expected}".replace("'any'", "any"))
        shape = header_shape
        n_bytes = math.prod(shape) * dtype.itemsize
        header_bytes = fh.tell()
        if info.file_size != header_bytes + n_bytes:
            raise ModelFileError(path, f"array {name!r} is stored as {info.file_size:,} bytes where its header "
                                       f"implies {header_bytes + n_bytes:,}")
        available = available_memory()
        if available is not None and n_bytes > available:
            raise ModelFileError(path, f"array {name!r} needs {size_text(n_bytes)} of memory, "
                                       f"{size_text(available)} is available")
        array = np.empty(shape, dtype=dtype, order="F" if fortran else "C")
        view = memoryview(array.reshape(-1, order="A")).cast("B") if n_bytes else memoryview(b"")
        if info.compress_type == zipfile.ZIP_STORED and hasattr(archive.fp, "readinto"):
            _read_stored(path, archive, info, name, header_bytes, view)
        else:
            done = 0
            while done < n_bytes:  # in pieces: a zip member's readinto reads the whole request into a copy first
                got = fh.readinto(view[done:done + CHUNK_BYTES])
                if not got:
                    raise ModelFileError(path, f"array {name!r} is truncated ({done:,} of {n_bytes:,} bytes)")
                done += got
    if not dtype.isnative:
        array = array.astype(dtype.newbyteorder("="))
    return np.ascontiguousarray(array)


def _read_stored(path: Path, archive: zipfile.ZipFile, info: zipfile.ZipInfo, name: str, header_bytes: int,
                 view: memoryview) -> None:
    """Read an uncompressed member's array straight from the file into ``view``, checking the
    member's CRC-32 as zipfile would (one copy fewer than reading through the member)."""
    raw = archive.fp
    raw.seek(info.header_offset)
    local = raw.read(30)  # the local file header: its name and extra field may differ from the directory's
    if len(local) != 30 or local[:4] != b"PK\x03\x04":
        raise ModelFileError(path, f"not a readable NumPy archive (bad local header of {name!r})")
    start = info.header_offset + 30 + int.from_bytes(local[26:28], "little") + int.from_bytes(local[28:30], "little")
    raw.seek(start)
    crc = zlib.crc32(raw.read(header_bytes))
    done, n_bytes = 0, len(view)
    while done < n_bytes:
        got = raw.readinto(view[done:done + CHUNK_BYTES])
        if not got:
            raise ModelFileError(path, f"array {name!r} is truncated ({done:,} of {n_bytes:,} bytes)")
        crc = zlib.crc32(view[done:done + got], crc)
        done += got
    if crc != info.CRC:
        raise ModelFileError(path, f"not a readable NumPy archive (array {name!r} fails its CRC-32 check: damaged)")
