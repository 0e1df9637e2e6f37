#!/usr/bin/env python3
"""A real labelled corpus from the manual pages Debian's packages install: each page's prose,
labelled by its section (1 commands, 2 system calls, 3 library functions, 5 file formats,
7 overviews, 8 administration, ...).

Source: the pages listed by the installed Debian packages (``/var/lib/dpkg/info/*.list``), in
``/usr/share/man/man<section>/``. Debian's ``manpages`` and ``manpages-dev`` packages (the Linux
man-pages project) are installed first when missing and the script runs as root; every other
package's pages count too, except ``google-cloud-*`` (not Debian's: thousands of generated,
near-identical pages). Pages that only include another (``.so``) are skipped.

Text: the page's NAME line and DESCRIPTION (and any other section but SYNOPSIS, LIBRARY, SEE
ALSO and those after it), with the roff requests and font escapes removed, cut to ``--words``
words. The ``.TH`` line, which names the section, is dropped, and so is the synopsis, whose
C declarations would give sections 2 and 3 away by their form alone. Sections with fewer than
``--min-pages`` pages are left out; each section keeps at most ``--max-pages`` pages (a seeded
sample), so the corpus stays affordable for benchmarks.

    python scripts/make_manpages.py --out /tmp/lintext-bench/manpages.tsv

Output: TSV without header, ``section<TAB>text`` per line (the layout of the fortunes corpus).
"""

from __future__ import annotations

import argparse
import glob
import gzip
import os
import random
import re
import subprocess
import sys
from pathlib import Path

MAN = "/usr/share/man"
SKIP_PACKAGES = ("google-cloud-",)
DROP_SECTIONS = {"SYNOPSIS", "LIBRARY"}
STOP_SECTIONS = {"SEE ALSO", "AUTHOR", "AUTHORS", "COPYRIGHT", "REPORTING BUGS", "COLOPHON", "HISTORY"}
FONT = re.compile(r"\\f(\[[^]]*\]|\(..|.)")
ESCAPE = re.compile(r"\\(\(..|\[[^]]*\]|[-e&|^%:0 ]|\*\(..|\*\[[^]]*\]|\*.|[a-zA-Z])")


def page_files() -> dict[str, list[str]]:
    """Man page files of the installed Debian packages by section (``1``, ``2``, ... ``8``)."""
    out: dict[str, list[str]] = {}
    for listing in sorted(glob.glob("/var/lib/dpkg/info/*.list")):
        package = Path(listing).name.split(":")[0][: -len(".list")]
        if package.startswith(SKIP_PACKAGES):
            continue
        with open(listing, encoding="utf-8", errors="replace") as fh:
            for line in fh:
                path = line.strip()
                match = re.match(rf"{MAN}/man([1-8])/[^/]+$", path)
                if match and os.path.isfile(path) and not os.path.islink(path):
                    out.setdefault(match.group(1), []).append(path)
    return {k: sorted(set(v)) for k, v in out.items()}


def page_text(path: str, words: int) -> str:
    """The prose of one page (see the module docstring); empty for a page that includes another."""
    opener = gzip.open if path.endswith(".gz") else open
    with opener(path, "rt", encoding="utf-8", errors="replace") as fh:
        lines = fh.read().splitlines()
    kept, section = [], ""
    for line in lines:
        if line.startswith(".so "):
            return ""
        if line.startswith(('.\\"', "'\\\"", ".TH", '\\"')):
            continue
        if line.startswith((".SH", ".Sh")):
            section = line[3:].strip().strip('"').upper()
            if section in STOP_SECTIONS:
                break
            continue
        if section in DROP_SECTIONS:
            continue
        if line.startswith((".", "'")):
            parts = line.split(None, 1)
            line = parts[1] if len(parts) > 1 and parts[0][1:] in {"B", "I", "BR", "RB", "IR", "RI", "BI", "IB", "SM", "SB", "TP", "IP", "Nm", "Nd", "Ar", "Fl", "Pa", "Xr"} else ""
        line = FONT.sub("", line)
        line = ESCAPE.sub(" ", line).replace('"', " ")
        kept.extend(line.split())
        if len(kept) >= words:
            break
    return " ".join(kept[:words])


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--out", default="/tmp/lintext-bench/manpages.tsv")
    parser.add_argument("--words", type=int, default=200, help="words kept per page (default 200)")
    parser.add_argument("--min-pages", type=int, default=100, help="smallest section kept (default 100 pages)")
    parser.add_argument("--max-pages", type=int, default=1500, help="pages sampled per section at most (default 1500)")
    parser.add_argument("--seed", type=int, default=0)
    args = parser.parse_args(argv)
    if not os.path.isdir(f"{MAN}/man2") and os.geteuid() == 0:
        subprocess.run(["apt-get", "install", "-y", "-qq", "manpages", "manpages-dev"], check=False,
                       env={**os.environ, "DEBIAN_FRONTEND": "noninteractive"})
    rng = random.Random(args.seed)
    rows = []
    for section, paths in sorted(page_files().items()):
        texts = [t for t in (page_text(p, args.words) for p in paths) if len(t.split()) >= 10]
        if len(texts) < args.min_pages:
            continue
        rng.shuffle(texts)
        rows += [(section, t) for t in texts[: args.max_pages]]
        print(f"section {section}: {len(texts)} pages, {min(len(texts), args.max_pages)} kept", file=sys.stderr)
    rng.shuffle(rows)
    Path(args.out).parent.mkdir(parents=True, exist_ok=True)
    with open(args.out, "w", encoding="utf-8") as fh:
        for section, text in rows:
            fh.write(f"{section}\t{text}\n")
    print(f"{len(rows)} pages -> {args.out}", file=sys.stderr)
    return 0


if __name__ == "__main__":
    sys.exit(main())
