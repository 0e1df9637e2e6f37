"""The feature store: a featurized corpus written once to a directory and read by every command.

Layout (``lintext featurize DATA --out STORE`` writes it; :func:`open_store` reads it)::

    store.json       format version, the featurizer's state, label names, how the sources were
                     read, their fingerprints, the dev split, and the parts with their shards
    vocabulary.tsv   the featurizer's vocabulary, in the model directory's format
    data-00000/      one folder per shard of a part: the CSR arrays data.npy, indices.npy and
    data-00001/      indptr.npy, labels.npy (label ids into store.json's labels, -1 for none),
    dev-00000/       records.npy (each row's record number in its source file, from 0) and
                     sources.txt (where each row came from, one line per row)

Parts: ``data`` holds the rows of DATA that are not held out, in file order; ``dev`` the dev
rows (a stratified share of DATA or a dev file), if any. Every ``.npy`` file is a plain NumPy
array read with ``allow_pickle=False`` and can be memory-mapped.

A store is refused (:class:`~lintext.errors.InputError`, one line naming the mismatch) when a
source file changed since the store was written (:meth:`FeatureStore.check_sources`) and when
its featurizer is not a given model's (:meth:`FeatureStore.check_featurizer`). The quick check
compares size and modification time, as ``make`` and ``rsync`` do; when the time differs the
content's SHA-256 decides, so a copied or touched but unchanged file is still accepted.
"""

from __future__ import annotations

import hashlib
import json
import uuid
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import scipy.sparse as sp

from .. import __version__
from ..errors import InputError, LinTextError
from .featurizer import Featurizer
from .vocabulary import escape, unescape

STORE_FILE = "store.json"
STORE_KIND = "lintext feature store"
FORMAT_VERSION = 1
PARTS = ("data", "dev")
ARRAYS = ("data", "indices", "indptr", "labels", "records")
SHARD_ROWS = 100_000  # rows per shard (the default): the demo and fortunes corpora are one shard each


def is_store(path) -> bool:
    """True when ``path`` is a directory holding a feature store."""
    return Path(path, STORE_FILE).is_file()


# ------------------------------------------------------------------ fingerprints


def _sha256(path: Path, digest=None):
    digest = digest or hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            digest.update(block)
    return digest


def _files_of(path: Path) -> list[Path]:
    if path.is_dir():
        return sorted(p for p in path.rglob("*") if p.is_file())
    return [path]


def _listing(path: Path, files: list[Path]) -> str:
    digest = hashlib.sha256()
    for f in files:
        st = f.stat()
        name = str(f.relative_to(path)) if path.is_dir() else ""
        digest.update(f"{name}\t{st.st_size}\t{st.st_mtime_ns}\n".encode("utf-8", "surrogateescape"))
    return digest.hexdigest()


def _content(path: Path, files: list[Path]) -> str:
    digest = hashlib.sha256()
    for f in files:
        name = str(f.relative_to(path)) if path.is_dir() else ""
        digest.update(f"{name}\t{f.stat().st_size}\n".encode("utf-8", "surrogateescape"))
        _sha256(f, digest)
    return digest.hexdigest()


def fingerprint(path) -> dict:
    """Size, modification times and SHA-256 of a file, or of every file under a folder."""
    path = Path(path).resolve()
    files = _files_of(path)
    return {"path": str(path), "files": len(files), "bytes": sum(f.stat().st_size for f in files),
            "listing": _listing(path, files), "sha256": _content(path, files)}


def source_change(recorded: dict) -> str | None:
    """What changed in a source since ``recorded`` (:func:`fingerprint`), or None when nothing did."""
    path = Path(recorded["path"])
    if not path.exists():
        return f"its source {path} no longer exists"
    files = _files_of(path)
    size = sum(f.stat().st_size for f in files)
    if len(files) != recorded["files"]:
        return f"its source {path} changed since the store was written ({recorded['files']} files, now {len(files)})"
    if size != recorded["bytes"]:
        return f"its source {path} changed since the store was written ({recorded['bytes']} bytes, now {size})"
    if _listing(path, files) == recorded["listing"] or _content(path, files) == recorded["sha256"]:
        return None
    return f"its source {path} changed since the store was written (same size, different content)"


# ------------------------------------------------------------------ writing


