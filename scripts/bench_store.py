#!/usr/bin/env python3
"""Feature store benchmark: bounded memory, the shard-wise shuffle's effect, and a million documents.

1. Memory. Synthetic corpora (scripts/make_synth.py) of N and SCALE x N documents with the same
   invented vocabulary; ``lintext featurize`` and then one epoch of ``lintext train`` from the store,
   each under ``/usr/bin/time -v``; its "Maximum resident set size" is the peak. Hashing mode
   (word 1-2-grams into 2^18 columns) and vocabulary mode (words, ``--ngrams 1-1``, so both corpora
   have the same vocabulary). Target: the larger corpus's peak at most 1.2 x the smaller one's.
2. Shuffling. On the demo corpus, fortunes (Debian's fortunes package, built by
   ../shared/tools/fortunes_corpus.sh) and a synthetic corpus: a store of several shards trained
   shard by shard (shard order and rows within each shard shuffled) against the same rows stacked
   in memory with one full shuffle; dev accuracy and macro-F1 at the best epoch, mean over seeds.
3. ``--million``: featurize and train (``--epochs``) a 1,000,000-document synthetic corpus; wall time
   and peak resident memory of each.

    python scripts/bench_store.py [--documents 50000 --scale 10 --shard-rows 10000] [--million]

Prints tables and writes bench-results/store.json. Other processes on the machine change the times,
not the peaks; the load average is printed.
"""

from __future__ import annotations

import argparse
import json
import os
import re
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "scripts"))

from bench_common import FORTUNES_TSV, fortunes_csv  # noqa: E402
from make_synth import make_corpus, write_corpus  # noqa: E402

WORK = Path("/tmp/lintext-bench/store")
LINTEXT = str(Path(sys.executable).with_name("lintext"))
MODES = {"hashing": ["--hash-space", "2^18"], "vocabulary": ["--ngrams", "1-1"]}


def timed(args: list[str]) -> dict:
    """Run a command under /usr/bin/time -v: wall seconds and peak resident memory (MiB)."""
    started = time.perf_counter()
    done = subprocess.run(["/usr/bin/time", "-v", *args], capture_output=True, text=True)
    if done.returncode != 0:
        raise SystemExit(f"failed: {' '.join(args)}\n{done.stderr[-2000:]}")
    peak = int(re.search(r"Maximum resident set size \(kbytes\): (\d+)", done.stderr).group(1))
    return {"seconds": round(time.perf_counter() - started, 2), "peak_mib": round(peak / 1024, 1)}


def corpus(documents: int, features: int, seed: int = 0) -> Path:
    path = WORK / f"synth-{documents}-{features}.csv"
    if not path.exists():
        path.parent.mkdir(parents=True, exist_ok=True)
        texts, labels = make_corpus(documents=documents, features=features, labels=50, seed=seed)
        write_corpus(str(path), texts, labels)
    return path


def memory(documents: int, scale: int, shard_rows: int) -> list[dict]:
    rows = []
    for mode, options in MODES.items():
        peaks = {}
        for factor in (1, scale):
            data = corpus(documents * factor, 5000)
            store, model = WORK / f"store-{mode}-{factor}", WORK / f"model-{mode}-{factor}"
            featurize = timed([LINTEXT, "featurize", str(data), "--out", str(store), "--shard-rows", str(shard_rows),
                               "-q", *options])
            train = timed([LINTEXT, "train", str(store), "--out", str(model), "--epochs", "1", "--no-report", "-q"])
            peaks[factor] = {"featurize": featurize, "train": train}
        for step in ("featurize", "train"):
            small, large = peaks[1][step], peaks[scale][step]
            rows.append({"mode": mode, "step": step, "documents": documents, "scale": scale, "peak_1x_mib": small["peak_mib"],
                         f"peak_{scale}x_mib": large["peak_mib"], "ratio": round(large["peak_mib"] / small["peak_mib"], 3),
                         "seconds_1x": small["seconds"], f"seconds_{scale}x": large["seconds"]})
            print(f"{mode:10s} {step:9s} peak {small['peak_mib']:8.1f} MiB at 1x, {large['peak_mib']:8.1f} MiB at {scale}x: "
                  f"ratio {rows[-1]['ratio']:.3f} (target <= 1.2); {small['seconds']:.1f} s / {large['seconds']:.1f} s", flush=True)
    return rows


