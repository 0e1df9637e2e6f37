#!/usr/bin/env python3
"""Does temperature scaling help? Dev and test calibration before and after, on two corpora.

For each corpus, loss and seed, trains a model with the command line's defaults (the seed moves
the shuffling; on fortunes also the split), lets ``build_model`` fit the temperature on the dev
set (Guo, Pleiss, Sun & Weinberger 2017), and records the expected calibration error (ECE,
15 equal-width bins; Naeini, Cooper & Hauskrecht 2015) and the mean negative log-likelihood
(NLL) of the dev and test sets before (softmax of the scores) and after (softmax of the scores
divided by the fitted temperature). The dev set is the one the temperature was fitted on; the
test set was never seen.

Corpora: the invented demo corpus (``data/demo``: train, dev and test files as given), and
Debian's fortunes package (real data, ``../shared/tools/fortunes_corpus.sh``; about 15,000
texts in 43 categories), shuffled with the seed and cut 80 / 10 / 10 into train, dev and test
(dev and test rows whose category is missing from train are dropped).

Prints one row per run and the means per corpus and loss, and writes JSON to
``bench-results/calibration.json``.

    python scripts/bench_calibration.py [--seeds 3] [--skip-fortunes]
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

import lintext  # noqa: E402
from bench_common import FORTUNES_TSV, fortunes_rows  # noqa: E402
from lintext.text.readers import Corpus  # noqa: E402

OUT = ROOT / "bench-results" / "calibration.json"
DEMO = ROOT / "data" / "demo"
KEYS = ("dev_ece_before", "dev_ece_after", "test_ece_before", "test_ece_after",
        "dev_nll_before", "dev_nll_after", "test_nll_before", "test_nll_after")


def fortunes_split(seed: int):
    rows = [(text, label, f"{FORTUNES_TSV}:{number}") for text, label, number in fortunes_rows()]
    order = np.random.default_rng(seed).permutation(len(rows))
    cut1, cut2 = int(0.8 * len(rows)), int(0.9 * len(rows))
    train = [rows[i] for i in order[:cut1]]
    known = {r[1] for r in train}

    def corpus(part, path):
        part = [r for r in part if r[1] in known]
        return Corpus([r[0] for r in part], [r[1] for r in part], [r[2] for r in part], path)

    return (corpus(train, "fortunes train"), corpus([rows[i] for i in order[cut1:cut2]], "fortunes dev"),
            corpus([rows[i] for i in order[cut2:]], "fortunes test"))


def run(corpus: str, loss: str, seed: int) -> dict:
    if corpus == "demo":
        train, dev, test = DEMO / "train.csv", DEMO / "dev.csv", DEMO / "test.csv"
    else:
        train, dev, test = fortunes_split(seed)
    started = time.perf_counter()
    model = lintext.build_model(train, dev=dev, test=test, options={"loss": loss, "seed": seed})
    cal, test_m = model.calibration, model.info["metrics"]["test"]
    return {
        "corpus": corpus, "loss": loss, "seed": seed, "temperature": cal["temperature"],
        "dev_documents": cal["documents"], "test_documents": test_m["documents"],
        "test_accuracy": test_m["accuracy"],
        "dev_ece_before": cal["ece_before"], "dev_ece_after": cal["ece_after"],
        "test_ece_before": test_m["ece_uncalibrated"], "test_ece_after": test_m["ece"],
        "dev_nll_before": cal["nll_before"], "dev_nll_after": cal["nll_after"],
        "test_nll_before": test_m["nll_uncalibrated"], "test_nll_after": test_m["nll"],
        "seconds": round(time.perf_counter() - started, 2),
    }


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seeds", type=int, default=3)
    parser.add_argument("--skip-fortunes", action="store_true")
    args = parser.parse_args()
    corpora = ["demo"] + ([] if args.skip_fortunes else ["fortunes"])
    print(f"load average {os.getloadavg()[0]:.2f} (timings are not the point here)")
    header = f"{'corpus':9s} {'loss':8s} seed  {'T':>6s}  {'dev ECE':>15s}  {'test ECE':>15s}  {'dev NLL':>15s}  {'test NLL':>15s}"
    print(header)
    runs = []
    for corpus in corpora:
        for loss in ("softmax", "hinge"):
            for seed in range(args.seeds):
                r = run(corpus, loss, seed)
                runs.append(r)
                pair = lambda k: f"{r[k + '_before']:.4f}->{r[k + '_after']:.4f}"  # noqa: E731
                print(f"{corpus:9s} {loss:8s} {seed:4d}  {r['temperature']:6.3f}  {pair('dev_ece'):>15s}  "
                      f"{pair('test_ece'):>15s}  {pair('dev_nll'):>15s}  {pair('test_nll'):>15s}", flush=True)
    means = []
    print("\nmeans over seeds")
    print(header)
    for corpus in corpora:
        for loss in ("softmax", "hinge"):
            group = [r for r in runs if r["corpus"] == corpus and r["loss"] == loss]
            m = {k: float(np.mean([r[k] for r in group])) for k in KEYS + ("temperature",)}
            m.update({"corpus": corpus, "loss": loss, "seeds": len(group),
                      "runs_where_test_ece_fell": sum(r["test_ece_after"] < r["test_ece_before"] for r in group),
                      "runs_where_dev_ece_fell": sum(r["dev_ece_after"] < r["dev_ece_before"] for r in group)})
            means.append(m)
            pair = lambda k: f"{m[k + '_before']:.4f}->{m[k + '_after']:.4f}"  # noqa: E731
            print(f"{corpus:9s} {loss:8s} mean  {m['temperature']:6.3f}  {pair('dev_ece'):>15s}  {pair('test_ece'):>15s}  "
                  f"{pair('dev_nll'):>15s}  {pair('test_nll'):>15s}   (test ECE fell in {m['runs_where_test_ece_fell']} "
                  f"of {len(group)} runs, dev ECE in {m['runs_where_dev_ece_fell']})")
    OUT.parent.mkdir(exist_ok=True)
    OUT.write_text(json.dumps({"runs": runs, "means": means, "load_average": os.getloadavg()[0]}, indent=2) + "\n")
    print(f"\nwritten to {OUT}")


if __name__ == "__main__":
    main()
