"""features.csv formatted a column at a time, and the strongest features found without sorting
every label: both must give exactly what the cell-by-cell and sort-everything versions gave.

References: Python's own ``csv`` module (``csv.writer`` writing :func:`lintext.files.csv_value`
cell by cell, the way features.csv was written before, and ``csv.reader`` plus ``float`` reading
it back) and NumPy's ``np.lexsort`` over a whole column.
"""

from __future__ import annotations

import csv
import io
import math
import struct
from types import SimpleNamespace

import numpy as np
import pytest

from lintext.files import csv_value
from lintext.report.stats import _largest_centred, bin_label, centred_rows, size_key
from lintext.report.writer import CSV_COLUMNS, csv_cells, write_features_csv

# Floats whose text is easy to get wrong: whole floats (written as integers below 2**53, as repr
# from there), negative zero, the repr switch to exponents (1e16, 1e-05), the largest and
# smallest doubles, a subnormal, non-finite values (empty cells).
AWKWARD = [0.0, -0.0, 1.0, -3.0, 0.1, 1 / 3, 2.0**53 - 1, 2.0**53, 2.0**53 + 2, 1e16, 1e15 + 0.5, 1e-5, 1.5e-4,
           123456789.125, -2.5e-310, 5e-324, 1.7976931348623157e308, math.nan, math.inf, -math.inf]
TEXTS = ["plain", "", "with, comma", 'a "quoted" word', "line\nbreak", "tab\there", "[ab]", "naïve café", "x | y"]


def awkward_table(n: int = 4000, seed: int = 0) -> dict:
    rng = np.random.default_rng(seed)
    floats = lambda: np.where(rng.random(n) < 0.3, rng.choice(AWKWARD, n),  # noqa: E731
                              rng.standard_normal(n) * 10.0 ** rng.integers(-12, 12, n))
    df = rng.integers(0, 5000, n)
    return {
        "column": np.arange(n, dtype=np.int64),
        "feature": [TEXTS[i] if i < len(TEXTS) else f"feature {i}" for i in rng.integers(0, 2 * len(TEXTS), n)],
        "document_frequency": df,
        "frequency_bin": np.where(df >= 1, np.frexp(np.maximum(df - 1, 0).astype(float))[1], -1).astype(np.int64),
        "update_count": rng.integers(0, 100, n).astype(np.float64),
        "abs_update_sum": floats(),
        "weight_norm": floats(),
        "raw_weight_norm": floats(),
        "max_weight": floats(),
        "max_weight_label": [TEXTS[i] for i in rng.integers(0, len(TEXTS), n)],
        "effective_step": floats(),
    }


def cell_by_cell(table: dict) -> str:
    """features.csv as written before: csv.writer over csv_value of every cell."""
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow(CSV_COLUMNS)
    for i in range(len(table["column"])):
        row = []
        for name in CSV_COLUMNS:
            value = table[name][i]
            if name == "frequency_bin":
                value = bin_label(int(value)) if value >= 0 else ""
            row.append(csv_value(value))
        writer.writerow(row)
    return buf.getvalue()


def test_features_csv_is_byte_identical_to_cell_by_cell_writing(tmp_path):
    table = awkward_table()
    write_features_csv(table, tmp_path / "features.csv")
    with open(tmp_path / "features.csv", encoding="utf-8", newline="") as fh:
        written = fh.read()
    assert written == cell_by_cell(table)  # Python's csv.writer over csv_value, cell by cell


def test_features_csv_reads_back_bit_for_bit(tmp_path):
    table = awkward_table(seed=1)
    write_features_csv(table, tmp_path / "features.csv")
    with open(tmp_path / "features.csv", encoding="utf-8", newline="") as fh:
        rows = list(csv.DictReader(fh))  # Python's csv reader
    assert [r["feature"] for r in rows] == table["feature"]
    assert [r["max_weight_label"] for r in rows] == table["max_weight_label"]
    assert [int(r["document_frequency"]) for r in rows] == table["document_frequency"].tolist()
    for name in ("abs_update_sum", "weight_norm", "raw_weight_norm", "max_weight", "effective_step", "update_count"):
        for cell, value in zip((r[name] for r in rows), table[name].tolist()):
            if math.isfinite(value):
                # the same double, bit for bit (negative zero is written "0", which reads back as +0.0)
                assert struct.pack("<d", float(cell)) == struct.pack("<d", value + 0.0), (name, cell, value)
            else:
                assert cell == ""