def shuffling(seeds: int, documents: int) -> list[dict]:
    from lintext.engine.options import TrainOptions
    from lintext.engine.trainer import fit
    from lintext.from_store import featurize
    from lintext.pipeline import prepare_data

    cases = [("demo", ROOT / "data/demo/train.csv", ROOT / "data/demo/dev.csv", 500)]
    if FORTUNES_TSV.exists():  # as built (sorted by category: every shard holds one or two labels) and shuffled
        cases.append(("fortunes (file sorted by label)", fortunes_csv(WORK), None, 2000))
        cases.append(("fortunes (file shuffled)", fortunes_csv(WORK, shuffled=True), None, 2000))
    cases.append(("synthetic", corpus(documents, 200_000), None, max(1000, documents // 10)))
    rows = []
    for name, data, dev, shard_rows in cases:
        store = featurize(data, WORK / f"shuffle-{name.split()[0]}-{len(rows)}", dev=dev, shard_rows=shard_rows)
        result = {"corpus": name, "shards": len(store.shards("data")), "documents": store.rows("data")}
        for label, stream in (("shards", True), ("full", False)):
            prep = prepare_data(store.path, stream=stream)
            scores = []
            for seed in range(seeds):
                run = fit(prep.X, prep.y, len(prep.labels), prep.X_dev, prep.y_dev, TrainOptions(seed=seed))
                best = run.history[run.best_epoch - 1]
                scores.append((best["dev_accuracy"], best["dev_macro_f1"]))
            result[f"{label}_accuracy"], result[f"{label}_macro_f1"] = (round(float(v), 4) for v in np.mean(scores, axis=0))
        rows.append(result)
        print(f"{name:32s} {result['shards']:3d} shards: dev accuracy {result['shards_accuracy']:.4f} shard-wise, "
              f"{result['full_accuracy']:.4f} full shuffle; macro-F1 {result['shards_macro_f1']:.4f} vs "
              f"{result['full_macro_f1']:.4f} (mean of {seeds} seeds)", flush=True)
    return rows


def million(epochs: int, shard_rows: int) -> dict:
    data = corpus(1_000_000, 200_000)
    store, model = WORK / "store-million", WORK / "model-million"
    featurize = timed([LINTEXT, "featurize", str(data), "--out", str(store), "--shard-rows", str(shard_rows), "-q"])
    train = timed([LINTEXT, "train", str(store), "--out", str(model), "--epochs", str(epochs), "--no-report", "-q"])
    metrics = json.loads((model / "model.json").read_text())["metrics"]["dev"]
    out = {"documents": 1_000_000, "featurize": featurize, "train": train, "epochs": epochs,
           "dev_accuracy": metrics["accuracy"], "dev_macro_f1": metrics["macro_f1"]}
    print(f"1,000,000 documents: featurize {featurize['seconds']:.0f} s, peak {featurize['peak_mib']:.0f} MiB; "
          f"train ({epochs} epochs) {train['seconds']:.0f} s, peak {train['peak_mib']:.0f} MiB; "
          f"dev accuracy {metrics['accuracy']:.4f}", flush=True)
    return out


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--documents", type=int, default=50_000, help="documents of the 1x corpus")
    parser.add_argument("--scale", type=int, default=10, help="size of the larger corpus, in 1x corpora")
    parser.add_argument("--shard-rows", type=int, default=10_000)
    parser.add_argument("--seeds", type=int, default=3, help="seeds for the shuffling comparison")
    parser.add_argument("--skip-memory", action="store_true")
    parser.add_argument("--skip-shuffling", action="store_true")
    parser.add_argument("--million", action="store_true", help="also the 1,000,000-document run")
    parser.add_argument("--epochs", type=int, default=10, help="epochs of the million-document run")
    args = parser.parse_args()
    WORK.mkdir(parents=True, exist_ok=True)
    report = {"load_average_before": os.getloadavg(), "cpus": os.cpu_count()}
    print(f"load average {os.getloadavg()[0]:.2f} on {os.cpu_count()} cores", flush=True)
    if not args.skip_memory:
        report["memory"] = memory(args.documents, args.scale, args.shard_rows)
    if not args.skip_shuffling:
        report["shuffling"] = shuffling(args.seeds, args.documents)
    if args.million:
        report["million"] = million(args.epochs, 100_000)
    report["load_average_after"] = os.getloadavg()
    out = ROOT / "bench-results"
    out.mkdir(exist_ok=True)
    path = out / "store.json"  # sections measured now replace the same sections of an earlier run
    earlier = json.loads(path.read_text()) if path.exists() else {}
    path.write_text(json.dumps({**earlier, **report}, indent=2) + "\n")
    print(f"written to {path}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