class ShardWriter:
    """Collects the rows of one part and writes them as shards of ``shard_rows`` rows into ``folder``.
    The rows of a part of at most ``shard_rows`` rows are all kept until :meth:`close`."""

    def __init__(self, folder: Path, part: str, shard_rows: int):
        self.folder, self.part, self.shard_rows = Path(folder), part, int(shard_rows)
        self.pending: list[tuple] = []
        self.pending_rows = 0
        self.shards: list[dict] = []

    def add(self, X: sp.csr_matrix, labels, records, sources) -> None:
        """Queue rows (a shard is written once more than ``shard_rows`` rows are waiting)."""
        if X.shape[0] == 0:
            return
        self.pending.append((X.tocsr(), np.asarray(labels, np.int64), np.asarray(records, np.int64), list(sources)))
        self.pending_rows += X.shape[0]
        while self.pending_rows > self.shard_rows:
            self._write(self.shard_rows)

    def close(self, transform=None) -> list[dict]:
        """Write what is left; the shards' names, rows and non-zeros. ``transform(X)``: what to write in place
        of the matrix of the rows left (hashing mode weighs raw counts so, once every row is counted)."""
        self.flush(transform)
        return self.shards

    def flush(self, transform=None) -> None:
        """Write the rows waiting as one shard (however many they are); ``transform``: see :meth:`close`."""
        if self.pending_rows:
            self._write(self.pending_rows, transform)

    def _write(self, rows: int, transform=None) -> None:
        X = sp.vstack([p[0] for p in self.pending], format="csr") if len(self.pending) > 1 else self.pending[0][0]
        labels, records = (np.concatenate([p[k] for p in self.pending]) for k in (1, 2))
        sources = [s for p in self.pending for s in p[3]]
        rest = (X[rows:], labels[rows:], records[rows:], sources[rows:])
        self.pending = [rest] if rest[0].shape[0] else []
        self.pending_rows = rest[0].shape[0]
        name = f"{self.part}-{len(self.shards):05d}"
        folder = self.folder / name
        folder.mkdir()
        X = X[:rows]
        X.sort_indices()
        if transform is not None:
            X = transform(X)
            X.sort_indices()
        arrays = {"data": X.data, "indices": X.indices, "indptr": X.indptr, "labels": labels[:rows],
                  "records": records[:rows]}
        for key, array in arrays.items():
            np.save(folder / f"{key}.npy", np.ascontiguousarray(array), allow_pickle=False)
        with open(folder / "sources.txt", "w", encoding="utf-8", newline="\n", errors="surrogateescape") as fh:
            fh.writelines(escape(s) + "\n" for s in sources[:rows])
        self.shards.append({"name": name, "rows": int(rows), "nonzeros": int(X.nnz)})


class DealingWriter:
    """Deals the rows of one part to shards at random as they come: the ``j``-th row added goes to shard
    ``deal[j]``. Each shard is spooled to files on disk and written at :meth:`close`, one shard at a time,
    so memory stays bounded by a shard. Every shard is then a random sample of the part (in file order
    within it), whatever the order of the file: a file sorted by label gives shards of mixed labels.
    """

    def __init__(self, folder: Path, part: str, deal: np.ndarray):
        self.folder, self.part, self.deal = Path(folder), part, np.asarray(deal, dtype=np.int64)
        self.spool = self.folder / f"spool-{part}"
        self.spool.mkdir()
        self.added, self.n_features = 0, None

    def add(self, X: sp.csr_matrix, labels, records, sources) -> None:
        X = X.tocsr()
        n = X.shape[0]
        target = self.deal[self.added:self.added + n]
        self.added += n
        self.n_features = X.shape[1]
        labels, records, sources = np.asarray(labels, np.int64), np.asarray(records, np.int64), list(sources)
        for k in np.unique(target).tolist():
            rows = np.flatnonzero(target == k)
            piece = X[rows]
            arrays = {"data": piece.data.astype(np.float64), "indices": piece.indices.astype(np.int64),
                      "lengths": np.diff(piece.indptr).astype(np.int64), "labels": labels[rows], "records": records[rows]}
            for key, array in arrays.items():
                with open(self.spool / f"{k}.{key}", "ab") as fh:
                    fh.write(np.ascontiguousarray(array).tobytes())
            with open(self.spool / f"{k}.sources", "a", encoding="utf-8", newline="\n", errors="surrogateescape") as fh:
                fh.writelines(escape(sources[i]) + "\n" for i in rows.tolist())

    def close(self, transform=None) -> list[dict]:
        """Write every shard from its spool files (one in memory at a time); the shards' names, rows and non-zeros.
        ``transform``: see :meth:`ShardWriter.close`, applied to each shard."""
        writer = ShardWriter(self.folder, self.part, 1 << 62)
        for k in range(int(self.deal.max()) + 1 if self.deal.size else 0):
            a = {key: np.fromfile(self.spool / f"{k}.{key}", dtype=np.float64 if key == "data" else np.int64)
                 for key in ("data", "indices", "lengths", "labels", "records")}
            index_dtype = np.int32 if max(self.n_features, a["data"].size) < 2**31 else np.int64
            indptr = np.concatenate([[0], np.cumsum(a["lengths"])]).astype(index_dtype)
            X = sp.csr_matrix((a["data"], a["indices"].astype(index_dtype), indptr),
                              shape=(len(a["lengths"]), self.n_features), copy=False)
            writer.add(X, a["labels"], a["records"], read_sources(self.spool / f"{k}.sources"))
            writer.flush(transform)
            for f in self.spool.glob(f"{k}.*"):
                f.unlink()
        self.spool.rmdir()
        return writer.shards


