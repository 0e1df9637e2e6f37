#!/usr/bin/env python3
"""Does storing weights as float32 change any prediction? Accuracy and macro-F1 with float64 and float32 weights.

Trains the default model on the demo corpus (its train/dev/test files) and on Debian's fortunes
(``/tmp/lintext-bench/fortunes.tsv`` from ``../shared/tools/fortunes_corpus.sh``, categories with
at least 10 texts; a seeded stratified 80/20 split, the dev set held out of the training part as usual), then scores the
test set with the trained float64 weights and with the same weights rounded to float32 (what a
model directory keeps), and counts the test documents whose label changes. Also gives the size
of ``weights.npz`` both ways. Prints a table and writes JSON to ``bench-results/weights.json``.

    python scripts/bench_weights.py [--fortunes /tmp/lintext-bench/fortunes.tsv]
"""

from __future__ import annotations

import argparse
import io
import json
import os
import sys
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from lintext.engine.metrics import confusion_counts, summary_scores  # noqa: E402
from lintext.text.readers import ReaderOptions, read_corpus  # noqa: E402
from lintext.text.split import split_dev  # noqa: E402


def npz_bytes(**arrays) -> int:
    buf = io.BytesIO()
    np.savez(buf, **arrays)
    return buf.getbuffer().nbytes


def compare(name, train, dev, test) -> dict:
    """Fit the defaults once; score ``test`` with the float64 weights and with them rounded to float32."""
    from lintext.engine.options import TrainOptions
    from lintext.engine.trainer import fit
    from lintext.pipeline import prepare_data

    options = TrainOptions()
    prep = prepare_data(train, dev, 0.1, None, options.seed)
    result = fit(prep.X, prep.y, len(prep.labels), prep.X_dev, prep.y_dev, options)
    coef64 = np.asarray(result.coef, dtype=np.float64)
    coef32 = coef64.astype(np.float32)
    X = prep.featurizer.transform(test.texts)
    y = test.label_indices(prep.labels)
    scores64 = np.asarray(X @ coef64) + result.intercept
    scores32 = np.asarray(X @ coef32.astype(np.float64)) + result.intercept
    out = {"corpus": name, "test_documents": len(test)}
    for tag, scores in (("float64", scores64), ("float32", scores32)):
        s = summary_scores(confusion_counts(y, scores.argmax(axis=1), len(prep.labels)))
        out[f"accuracy_{tag}"], out[f"macro_f1_{tag}"] = s["accuracy"], s["macro_f1"]
    out["changed_predictions"] = int((scores64.argmax(axis=1) != scores32.argmax(axis=1)).sum())
    out["max_score_difference"] = float(np.abs(scores64 - scores32).max())
    out["weights_bytes_float64"] = npz_bytes(coef=coef64, intercept=result.intercept)
    out["weights_bytes_float32"] = npz_bytes(coef=coef32, intercept=result.intercept)
    return out


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--fortunes", type=Path, default=Path("/tmp/lintext-bench/fortunes.tsv"))
    parser.add_argument("--out", type=Path, default=ROOT / "bench-results" / "weights.json")
    args = parser.parse_args()
    demo = ROOT / "data" / "demo"
    rows = [compare("demo", read_corpus(demo / "train.csv"), read_corpus(demo / "dev.csv"), read_corpus(demo / "test.csv"))]
    if args.fortunes.is_file():
        # the fortunes file has no header: label, then text
        corpus = read_corpus(args.fortunes, ReaderOptions(format="tsv", header=False, text_column="2", label_column="1"))
        counts = corpus.label_counts()
        corpus = corpus.subset([i for i, y in enumerate(corpus.labels) if counts[y] >= 10])  # room for the splits
        corpus.label_names = sorted(set(corpus.labels))
        rest, test = split_dev(corpus, 0.2, seed=0)
        rows.append(compare("fortunes", rest, None, test))
    else:
        print(f"{args.fortunes} is missing: run ../shared/tools/fortunes_corpus.sh for the second corpus")
    head = ["corpus", "test docs", "accuracy f64", "accuracy f32", "macro-F1 f64", "macro-F1 f32", "changed", "max |Δscore|",
            "weights f64", "weights f32"]
    print(" | ".join(head))
    for r in rows:
        print(" | ".join([r["corpus"], str(r["test_documents"]), f"{r['accuracy_float64']:.4f}", f"{r['accuracy_float32']:.4f}",
                          f"{r['macro_f1_float64']:.4f}", f"{r['macro_f1_float32']:.4f}", str(r["changed_predictions"]),
                          f"{r['max_score_difference']:.2e}", f"{r['weights_bytes_float64'] / 2**20:.1f} MiB",
                          f"{r['weights_bytes_float32'] / 2**20:.1f} MiB"]))
    args.out.parent.mkdir(parents=True, exist_ok=True)
    args.out.write_text(json.dumps({"runs": rows, "load_average": os.getloadavg()}, indent=2) + "\n", encoding="utf-8")
    print(f"written to {args.out}")


if __name__ == "__main__":
    main()
