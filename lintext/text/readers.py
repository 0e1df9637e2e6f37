"""Readers for labelled text: folder-per-label trees, CSV/TSV and JSON Lines.

Every reader yields :class:`Record` objects carrying the position they came
from, so that later errors (an unknown label in a dev file, say) can name it.
Every bad input raises :class:`~lintext.errors.InputError` with a one-line
message naming the file, the line or record, and the problem.
"""

from __future__ import annotations

import csv
import json
import os
import sys
from dataclasses import dataclass, field
from pathlib import Path
from typing import Iterator

import numpy as np

from ..errors import ConfigError, InputError

FORMATS = ("folder", "csv", "tsv", "jsonl")
_SUFFIXES = {".csv": "csv", ".tsv": "tsv", ".tab": "tsv", ".jsonl": "jsonl", ".ndjson": "jsonl"}

csv.field_size_limit(min(sys.maxsize, 2**31 - 1))


@dataclass(frozen=True)
class ReaderOptions:
    """How to read a data file: its format (``None``: from the path) and which columns or
    fields hold the text and the label. Carried as one object by every command that reads."""

    format: str | None = None
    text_column: str = "text"
    label_column: str = "label"

    def validate(self) -> "ReaderOptions":
        if self.format is not None and self.format not in FORMATS:
            raise ConfigError("--format", self.format, f"choose one of {', '.join(FORMATS)}")
        return self


@dataclass
class Record:
    text: str
    label: str | None
    source: str  # "file:line" or the document's own file


@dataclass
class Corpus:
    """Texts with their labels (``None`` when unlabelled) and where each came from."""

    texts: list[str]
    labels: list[str | None]
    sources: list[str]
    path: str = ""
    label_names: list[str] = field(default_factory=list)

    def __post_init__(self):
        if not self.label_names:
            self.label_names = sorted({lab for lab in self.labels if lab is not None})

    def __len__(self) -> int:
        return len(self.texts)

    @classmethod
    def from_records(cls, records, path="") -> "Corpus":
        records = list(records)
        return cls([r.text for r in records], [r.label for r in records], [r.source for r in records], str(path))

    def subset(self, index) -> "Corpus":
        return Corpus(
            [self.texts[i] for i in index],
            [self.labels[i] for i in index],
            [self.sources[i] for i in index],
            self.path,
            list(self.label_names),
        )

    def label_counts(self) -> dict[str, int]:
        counts = {name: 0 for name in self.label_names}
        for lab in self.labels:
            if lab is not None:
                counts[lab] = counts.get(lab, 0) + 1
        return counts

    def label_indices(self, label_names: list[str] | None = None) -> np.ndarray:
        """Labels as integer codes in the order of ``label_names`` (default: this corpus's own)."""
        names = self.label_names if label_names is None else label_names
        code = {name: i for i, name in enumerate(names)}
        out = np.empty(len(self.labels), dtype=np.int64)
        for i, lab in enumerate(self.labels):
            if lab not in code:
                raise InputError(self.sources[i], f"label {lab!r} does not occur in the training data")
            out[i] = code[lab]
        return out


def infer_format(path: str | os.PathLike) -> str:
    """The reader for ``path``: a folder, or by file suffix."""
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
    reader : format (``folder``, ``csv``, ``tsv`` or ``jsonl``; inferred from the path when
        ``None``) and the column (CSV/TSV) or field (JSON Lines) names of text and label.
    require_labels : when False, a missing label column gives records with label ``None``.
    """
    reader = (reader or ReaderOptions()).validate()
    fmt = reader.format or infer_format(path)
    text_column, label_column = reader.text_column, reader.label_column
    p = Path(path)
    if not p.exists():
        raise InputError(p, "no such file or folder")
    if fmt == "folder":
        if not p.is_dir():
            raise InputError(p, "not a folder")
        return _iter_folder(p)
    if p.is_dir():
        raise InputError(p, f"is a folder, not a {fmt} file")
    if fmt == "jsonl":
        return _iter_jsonl(p, text_column, label_column, require_labels)
    return _iter_delimited(p, "\t" if fmt == "tsv" else ",", text_column, label_column, require_labels)


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


def _decoded_lines(path: Path) -> Iterator[str]:
    """Lines of a UTF-8 file (a BOM is dropped); invalid bytes name the line and byte offset,
    a failed read (permission, I/O error) the line it stopped at."""
    number = 0
    try:
        with open(path, "rb") as fh:
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


def _iter_delimited(path: Path, delimiter: str, text_column: str, label_column: str, require_labels: bool):
    lines = _decoded_lines(path)
    reader = csv.reader(lines, delimiter=delimiter, strict=True)
    try:
        header = next(reader, None)
        if header is None or not any(h.strip() for h in header):
            raise InputError(path, "empty file" if header is None else "empty header line", line=None if header is None else 1)
        header = [h.strip() for h in header]
        if text_column not in header:
            raise InputError(path, f"no column {text_column!r} in the header (columns: {', '.join(header)})", line=1)
        text_at = header.index(text_column)
        label_at = header.index(label_column) if label_column in header else None
        if label_at is None and require_labels:
            raise InputError(path, f"no column {label_column!r} in the header (columns: {', '.join(header)})", line=1)
        start = reader.line_num + 1
        count = 0
        for row in reader:
            where = {"line": start}
            start = reader.line_num + 1
            if not row:
                continue  # blank line
            if len(row) != len(header):
                raise InputError(path, f"{len(row)} fields where the header has {len(header)}", **where)
            label = _check_label(row[label_at], path, where) if label_at is not None else None
            count += 1
            yield Record(row[text_at], label, f"{path}:{where['line']}")
        if count == 0:
            raise InputError(path, "no records after the header line")
    except csv.Error as exc:
        raise InputError(path, f"malformed {'TSV' if delimiter == chr(9) else 'CSV'}: {exc}", line=reader.line_num) from None


def _iter_jsonl(path: Path, text_column: str, label_column: str, require_labels: bool):
    count = 0
    for number, line in enumerate(_decoded_lines(path), start=1):
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
        count += 1
        yield Record(text, label, f"{path}:{number}")
    if count == 0:
        raise InputError(path, "empty file")


# ---------------------------------------------------------------- dev split


def split_dev(corpus: Corpus, fraction: float = 0.1, seed: int = 0) -> tuple[Corpus, Corpus]:
    """Stratified, seeded split into (train, dev).

    Each label gives ``round(fraction * count)`` documents to dev, at least one,
    and keeps at least one for training.
    """
    if not 0.0 < fraction < 1.0:
        raise ConfigError("--dev-fraction", fraction, "must be between 0 and 1 (exclusive)")
    rng = np.random.default_rng(seed)
    labels = np.array(corpus.labels, dtype=object)
    dev_index: list[int] = []
    for name in corpus.label_names:
        members = np.flatnonzero(labels == name)
        if len(members) < 2:
            raise InputError(
                corpus.path,
                f"label {name!r} has only {len(members)} document(s); a stratified dev split needs at least 2 "
                "per label (add documents or give --dev FILE)",
            )
        take = min(max(1, int(round(fraction * len(members)))), len(members) - 1)
        dev_index.extend(rng.permutation(members)[:take].tolist())
    dev_set = set(dev_index)
    train_index = [i for i in range(len(corpus)) if i not in dev_set]
    return corpus.subset(train_index), corpus.subset(sorted(dev_index))