def shard_writer(folder: Path, part: str, rows: int, shard_rows: int, seed: int):
    """The writer of a part of ``rows`` rows: a :class:`DealingWriter` (random shards, seeded) when it
    takes more than one shard, else a :class:`ShardWriter` (one shard, file order)."""
    if rows > shard_rows:
        deal = np.random.default_rng([int(seed), 1 if part == "data" else 2]).permutation(rows) // shard_rows
        return DealingWriter(folder, part, deal)
    return ShardWriter(folder, part, shard_rows)


def write_store_json(folder: Path, featurizer: Featurizer, labels: list[str], parts: dict, sources: dict,
                     reader: dict, split: dict) -> dict:
    """Write ``store.json`` and ``vocabulary.tsv`` into ``folder`` (a store being written)."""
    meta = {
        "kind": STORE_KIND, "format_version": FORMAT_VERSION, "lintext_version": __version__,
        "store_id": uuid.uuid4().hex, "featurizer": featurizer.to_json(), "n_features": int(featurizer.n_features),
        "labels": list(labels), "reader": reader, "split": split, "sources": sources,
        "parts": {name: {"rows": sum(s["rows"] for s in shards), "nonzeros": sum(s["nonzeros"] for s in shards),
                         "shards": shards} for name, shards in parts.items() if shards},
    }
    featurizer.save_vocabulary(folder / "vocabulary.tsv")
    with open(folder / STORE_FILE, "w", encoding="utf-8") as fh:
        json.dump(meta, fh, indent=2, ensure_ascii=False)
        fh.write("\n")
    return meta


# ------------------------------------------------------------------ reading


def read_sources(path) -> list[str]:
    """The lines of a shard's ``sources.txt``, unescaped."""
    with open(path, encoding="utf-8", newline="\n", errors="surrogateescape") as fh:
        return [unescape(line[:-1]) for line in fh]


@dataclass
class Shard:
    """One shard's rows: the matrix (memory-mapped unless loaded), label ids and record numbers."""

    X: sp.csr_matrix
    labels: np.ndarray
    records: np.ndarray


