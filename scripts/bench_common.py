"""What the benchmark scripts share: Debian's fortunes corpus, CSV files of labelled texts, the load
average, and results written whole or not at all.

The fortunes corpus is the TSV that ``../shared/tools/fortunes_corpus.sh`` builds
("category<TAB>text" per line, no header, sorted by category), built once under
``/tmp/lintext-bench`` and read by every script that uses it.
"""

from __future__ import annotations

import json
import os
import random
import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

# (text, label) rows as a CSV file: the tests' writer, one for both (the benchmarks run in the tests' venv)
from tests.conftest import write_csv  # noqa: E402,F401

FORTUNES_SCRIPT = ROOT.parent / "shared" / "tools" / "fortunes_corpus.sh"
FORTUNES_TSV = Path("/tmp/lintext-bench/fortunes.tsv")


def load() -> float:
    """The 1-minute load average, rounded: benchmarks record it beside their timings."""
    return round(os.getloadavg()[0], 2)


def labelled_tsv_rows(path: Path) -> list[tuple[str, str, int]]:
    """``(text, label, line number)`` of each "label<TAB>text" line with a text."""
    rows = []
    with open(path, encoding="utf-8") as fh:
        for number, line in enumerate(fh, start=1):
            label, _, text = line.rstrip("\n").partition("\t")
            if text:
                rows.append((text, label, number))
    return rows


def fortunes_rows(log=None, path: Path = FORTUNES_TSV) -> list[tuple[str, str, int]]:
    """The fortunes corpus as :func:`labelled_tsv_rows`, building the TSV first when it is missing."""
    if not path.is_file():
        if log is not None:
            log(f"building the fortunes corpus at {path}")
        path.parent.mkdir(parents=True, exist_ok=True)
        subprocess.run(["bash", str(FORTUNES_SCRIPT), str(path)], check=True, capture_output=True)
    return labelled_tsv_rows(path)


def fortunes_csv(folder: Path, shuffled: bool = False) -> Path | None:
    """The fortunes TSV as ``folder/fortunes.csv`` (``shuffled``: its lines in a seeded random order,
    ``fortunes-shuffled.csv``), written on first use; None when the TSV has not been built."""
    if not FORTUNES_TSV.is_file():
        return None
    out = folder / ("fortunes-shuffled.csv" if shuffled else "fortunes.csv")
    if not out.exists():
        rows = [(text, label) for text, label, _ in labelled_tsv_rows(FORTUNES_TSV)]
        if shuffled:
            random.Random(0).shuffle(rows)
        write_csv(out, rows)
    return out


def write_results(out: Path, results: dict, default=str) -> None:
    """``results`` as JSON at ``out``, written to a temporary file and moved into place."""
    out.parent.mkdir(parents=True, exist_ok=True)
    tmp = out.with_name(out.name + ".tmp")
    tmp.write_text(json.dumps(results, indent=2, default=default) + "\n", encoding="utf-8")
    tmp.replace(out)


def finish(results: dict, title: str, table, out: Path, wall: float, default=str) -> int:
    """End a benchmark: the load and the total time into ``results``, ``table(results)`` printed
    under a title line, and ``results`` with the table's lines written to ``out``."""
    results["load_end"] = load()
    results["total_seconds"] = time.perf_counter() - wall
    text = table(results)
    print(f"{title} ({results['total_seconds']:.0f} s; 1-minute load average "
          f"{results['load_start']} at the start, {results['load_end']} at the end; {os.cpu_count()} cores)")
    print(text)
    write_results(out, {**results, "table": text.splitlines()}, default=default)
    print(f"written {out}")
    return 0
