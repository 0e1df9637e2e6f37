#!/usr/bin/env python3
"""Re-shoot ``docs/report-58-labels.png``: the head of a report and its confusion section at 58 labels.

Trains AdaGrad on the invented 58-label corpus of ``tests/conftest.py`` (``many_label_rows``:
labels confusable in groups of three), writes the report, opens it in headless Chromium at
1280 px and stitches the page's top (title and summary) above its confusion section (the most
confused pairs and the heat view). Needs ``chromium`` (Debian's package).

    python scripts/shoot_report.py [--out docs/report-58-labels.png]
"""

from __future__ import annotations

import argparse
import os
import re
import shutil
import subprocess
import sys
import tempfile
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--hide-scrollbars", "--no-first-run", "--disable-extensions"]


def main() -> None:
    import matplotlib.image

    import lintext
    from lintext.report.writer import write_report
    from tests.conftest import many_label_rows, write_csv

    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--out", type=Path, default=ROOT / "docs" / "report-58-labels.png")
    parser.add_argument("--top", type=int, default=640, help="pixels of the page's top to keep")
    parser.add_argument("--confusion", type=int, default=1980, help="pixels of the confusion section to keep")
    args = parser.parse_args()
    args.out = args.out.resolve()
    binary = shutil.which("chromium") or shutil.which("chromium-browser")
    if binary is None:
        sys.exit("chromium is not installed")
    with tempfile.TemporaryDirectory(prefix="lintext-shot-") as tmp:
        tmp = Path(tmp)
        os.chdir(tmp)  # the page names the data as given: train.csv, not a temporary path
        rows = many_label_rows(58)
        cut = int(len(rows) * 0.7)
        write_csv(tmp / "train.csv", rows[:cut]), write_csv(tmp / "test.csv", rows[cut:])
        model = lintext.build_model("train.csv", test="test.csv",
                                    featurizer={"min_df": 1}, options={"optimizer": "adagrad", "learning_rate": 0.2})
        folder = model.save(tmp / "model", extra=lambda f: write_report(model, f))
        url = (folder / "report.html").as_uri()
        dom = subprocess.run([binary, *FLAGS, f"--user-data-dir={tmp / 'a'}", "--window-size=1280,2000", "--dump-dom", url],
                             capture_output=True, text=True, timeout=120).stdout
        height = int(re.search(r'data-page-height="(\d+)"', dom).group(1))
        tops = {item.split(":")[0]: item.split(":")[1] for item in re.search(r'data-sections="([^"]*)"', dom).group(1).split()}
        shot = tmp / "page.png"
        subprocess.run([binary, *FLAGS, f"--user-data-dir={tmp / 'b'}", f"--window-size=1280,{height}",
                        f"--screenshot={shot}", url], capture_output=True, timeout=180, check=True)
        page = matplotlib.image.imread(shot)[..., :3]
        start = int(tops["confusion"]) - 20
        gap = np.ones((24, page.shape[1], 3), dtype=page.dtype) * np.array([0.85, 0.87, 0.89], dtype=page.dtype)
        image = np.concatenate([page[: args.top], gap, page[start: start + args.confusion]])
        args.out.parent.mkdir(parents=True, exist_ok=True)
        matplotlib.image.imsave(args.out, image)
    print(f"written {args.out} ({image.shape[1]}x{image.shape[0]})")


if __name__ == "__main__":
    main()
