"""Writing the report: ``features.csv`` and ``report.html`` for one model, and the comparison page."""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np

from ..errors import ConfigError, LinTextError, OutputError
from ..files import atomic_file, csv_value
from ..model import Model, open_model
from .confusions import CSV_NAME, evaluated_set, write_confusion_csv
from .pages import comparison_page, report_page
from .stats import bin_label, feature_table

CSV_COLUMNS = ("column", "feature", "document_frequency", "frequency_bin", "update_count", "abs_update_sum",
               "weight_norm", "raw_weight_norm", "max_weight", "max_weight_label", "effective_step")


def write_features_csv(table: dict, path: str | os.PathLike) -> Path:
    """Write a :func:`feature_table` as CSV (header :data:`CSV_COLUMNS`; missing numbers are empty cells).

    Every cell is what :func:`lintext.files.csv_value` gives (floats with ``repr``, so they read
    back bit for bit; whole floats as integers; NaN as an empty cell), quoted as :mod:`csv`
    quotes; the frequency bin is its label (``"3–4"``). Formatted a column and a block of rows
    at a time, never cell by cell. Written to a temporary path and renamed into place.
    """
    n = len(table["column"])
    bins = np.asarray(table["frequency_bin"], dtype=np.int64)
    bin_names = np.array([bin_label(k) for k in range(int(bins.max(initial=-1)) + 1)] + [""], dtype=object)

    def write(fh):
        fh.write(",".join(CSV_COLUMNS) + "\n")
        for start in range(0, n, CSV_BLOCK_ROWS):
            block = slice(start, min(n, start + CSV_BLOCK_ROWS))
            columns = []
            for name in CSV_COLUMNS:
                if name == "frequency_bin":
                    columns.append(bin_names[bins[block]].tolist())  # -1 (df = 0) picks the last entry, ""
                else:
                    columns.append(csv_cells(table[name][block]))
            fh.write("\n".join(map(",".join, zip(*columns))) + "\n")

    return atomic_file(Path(path), write)


CSV_BLOCK_ROWS = 65536
_QUOTE = ',"\r\n'


def csv_cells(values) -> list[str]:
    """:func:`lintext.files.csv_value` of every item of a column, ready to join with commas.

    Numbers are formatted per column (integers with ``str``, floats with ``repr``, whole floats
    below 2**53 as integers, NaN and infinities empty); text is quoted as :mod:`csv` quotes
    it (``"..."`` with doubled quotes) when it holds a comma, a quote or a line break.
    """
    if isinstance(values, np.ndarray) and values.dtype.kind in "iu":
        return list(map(str, values.tolist()))
    if isinstance(values, np.ndarray) and values.dtype.kind == "f":
        return _float_cells(values)
    values = list(values)
    if set(map(type, values)) <= {str}:
        joined = "\0".join(values)
        if not any(c in joined for c in _QUOTE):
            return values
        return list(map(_quoted, values))
    return [_quoted(csv_value(v)) for v in values]


def _float_cells(values: np.ndarray) -> list[str]:
    values = values.astype(np.float64, copy=False)
    finite = np.isfinite(values)
    whole = finite & (np.trunc(values) == values) & (np.abs(values) < 2.0**53)
    if whole.all():
        return _distinct_cells(values.astype(np.int64), str).tolist()
    cells = np.full(len(values), "", dtype=object)
    if whole.any():
        cells[whole] = _distinct_cells(values[whole].astype(np.int64), str)
    rest = finite & ~whole
    if rest.any():
        cells[rest] = _distinct_cells(values[rest], float.__repr__)  # repr, without the builtin's dispatch
    return cells.tolist()


def _distinct_cells(values: np.ndarray, form) -> np.ndarray:
    """``form`` of each value as an object array, each distinct value formatted once (a report's
    columns repeat: every feature never updated has the same zeros)."""
    distinct, inverse = np.unique(values, return_inverse=True)
    return np.array(list(map(form, distinct.tolist())), dtype=object)[inverse]


def _quoted(text: str) -> str:
    if any(c in text for c in _QUOTE):
        return '"' + text.replace('"', '""') + '"'
    return text


