#!/usr/bin/env python3
"""Re-shoot ``docs/report.png``, the README's picture of the report.

Trains an AdaGrad model on the invented demo corpus (``--min-df 1``, dev and test sets), opens
its ``report.html`` in headless Chromium at 1280 pixels wide, and keeps two parts of the full-page
screenshot, joined by a zig-zag cut: the top of the page (summary, learning curves, frequency
against updates) and, from further down, the routing section with its coverage figure and the
start of the most confident errors. Where each section lies comes from the page's own measuring
script (``data-sections`` on ``<body>``).

    python scripts/report_picture.py [--out docs/report.png] [--keep-dir /tmp/lintext-picture]
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

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--no-first-run", "--disable-background-networking",
         "--disable-component-update", "--disable-sync", "--disable-extensions", "--hide-scrollbars"]
WIDTH = 1280
ERRORS_SHOWN = 900  # pixels of the errors section kept (its heading, the counts and the first rows)


def chromium() -> str:
    for name in ("chromium", "chromium-browser"):
        if shutil.which(name):
            return shutil.which(name)
    sys.exit("chromium is not installed (apt-get install -y chromium)")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--out", default=str(ROOT / "docs" / "report.png"))
    parser.add_argument("--keep-dir", default=None, help="write the model here instead of a temporary folder")
    args = parser.parse_args()

    import lintext
    from lintext.report.writer import write_report
    from PIL import Image, ImageDraw

    work = Path(args.keep_dir or tempfile.mkdtemp(prefix="lintext-picture-")).resolve()
    out = Path(args.out).resolve()
    os.chdir(ROOT)  # the page names the data as typed: data/demo/train.csv
    demo = Path("data") / "demo"
    model = lintext.build_model(demo / "train.csv", dev=demo / "dev.csv", test=demo / "test.csv",
                                featurizer={"min_df": 1}, options={"optimizer": "adagrad"})
    folder = model.save(work / "model", extra=lambda tmp: write_report(model, tmp))
    url = (folder / "report.html").resolve().as_uri()
    browser = chromium()
    dom = subprocess.run([browser, *FLAGS, f"--user-data-dir={work / 'profile-dom'}", f"--window-size={WIDTH},2000",
                          "--dump-dom", url], capture_output=True, text=True, timeout=120, check=True).stdout
    body = dict(re.findall(r'([\w-]+)="([^"]*)"', re.search(r"<body([^>]*)>", dom).group(1)))
    sections = {s.split(":")[0]: tuple(int(v) for v in s.split(":")[1:]) for s in body["data-sections"].split()}
    height = int(body["data-page-height"])
    shot = work / "full.png"
    subprocess.run([browser, *FLAGS, f"--user-data-dir={work / 'profile-shot'}", f"--window-size={WIDTH},{height}",
                    f"--screenshot={shot}", url], capture_output=True, text=True, timeout=120, check=True)
    page = Image.open(shot).convert("RGB")
    top_end = sections["steps"][0] - 16  # summary, learning curves, frequency and updates
    routing_start = sections["routing"][0] - 24
    errors_top, errors_height = sections["errors"]
    lower_end = errors_top + min(errors_height, ERRORS_SHOWN)
    parts = [page.crop((0, 0, WIDTH, top_end)), page.crop((0, routing_start, WIDTH, lower_end))]
    band = 34
    picture = Image.new("RGB", (WIDTH, parts[0].height + band + parts[1].height + band), (251, 251, 248))
    picture.paste(parts[0], (0, 0))
    picture.paste(parts[1], (0, parts[0].height + band))
    draw = ImageDraw.Draw(picture)
    for y0 in (parts[0].height, picture.height - band):  # a zig-zag where the page is cut
        mid = y0 + band // 2
        points = [(x, mid + (6 if (x // 12) % 2 else -6)) for x in range(0, WIDTH + 12, 12)]
        draw.line(points, fill=(154, 163, 171), width=2)
    picture.quantize(colors=256, method=Image.Quantize.MEDIANCUT).save(out, optimize=True)
    print(f"{out}: {picture.width} x {picture.height} (sections: {', '.join(sections)})")
    if not args.keep_dir:
        shutil.rmtree(work, ignore_errors=True)


if __name__ == "__main__":
    main()