class FeatureStore:
    """A feature store opened for reading (see the module docstring). Use :func:`open_store`."""

    def __init__(self, path: Path, meta: dict):
        self.path = path
        self.meta = meta
        self.labels: list[str] = list(meta["labels"])
        self._featurizer = None

    @property
    def featurizer(self) -> Featurizer:
        """The fitted featurizer the store was written with (loaded on first use)."""
        if self._featurizer is None:
            try:
                self._featurizer = Featurizer.load(self.meta["featurizer"], self.path / "vocabulary.tsv")
            except LinTextError as exc:
                raise InputError(self.path, f"not a readable feature store: {exc}") from None
        return self._featurizer

    @property
    def n_features(self) -> int:
        return int(self.meta["n_features"])

    def has(self, part: str) -> bool:
        return part in self.meta["parts"]

    def shards(self, part: str) -> list[dict]:
        return list(self.meta["parts"].get(part, {}).get("shards", []))

    def rows(self, part: str) -> int:
        return int(self.meta["parts"].get(part, {}).get("rows", 0))

    def load_shard(self, part: str, index: int) -> Shard:
        """Shard ``index`` of ``part``, its arrays memory-mapped read-only."""
        info = self.shards(part)[index]
        folder = self.path / info["name"]
        try:
            a = {k: np.load(folder / f"{k}.npy", mmap_mode="r", allow_pickle=False) for k in ARRAYS}
        except (OSError, ValueError) as exc:
            raise InputError(folder, f"cannot read the store's shard ({exc})") from None
        rows = info["rows"]
        if a["indptr"].shape != (rows + 1,) or a["labels"].shape != (rows,) or a["data"].shape != a["indices"].shape:
            raise InputError(folder, "shard arrays do not match store.json (rows or lengths differ)")
        X = sp.csr_matrix((a["data"], a["indices"], a["indptr"]), shape=(rows, self.n_features), copy=False)
        return Shard(X, a["labels"], a["records"])

    def sources(self, part: str, index: int) -> list[str]:
        """Where each row of shard ``index`` of ``part`` came from (``file:line`` or a document's file)."""
        return read_sources(self.path / self.shards(part)[index]["name"] / "sources.txt")

    def matrix(self, part: str) -> tuple[sp.csr_matrix, np.ndarray]:
        """The whole part as one CSR matrix and its label ids: memory-mapped when it is one shard,
        else the shards stacked in memory."""
        shards = [self.load_shard(part, i) for i in range(len(self.shards(part)))]
        if len(shards) == 1:
            return shards[0].X, shards[0].labels
        return sp.vstack([s.X for s in shards], format="csr"), np.concatenate([s.labels for s in shards])

    def label_ids(self, labels: np.ndarray, names: list[str], part: str, index: int) -> np.ndarray:
        """The store's label ids of one shard as indices into ``names``; a label outside them (or a row
        without one) raises InputError naming the row's source."""
        code = np.array([names.index(lab) if lab in names else -1 for lab in self.labels] + [-1], dtype=np.int64)
        out = code[np.asarray(labels)]
        bad = np.flatnonzero(out < 0)
        if bad.size:
            row = int(bad[0])
            where = self.sources(part, index)[row]
            lab = int(labels[row])
            if lab < 0:
                raise InputError(where, "no label (the store was written from unlabelled data)")
            raise InputError(where, f"label {self.labels[lab]!r} does not occur in the training data")
        return out

    # -------------------------------------------------------------- checks

    def check_sources(self) -> "FeatureStore":
        """Raise InputError naming the source that changed since the store was written."""
        for fp in self.meta["sources"].values():
            problem = source_change(fp)
            if problem:
                raise InputError(self.path, f"{problem}; featurize it again")
        return self

    def check_featurizer(self, featurizer: Featurizer, model: str = "the model") -> "FeatureStore":
        """Raise InputError naming the first difference between the store's featurizer and ``featurizer``."""
        problem = featurizer_difference(self.featurizer, featurizer)
        if problem:
            raise InputError(self.path, f"featurized differently from {model}: {problem}; featurize the data again "
                                        f"with --featurizer-from {model}")
        return self


def featurizer_difference(mine: Featurizer, theirs: Featurizer) -> str | None:
    """The first difference between two fitted featurizers, in words, or None when they are the same."""
    a, b = mine.config.to_json(), theirs.config.to_json()
    for key in a:
        if a[key] != b.get(key):
            return f"{key} is {a[key]!r} here and {b.get(key)!r} there"
    if mine.n_features != theirs.n_features:
        return f"{mine.n_features} columns here, {theirs.n_features} there"
    if mine.n_documents != theirs.n_documents:
        return f"fitted on {mine.n_documents} documents here, {theirs.n_documents} there"
    if mine.config.hashing:
        if not np.array_equal(mine.used_columns, theirs.used_columns):
            return "different hashed columns kept"
    elif mine.feature_names != theirs.feature_names:
        return "different vocabularies"
    if not np.array_equal(mine.document_frequency, theirs.document_frequency):
        return "different document frequencies"
    return None


def open_store(path) -> FeatureStore:
    """Open and validate a feature store (its sources are checked by :meth:`FeatureStore.check_sources`)."""
    path = Path(path).resolve()
    meta_path = path / STORE_FILE
    try:
        with open(meta_path, encoding="utf-8") as fh:
            meta = json.load(fh)
    except FileNotFoundError:
        raise InputError(path, "not a feature store (no store.json)") from None
    except (OSError, ValueError) as exc:
        raise InputError(meta_path, f"not a readable feature store ({exc})") from None
    if not isinstance(meta, dict) or meta.get("kind") != STORE_KIND:
        raise InputError(meta_path, "not a lintext feature store")
    version = meta.get("format_version")
    if not isinstance(version, int) or version > FORMAT_VERSION:
        raise InputError(meta_path, f"store format version {version!r} is newer than this lintext reads; upgrade lintext")
    for key, kind in (("labels", list), ("parts", dict), ("sources", dict), ("featurizer", dict), ("n_features", int)):
        if not isinstance(meta.get(key), kind):
            raise InputError(meta_path, f"field {key!r} is missing or not a {kind.__name__}")
    if "data" not in meta["parts"] and "dev" not in meta["parts"]:
        raise InputError(meta_path, "the store holds no rows")
    return FeatureStore(path, meta)