@pytest.mark.parametrize("values", [
    np.array(AWKWARD), np.array([3, -7, 0, 2**62], dtype=np.int64), np.array([1.0, 2.0, -0.0]),
    np.array([], dtype=np.float64), np.array([True, False]), TEXTS, [1, 2.5, None, "x"],
    np.random.default_rng(0).permutation(np.array(AWKWARD * 4)),  # repeats: each distinct value formatted once
    np.array([7.0, -2.0, 7.0, 0.0, -0.0] * 3),  # whole floats only, repeated
])
def test_csv_cells_equal_csv_value(values):
    out = io.StringIO()
    csv.writer(out, lineterminator="\n").writerow([csv_value(v) for v in values])  # Python's csv quoting
    assert ",".join(csv_cells(values)) + "\n" == (out.getvalue() if len(values) else "\n")


def test_csv_cells_quote_a_carriage_return_so_it_reads_back():
    # Python's csv.reader refuses an unquoted carriage return inside a field; a quoted one reads back
    cells = csv_cells(["a\rb", "c"])
    assert next(csv.reader(io.StringIO(",".join(cells) + "\n", newline=""))) == ["a\rb", "c"]


def ranking_case(n, labels, scale, seed):
    """A model-like object whose float32 weights tie at every threshold, and its feature table's columns."""
    rng = np.random.default_rng(seed)
    coef = (rng.integers(-40, 40, size=(n, labels)) * scale).astype(np.float32)  # many ties at every threshold
    coef[rng.integers(0, n, 30)] += np.float32(scale) / 3  # whole rows shifted: centred ties differ in their last bits
    model = SimpleNamespace(coef=coef, labels=[f"l{j}" for j in range(labels)])
    table = {"column": rng.permutation(n).astype(np.int64)}  # a tie-break order that is not the row order
    table["weight_mean"] = coef[table["column"]].astype(np.float64).mean(axis=1)
    return model, table


@pytest.mark.parametrize("n, labels, top, scale", [(50_000, 7, 10, 1.0), (3_000, 4, 25, 0.125), (30, 3, 10, 1.0),
                                                    (45_000, 2, 1, 1.0), (40_000, 5, 10, 4096.0)])
def test_largest_centred_weights_equal_a_full_sort(n, labels, top, scale):
    model, table = ranking_case(n, labels, scale, n)
    keys = size_key(centred_rows(model.coef[table["column"]], table["weight_mean"]))
    got = _largest_centred(model, table, top, list(range(labels)))
    for j in range(labels):
        expected = np.lexsort((table["column"], -keys[:, j]))[:top]  # NumPy: sort the whole column
        assert got[j].tolist() == expected.tolist()
    one = _largest_centred(model, table, top, [labels - 1])
    assert one[0].tolist() == np.lexsort((table["column"], -keys[:, labels - 1]))[:top].tolist()


def test_largest_centred_weights_with_nan_sorts_everything():
    model = SimpleNamespace(coef=np.array([[np.nan, 1.0], [2.0, 0.0], [0.5, 0.5]], dtype=np.float32), labels=["a", "b"])
    table = {"column": np.arange(3), "weight_mean": model.coef.astype(np.float64).mean(axis=1)}
    keys = size_key(centred_rows(model.coef, table["weight_mean"]))
    got = _largest_centred(model, table, 2, [0, 1])
    assert [g.tolist() for g in got] == [np.lexsort((np.arange(3), -keys[:, j]))[:2].tolist() for j in (0, 1)]


def test_weight_rows_widens_only_the_rows_it_takes():
    # A hashing model uses few of its rows. Reference: NumPy's whole-array conversion then indexing
    # (``coef.astype(float64)[columns]``); the rows taken must be those, bit for bit, while the
    # memory used stays near their size (80 KB), far below a float64 copy of every row (16 MB).
    import tracemalloc

    from lintext.report.stats import weight_rows

    rng = np.random.default_rng(3)
    coef = rng.standard_normal((200_000, 10)).astype(np.float32)
    columns = np.sort(rng.choice(coef.shape[0], 1000, replace=False))
    model = SimpleNamespace(coef=coef)
    tracemalloc.start()
    try:
        rows = weight_rows(model, columns)
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    assert rows.dtype == np.float64 and np.array_equal(rows, coef.astype(np.float64)[columns])
    assert peak < 1_000_000, peak
    every = weight_rows(model, np.arange(coef.shape[0]))  # all rows in order: the whole array, widened
    assert np.array_equal(every, coef.astype(np.float64))
    wide = SimpleNamespace(coef=coef.astype(np.float64))
    assert weight_rows(wide, np.arange(coef.shape[0])) is wide.coef  # already float64: no copy
    from lintext.report.stats import coef_rows

    assert coef_rows(model, np.arange(coef.shape[0])) is coef  # the stored rows, as they are (the zero count)
    run = coef_rows(model, np.arange(10, 500))
    assert np.shares_memory(run, coef) and np.array_equal(run, coef[10:500])
