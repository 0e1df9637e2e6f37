"""The vocabulary file (``vocabulary.tsv``) and the escaping of texts on one TSV field.

One line per feature: the feature (backslash, tab and line ends escaped), its column and its
document frequency in training, under the header :data:`VOCAB_HEADER`.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ..errors import ModelFileError

VOCAB_HEADER = "feature\tcolumn\tdocument_frequency"
OLD_VOCAB_HEADERS = ("feature\tindex\tdocument_frequency",)  # read, never written
_ESCAPES = {"\\": "\\\\", "\t": "\\t", "\n": "\\n", "\r": "\\r"}
_UNESCAPES = {"\\": "\\", "t": "\t", "n": "\n", "r": "\r"}


_ESCAPE_TABLE = str.maketrans(_ESCAPES)


def escape(text: str) -> str:
    """A text on one TSV field: backslash, tab and line ends escaped (read back by :func:`unescape`)."""
    return text.translate(_ESCAPE_TABLE)


def unescape(text: str) -> str:
    if "\\" not in text:
        return text
    out, i = [], 0
    while i < len(text):
        c = text[i]
        if c == "\\" and i + 1 < len(text):
            out.append(_UNESCAPES.get(text[i + 1], text[i + 1]))
            i += 2
        else:
            out.append(c)
            i += 1
    return "".join(out)


def read_vocabulary(path: Path):
    """``(names, columns, document frequencies)`` of a vocabulary TSV, read a column at a time; when
    a line is not as it should be, read again line by line to name the line and the problem."""
    if not path.is_file():
        raise ModelFileError(path, "vocabulary file is missing")
    fast = _vocabulary_columns(path)
    if fast is not None:
        return fast
    names, index, df = [], [], []
    number = 1
    try:
        with open(path, "rb") as fh:
            header = fh.readline().rstrip(b"\n")
            if header.decode("utf-8", "replace") != VOCAB_HEADER and header.decode("utf-8", "replace") not in OLD_VOCAB_HEADERS:
                raise ModelFileError(path, f"line 1: expected the header {VOCAB_HEADER!r}")
            for number, raw in enumerate(fh, start=2):
                parts = raw.rstrip(b"\n").decode("utf-8").split("\t")
                if len(parts) != 3:
                    raise ModelFileError(path, f"line {number}: expected 3 tab-separated fields, found {len(parts)}")
                try:
                    column, frequency = int(parts[1]), int(parts[2])
                except ValueError:
                    raise ModelFileError(path, f"line {number}: column and document frequency must be integers") from None
                for what, value in (("column", column), ("document frequency", frequency)):
                    if not 0 <= value < 2**62:
                        raise ModelFileError(path, f"line {number}: {what} {str(value)[:20]} out of range")
                index.append(column)
                df.append(frequency)
                names.append(unescape(parts[0]))
    except UnicodeDecodeError:
        raise ModelFileError(path, f"line {number}: not valid UTF-8") from None
    except OSError as exc:
        raise ModelFileError(path, f"cannot be read ({exc.strerror or exc})") from None
    return names, np.asarray(index, dtype=np.int64), np.asarray(df, dtype=np.int64)


def _vocabulary_columns(path: Path):
    """The three columns split and converted a column at a time, or ``None`` when anything is off."""
    try:
        header, _, body = path.read_bytes().partition(b"\n")
        body = body.decode("utf-8")
    except (OSError, UnicodeDecodeError):
        return None
    header = header.decode("utf-8", "replace")
    if header != VOCAB_HEADER and header not in OLD_VOCAB_HEADERS:
        return None
    rows = body.split("\n")
    if rows and rows[-1] == "":
        rows.pop()
    if any(row.count("\t") != 2 for row in rows):
        return None
    cells = "\t".join(rows).split("\t") if rows else []
    try:
        index, df = list(map(int, cells[1::3])), list(map(int, cells[2::3]))
    except ValueError:
        return None
    if rows and (min(min(index), min(df)) < 0 or max(max(index), max(df)) >= 2**62):
        return None
    return list(map(unescape, cells[0::3])), np.array(index, dtype=np.int64), np.array(df, dtype=np.int64)
