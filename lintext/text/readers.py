"""Readers for labelled text: folder-per-label trees, CSV/TSV, JSON Lines and plain text.

``-`` reads standard input (plain text unless ``format`` says otherwise). Plain text
(``lines``, suffix ``.txt``) is one document per line, unlabelled; CSV follows RFC 4180
quoting, TSV the IANA form without quoting (quotes are text); a blank line is an empty
document, so record numbers stay line numbers. CSV/TSV columns are chosen by header name or,
for files without a header (``header=False``), by position counted from 1.

Every reader yields :class:`Record` objects carrying the position they came
from, so that later errors (an unknown label in a dev file, say) can name it.
Every bad input raises :class:`~lintext.errors.InputError` with a one-line
message naming the file, the line or record, and the problem.
"""

from __future__ import annotations

import contextlib
import csv
import itertools
import json
import os
import sys
from dataclasses import dataclass, field
from pathlib import Path
from typing import Iterator

from ..errors import ConfigError, InputError

FORMATS = ("folder", "csv", "tsv", "jsonl", "lines")
_SUFFIXES = {".csv": "csv", ".tsv": "tsv", ".tab": "tsv", ".jsonl": "jsonl", ".ndjson": "jsonl", ".txt": "lines"}
STDIN = "-"

csv.field_size_limit(min(sys.maxsize, 2**31 - 1))


@dataclass(frozen=True)
class ReaderOptions:
    """How to read a data file: its format (``None``: from the path) and which columns or
    fields hold the text and the label. Carried as one object by every command that reads."""

    format: str | None = None
    text_column: str = "text"
    label_column: str = "label"
    id_column: str | None = None
    header: bool = True
    weight_column: str | None = None  # a column or field of per-document weights (training only)

    def validate(self) -> "ReaderOptions":
        if self.format is not None and self.format not in FORMATS:
            raise ConfigError("--format", self.format, f"choose one of {', '.join(FORMATS)}")
        if not self.header:  # (the label column is checked when a command needs labels)
            for option, value in (("--text-column", self.text_column), ("--id-column", self.id_column)):
                if value is not None and column_position(value) is None:
                    raise ConfigError(option, value, "a file without a header names its columns by position: 1, 2, ...")
        return self


def column_position(value) -> int | None:
    """``value`` as a 0-based column index when it is a whole number from 1 (``"2"`` -> 1), else None."""
    text = str(value).strip()
    return int(text) - 1 if text.isdigit() and int(text) >= 1 else None


@dataclass
class Record:
    text: str
    label: str | None
    source: str  # "file:line" or the document's own file
    id: str | None = None  # the --id-column value, carried to the predictions
    weight: float | None = None  # from ReaderOptions.weight_column


@dataclass
class Corpus:
    """Texts with their labels (``None`` when unlabelled) and where each came from."""

    texts: list[str]
    labels: list[str | None]
    sources: list[str]
    path: str = ""
    label_names: list[str] = field(default_factory=list)
    ids: list[str | None] | None = None
    weights: list[float] | None = None  # per-document weights, when read from a weight column

    def __post_init__(self):
        if not self.label_names:
            self.label_names = sorted({lab for lab in self.labels if lab is not None})

    @classmethod
    def from_lists(cls, texts, labels=None, path: str = "in-memory data") -> "Corpus":
        """A corpus from in-memory texts and (optionally) labels, checked like a file's records."""
        if isinstance(texts, str) or not hasattr(texts, "__len__"):
            raise InputError(path, "texts must be a list of strings")
        texts = list(texts)
        labels = [None] * len(texts) if labels is None else list(labels)
        if len(labels) != len(texts):
            raise InputError(path, f"{len(texts)} texts but {len(labels)} labels")
        for i, (text, label) in enumerate(zip(texts, labels)):
            if not isinstance(text, str):
                raise InputError(path, f"text must be a string, not {type(text).__name__}", record=f"item {i}")
            if label is not None:
                labels[i] = _check_label(label, path, {"record": f"item {i}"})
        return cls(texts, labels, [f"{path}, item {i}" for i in range(len(texts))], path)

    def __len__(self) -> int:
        return len(self.texts)

    @classmethod
    def from_records(cls, records, path="") -> "Corpus":
        records = list(records)
        ids = [r.id for r in records] if any(r.id is not None for r in records) else None
        weights = [r.weight for r in records] if records and records[0].weight is not None else None
        return cls([r.text for r in records], [r.label for r in records], [r.source for r in records], str(path), ids=ids,
                   weights=weights)

    def subset(self, index) -> "Corpus":
        return Corpus(
            [self.texts[i] for i in index],
            [self.labels[i] for i in index],
            [self.sources[i] for i in index],
            self.path,
            list(self.label_names),
            None if self.ids is None else [self.ids[i] for i in index],
            None if self.weights is None else [self.weights[i] for i in index],
        )

    def label_counts(self) -> dict[str, int]:
        counts = {name: 0 for name in self.label_names}
        for lab in self.labels:
            if lab is not None:
                counts[lab] = counts.get(lab, 0) + 1
        return counts

    def label_indices(self, label_names: list[str] | None = None):
        """Labels as integer codes (an int64 array) in the order of ``label_names`` (default: this corpus's own)."""
        import numpy as np  # here: the command line's options are declared from this module, and --help loads no NumPy

        names = self.label_names if label_names is None else label_names
        code = {name: i for i, name in enumerate(names)}
        out = np.empty(len(self.labels), dtype=np.int64)
        for i, lab in enumerate(self.labels):
            if lab not in code:
                raise InputError(self.sources[i], f"label {lab!r} does not occur in the training data")
            out[i] = code[lab]
        return out