def report_html(model: Model, top: int = 10, rare_rows: int = 15, title: str | None = None, table: dict | None = None) -> str:
    """The HTML report of ``model`` as a string (see :func:`write_report`)."""
    _check_top(top, rare_rows)
    return report_page(model, feature_table(model) if table is None else table, top=top, rare_rows=rare_rows, title=title)


def write_report(model: Model, folder: str | os.PathLike, top: int = 10, rare_rows: int = 15, title: str | None = None) -> dict:
    """Write ``features.csv`` and ``report.html`` for ``model`` into ``folder``.

    Parameters
    ----------
    model : a trained :class:`~lintext.model.Model` (from training or :func:`~lintext.load_model`).
    folder : any directory (created if missing): the model directory, or the temporary
        directory given to :meth:`Model.save`'s ``extra`` callback.
    top : features shown per label.
    rare_rows : rows of the rare-but-heavy table.
    title : page title (default: ``"Report: <optimizer> on <training file>"``).

    Returns
    -------
    dict with the paths written, ``{"features": Path, "report": Path}`` and ``"confusion"``
    (``confusion.csv``, the full matrix of the test set, else the dev set) when the model has one.

    Notes
    -----
    Each file is written to a temporary file beside it and renamed into place. The page
    degrades gracefully: without a dev set, without update statistics, with NaN effective
    steps (L-BFGS), with the hinge loss or without ``info["explain"]`` the matching figure
    or column is replaced by a one-line note.
    """
    folder = Path(folder)
    if folder.exists() and not folder.is_dir():
        raise LinTextError(f"{folder}: exists and is not a directory")
    for name in ("features.csv", "report.html"):  # both checked before either is replaced
        if (folder / name).is_dir() or ((folder / name).exists() and not (folder / name).is_file()):
            raise OutputError(folder / name, "is not a file; lintext writes its report there", option="")
    table = feature_table(model)
    html = report_html(model, top=top, rare_rows=rare_rows, title=title, table=table)
    features = write_features_csv(table, folder / "features.csv")
    report = atomic_file(folder / "report.html", lambda fh: fh.write(html), newline="\n")
    written = {"features": features, "report": report}
    which = evaluated_set(model.info.get("metrics") or {})
    if which:
        written["confusion"] = write_confusion_csv(model.info["metrics"][which], model.labels, folder / CSV_NAME)
    return written


def comparison_html(models: list, names: list | None = None, title: str | None = None) -> str:
    """One HTML page comparing ``models`` (see :func:`write_comparison`)."""
    if len(models) < 1:
        raise ConfigError("MODEL_DIR", "", "give at least one model to compare")
    names = list(names) if names else [f"model {i + 1}" for i in range(len(models))]
    if len(names) != len(models):
        raise ConfigError("--name", names, f"give one name per model ({len(models)})")
    return comparison_page([(n, m, feature_table(m)) for n, m in zip(names, models)], title=title)


def write_comparison(model_dirs: list, out: str | os.PathLike, names: list | None = None, title: str | None = None,
                     force: bool = False) -> Path:
    """Load model directories and write one page comparing them.

    Parameters
    ----------
    model_dirs : model directories (or already loaded :class:`~lintext.model.Model` objects).
    out : the HTML file to write (atomically); an existing file is replaced only when it is a
        lintext page, unless ``force``.
    names : one display name per model (default: the directory names, made unique).

    Returns
    -------
    Path of the page written. The page shows each model's frequency-versus-update curve
    (median per frequency bin) and its learning curves on shared axes, a summary table and
    per-bin tables side by side.
    """
    models, default_names = [], []
    for item in model_dirs:
        if isinstance(item, Model):
            models.append(item)
            default_names.append(f"model {len(models)}")
        else:
            models.append(open_model(item))
            default_names.append(Path(item).resolve().name)
    html = comparison_html(models, names or _unique(default_names), title=title)
    return atomic_file(Path(out), lambda fh: fh.write(html), newline="\n", kind="page", force=force)


def _check_top(top: int, rare_rows: int) -> None:
    if top < 1:
        raise ConfigError("--top", top, "must be at least 1")
    if rare_rows < 1:
        raise ConfigError("--rare-rows", rare_rows, "must be at least 1")


def _unique(names: list) -> list:
    seen: dict = {}
    out = []
    for name in names:
        seen[name] = seen.get(name, 0) + 1
        out.append(name if seen[name] == 1 else f"{name} ({seen[name]})")
    return out
