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
    """The three columns found from the positions of tabs and line ends, or ``None`` when anything
    is off (any line without exactly two tabs, a number that is not plain ASCII digits, ...)."""
    try:
        data = path.read_bytes()
    except OSError:
        return None
    header, _, body = data.partition(b"\n")
    if header.decode("utf-8", "replace") not in (VOCAB_HEADER, *OLD_VOCAB_HEADERS):
        return None
    if body and not body.endswith(b"\n"):
        body += b"\n"
    raw = np.frombuffer(body, dtype=np.uint8)
    ends = np.flatnonzero(raw == 10)
    tabs = np.flatnonzero(raw == 9)
    if len(tabs) != 2 * len(ends):
        return None
    first, second = tabs[0::2], tabs[1::2]
    starts = np.concatenate(([0], ends[:-1] + 1))
    if not (np.all(first >= starts) and np.all(second < ends)):  # with the counts equal: two tabs on every line
        return None
    index = _digits(raw, first + 1, second)
    df = _digits(raw, second + 1, ends)
    if index is None or df is None:
        return None
    try:
        text = body.decode("utf-8")
    except UnicodeDecodeError:
        return None
    cells = text.replace("\n", "\t").split("\t")
    names = cells[0:-1:3]
    if "\\" in text:
        names = list(map(unescape, names))
    return names, index, df


_MAX_DIGITS = 18  # below 2**62 is at most 19 digits; longer numbers go the line-by-line way


def _digits(raw: np.ndarray, starts: np.ndarray, stops: np.ndarray):
    """Non-negative integers written in plain ASCII digits at ``raw[starts[i]:stops[i]]`` (int64),
    or ``None`` when a field is empty, longer than :data:`_MAX_DIGITS` or not all digits."""
    lengths = stops - starts
    if len(lengths) == 0:
        return np.zeros(0, dtype=np.int64)
    if lengths.min() < 1 or lengths.max() > _MAX_DIGITS:
        return None
    width = int(lengths.max())
    place = np.arange(width)
    pos = stops[:, None] - width + place  # right-aligned: the last column holds the units
    inside = place >= (width - lengths)[:, None]
    digits = raw[np.where(inside, pos, 0)].astype(np.int64) - 48
    if np.any(inside & ((digits < 0) | (digits > 9))):
        return None
    powers = 10 ** np.arange(width - 1, -1, -1, dtype=np.int64)
    return (np.where(inside, digits, 0) * powers).sum(axis=1)