def infer_format(path: str | os.PathLike) -> str:
    """The reader for ``path``: a folder, or by file suffix; plain text for standard input (``-``)."""
    if str(path) == STDIN:
        return "lines"
    p = Path(path)
    if not p.exists():
        raise InputError(p, "no such file or folder")
    if p.is_dir():
        return "folder"
    fmt = _SUFFIXES.get(p.suffix.lower())
    if fmt is None:
        raise InputError(p, f"cannot tell the format from the suffix {p.suffix!r}; choose one of {', '.join(FORMATS)}")
    return fmt


def iter_records(
    path: str | os.PathLike,
    reader: ReaderOptions | None = None,
    require_labels: bool = True,
) -> Iterator[Record]:
    """Yield the records of one labelled file or folder, in file order.

    Parameters
    ----------
    path : file or folder.
    reader : format (``folder``, ``csv``, ``tsv``, ``jsonl`` or ``lines``; inferred from the
        path when ``None``), the column (CSV/TSV) or field (JSON Lines) names of text, label
        and id, and whether a CSV/TSV file has a header line.
    require_labels : when False, a missing label column gives records with label ``None``.
    """
    reader = (reader or ReaderOptions()).validate()
    fmt = reader.format or infer_format(path)
    if fmt == "lines" and require_labels:
        raise InputError(path, "plain text (one document per line) has no labels; give labelled data as "
                               "CSV, TSV, JSON Lines or a folder (--format)")
    if str(path) == STDIN:
        if fmt == "folder":
            raise ConfigError("--format", fmt, "standard input holds a file, not a folder")
        return _iter_format(fmt, STDIN, reader, require_labels)
    p = Path(path)
    if not p.exists():
        raise InputError(p, "no such file or folder")
    if fmt == "folder":
        if not p.is_dir() or (p / "store.json").is_file():  # store.json: a feature store (lintext.text.store)
            raise InputError(p, "is a feature store (lintext featurize), not labelled files" if p.is_dir() else "not a folder")
        if reader.weight_column is not None:
            raise ConfigError("--weight-column", reader.weight_column, "a folder of documents has no columns")
        return _iter_folder(p)
    if p.is_dir():
        raise InputError(p, f"is a folder, not a {fmt} file")
    return _iter_format(fmt, p, reader, require_labels)


def _iter_format(fmt: str, p, reader: ReaderOptions, require_labels: bool):
    if fmt == "lines":
        return _iter_lines(p)
    if fmt == "jsonl":
        return _iter_jsonl(p, reader.text_column, reader.label_column, require_labels, reader.id_column,
                           reader.weight_column)
    return _iter_delimited(p, "\t" if fmt == "tsv" else ",", reader, require_labels)


def read_corpus(
    path: str | os.PathLike,
    reader: ReaderOptions | None = None,
    require_labels: bool = True,
    min_labels: int = 2,
) -> Corpus:
    """Read a whole corpus; with labels required, at least ``min_labels`` distinct labels."""
    corpus = Corpus.from_records(iter_records(path, reader, require_labels), path)
    if len(corpus) == 0:
        raise InputError(path, "no documents")
    if require_labels and len(corpus.label_names) < min_labels:
        found = ", ".join(repr(x) for x in corpus.label_names)
        raise InputError(path, f"found {len(corpus.label_names)} label(s) ({found}); a classifier needs at least {min_labels}")
    return corpus


def iter_chunks(path, chunk_size: int = 20000, reader: ReaderOptions | None = None) -> Iterator[Corpus]:
    """Stream a file as corpora of at most ``chunk_size`` records (labels optional)."""
    buf: list[Record] = []
    for rec in iter_records(path, reader, require_labels=False):
        buf.append(rec)
        if len(buf) >= chunk_size:
            yield Corpus.from_records(buf, path)
            buf = []
    if buf:
        yield Corpus.from_records(buf, path)


# ---------------------------------------------------------------- decoding


def _decoded_lines(path) -> Iterator[str]:
    """Lines of a UTF-8 file or of standard input (``-``); a BOM is dropped; invalid bytes name the
    line and byte offset, a failed read (permission, I/O error) the line it stopped at."""
    number = 0
    try:
        with (contextlib.nullcontext(sys.stdin.buffer) if str(path) == STDIN else open(path, "rb")) as fh:
            offset = 0
            for number, raw in enumerate(fh, start=1):
                try:
                    line = raw.decode("utf-8")
                except UnicodeDecodeError as exc:
                    if number == 1 and raw[:2] in (b"\xff\xfe", b"\xfe\xff"):
                        raise InputError(path, "starts with a UTF-16 byte-order mark; lintext reads UTF-8 "
                                               "(convert it, e.g. iconv -f UTF-16 -t UTF-8)", line=1) from None
                    raise InputError(
                        path, f"invalid UTF-8 byte 0x{raw[exc.start]:02x} at byte offset {offset + exc.start}", line=number
                    ) from None
                if number == 1 and line.startswith("\ufeff"):
                    line = line[1:]
                offset += len(raw)
                yield line
    except OSError as exc:
        raise InputError(path, f"cannot be read ({_reason(exc)})", line=number + 1 if number else None) from None


def _reason(exc: OSError) -> str:
    return exc.strerror or str(exc) or type(exc).__name__


def _unwritable(path: Path, value: str, what: str, where: dict) -> None:
    """Refuse a string that cannot be written back as UTF-8: a lone surrogate from a JSON escape."""
    try:
        value.encode("utf-8")
    except UnicodeEncodeError as exc:
        raise InputError(path, f"{what} holds a lone surrogate (\\u{ord(value[exc.start]):04x}) at character {exc.start + 1}; "
                               "it is not text and cannot be written as UTF-8", **where) from None


def _read_text_file(path: Path) -> str:
    try:
        raw = path.read_bytes()
    except OSError as exc:
        raise InputError(path, f"cannot be read ({_reason(exc)})") from None
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        line = raw.count(b"\n", 0, exc.start) + 1
        raise InputError(path, f"invalid UTF-8 byte 0x{raw[exc.start]:02x} at byte offset {exc.start}", line=line) from None
    return text.lstrip("\ufeff")


# ---------------------------------------------------------------- readers


def _iter_folder(root: Path) -> Iterator[Record]:
    labels = sorted(d for d in _entries(root) if d.is_dir() and not d.name.startswith("."))
    if not labels:
        raise InputError(root, "folder has no label sub-folders (expected one sub-folder per label)")
    for label_dir in labels:
        for doc in sorted(f for f in _entries(label_dir) if f.is_file() and not f.name.startswith(".")):
            yield Record(_read_text_file(doc), label_dir.name, str(doc))


def _entries(folder: Path) -> list[Path]:
    try:
        return list(folder.iterdir())
    except OSError as exc:
        raise InputError(folder, f"cannot be listed ({_reason(exc)})") from None


def _check_label(label, path: Path, where: dict) -> str:
    if label is None or (isinstance(label, str) and not label.strip()):
        raise InputError(path, "empty label", **where)
    if isinstance(label, bool) or not isinstance(label, (str, int)):
        raise InputError(path, f"label must be a string, not {type(label).__name__}", **where)
    return str(label).strip()


def _weight(value, path, where: dict, column: str) -> float:
    """A document weight: a finite number of at least 0; an InputError naming the record otherwise."""
    try:
        weight = float(value)
    except (TypeError, ValueError):
        weight = float("nan")
    if isinstance(value, bool) or not (weight >= 0 and weight != float("inf")):
        raise InputError(path, f"{column!r} must be a finite number of at least 0, not {value!r}", **where)
    return weight


def _iter_delimited(path, delimiter: str, reader: ReaderOptions, require_labels: bool):
    lines = _decoded_lines(path)
    # CSV: RFC 4180 quoting. TSV: the IANA text/tab-separated-values form, no quoting (a field holds
    # no tab and no line break; quotes are text), as "label<TAB>text" files are usually written.
    quoting = csv.QUOTE_NONE if delimiter == "\t" else csv.QUOTE_MINIMAL
    rows = csv.reader(lines, delimiter=delimiter, strict=True, quoting=quoting)
    name = _display(path)
    try:
        first = next(rows, None)
        if first is None or not any(h.strip() for h in first):
            raise InputError(name, "empty file" if first is None else "empty header line", line=None if first is None else 1)
        if reader.header:
            header = [h.strip() for h in first]
            width = len(header)
        else:
            header, width = None, len(first)
        text_at = _column(name, header, width, reader.text_column, "text column", required=True)
        label_at = _column(name, header, width, reader.label_column, "label column", required=require_labels)
        id_at = _column(name, header, width, reader.id_column, "id column", required=True) if reader.id_column else None
        weight_at = (_column(name, header, width, reader.weight_column, "weight column", required=True)
                     if reader.weight_column else None)
        pending = [] if reader.header else [first]
        start = 1 if not reader.header else rows.line_num + 1
        count = 0
        for row in itertools.chain(pending, rows):
            where = {"line": start}
            start = rows.line_num + 1
            if not row:
                continue  # blank line
            if len(row) != width:
                raise InputError(name, f"{len(row)} fields where {'the header' if reader.header else 'line 1'} has {width}", **where)
            label = _check_label(row[label_at], name, where) if label_at is not None else None
            count += 1
            weight = None if weight_at is None else _weight(row[weight_at], name, where, reader.weight_column)
            yield Record(row[text_at], label, f"{name}:{where['line']}", None if id_at is None else row[id_at], weight)
        if count == 0:
            raise InputError(name, "no records after the header line")
    except csv.Error as exc:
        raise InputError(name, f"malformed {'TSV' if delimiter == chr(9) else 'CSV'}: {exc}", line=rows.line_num) from None


def _column(name, header, width: int, wanted, kind: str, required: bool) -> int | None:
    """Index of column ``wanted``: by header name, else by position from 1; None when absent and not required."""
    if wanted is None:
        return None
    if header is not None and wanted in header:
        if header.count(wanted) > 1:
            raise InputError(name, f"the header names column {wanted!r} {header.count(wanted)} times", line=1)
        return header.index(wanted)
    at = column_position(wanted)
    if at is not None and at < width:
        return at
    if not required:
        return None
    if header is None:
        raise InputError(name, f"no column {wanted!r}: without a header, give the {kind} by position, "
                               f"1 to {width} (--no-header)", line=1)
    raise InputError(name, f"no column {wanted!r} in the header (columns: {', '.join(header)})", line=1)


def _iter_lines(path):
    """Plain text: one document per line (a blank line is an empty document), unlabelled."""
    name = _display(path)
    count = 0
    for number, line in enumerate(_decoded_lines(path), start=1):
        count += 1
        yield Record(line.rstrip("\r\n"), None, f"{name}:{number}")
    if count == 0:
        raise InputError(name, "empty file")


def _display(path) -> str:
    return "<standard input>" if str(path) == STDIN else str(path)


def _iter_jsonl(path, text_column: str, label_column: str, require_labels: bool, id_column: str | None = None,
                weight_column: str | None = None):
    count = 0
    source, path = path, _display(path)
    for number, line in enumerate(_decoded_lines(source), start=1):
        if not line.strip():
            continue
        where = {"line": number}
        try:
            obj = json.loads(line)
        except json.JSONDecodeError as exc:
            raise InputError(path, f"malformed JSON at column {exc.colno}: {exc.msg}", **where) from None
        except ValueError:  # Python refuses integers of more than 4300 digits
            raise InputError(path, "malformed JSON: a number too long to read", **where) from None
        except RecursionError:
            raise InputError(path, "malformed JSON: nested too deeply", **where) from None
        if not isinstance(obj, dict):
            raise InputError(path, f"expected a JSON object, found {type(obj).__name__}", **where)
        if text_column not in obj:
            raise InputError(path, f"no field {text_column!r}", **where)
        text = obj[text_column]
        if not isinstance(text, str):
            raise InputError(path, f"field {text_column!r} must be a string, not {type(text).__name__}", **where)
        _unwritable(path, text, f"field {text_column!r}", where)
        if label_column in obj:
            label = _check_label(obj[label_column], path, where)
            _unwritable(path, label, f"field {label_column!r}", where)
        elif require_labels:
            raise InputError(path, f"no field {label_column!r}", **where)
        else:
            label = None
        record_id = None
        if id_column is not None:
            if id_column not in obj:
                raise InputError(path, f"no field {id_column!r}", **where)
            record_id = obj[id_column] if isinstance(obj[id_column], str) else json.dumps(obj[id_column])
        weight = None
        if weight_column is not None:
            if weight_column not in obj:
                raise InputError(path, f"no field {weight_column!r}", **where)
            weight = _weight(obj[weight_column], path, where, weight_column)
        count += 1
        yield Record(text, label, f"{path}:{number}", record_id, weight)
    if count == 0:
        raise InputError(path, "empty file")
