#!/usr/bin/env python3
"""End to end: ``lintext train`` against scikit-learn's same job, phase by phase, side by side in one run.

Corpora: the ``large`` synthetic shape (``make_synth.SHAPES["large"]``: 60,000 texts, the first
50,000 to train and the last 10,000 to test, 60 labels; about 300,000 features and 90 non-zeros
per row with lintext's default featurizer) and the real fortunes corpus
(``../shared/tools/fortunes_corpus.sh``: Debian's fortunes, about 15,000 texts in the 42 categories
with at least 10; a seeded 80/20 split per category), each written as ``text,label`` CSV files.

Measured, with the issue "End to end faster than scikit-learn"'s targets:

* **End to end**: ``lintext train TRAIN --test TEST --optimizer adagrad --epochs 5 --patience 0``
  (default featurizer, a dev tenth held out and scored each epoch, the report written) as one
  process, against one process doing scikit-learn's same job: ``TfidfVectorizer`` with the options
  of lintext's default featurizer (word 1-2-grams, ``min_df=2``, ``sublinear_tf`` for its
  ``log-tfidf``; :func:`tfidf_options`) + ``SGDClassifier(loss="log_loss",
  max_iter=5, tol=None, n_jobs=2)`` + predict. Wall time of each subprocess, run alternately
  ``--repeats`` times (the quickest of each is compared; all are kept), and the test accuracy of
  each (target: ratio <= 0.5 with accuracy at least as high).
* **Where the time goes**: a third process runs the same training through the library
  (``pipeline.build_model`` then ``Model.save`` with the report, as the command does) and
  timestamps the progress events the pipeline sends as each phase starts: process start and exit,
  imports, read (and dev split), featurize, epochs, dev scoring (the per-epoch dev scores, timed by
  wrapping the trainer's ``history_row``, plus the final dev evaluation), statistics and evidence
  (after the last epoch), test scoring, save, report. scikit-learn's job times its own phases.
  The report's share of the ``lintext train`` wall time is given (target <= 10%).
* **Epoch / floor**: seconds per epoch of SGD and AdaGrad at batch 8 and 1 and of Adam, RMSProp
  and AdaDelta at batch 8 (softmax, one thread) against one ``X @ W`` plus one ``X.T @ G`` through
  SciPy on the same matrix (``bench_train.epoch_seconds``; targets 1.5 and 2).
* **Reading**: ``read_corpus`` + ``split_dev`` of the large shape's 60,000-row CSV (22 MB; the
  issue's corpus: 21 MB, 51,000 rows), best of 5 (target < 1 s).
* **Start-up**: ``lintext --help`` and ``lintext COMMAND --help`` for every command, 10 runs each
  through the installed ``lintext`` script: minimum, median and maximum (target < 0.3 s), beside
  ``python -c pass``.

Prints one table and writes the same numbers (and every repetition) to
``bench-results/end_to_end.json``. The 1-minute load average is recorded around each measurement:
on a two-core machine another busy process slows everything here.

    .venv/bin/python scripts/bench_end_to_end.py [--quick] [--repeats 3] [--corpora large,fortunes]
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
sys.path.insert(0, str(HERE))
sys.path.insert(0, str(ROOT))

import numpy as np  # noqa: E402

from bench_common import FORTUNES_TSV, finish, fortunes_rows, load, write_csv  # noqa: E402
from make_synth import SHAPES, make_corpus  # noqa: E402

OUT = ROOT / "bench-results" / "end_to_end.json"
MIN_LABEL_TEXTS = 10
TRAIN_OPTIONS = {"optimizer": "adagrad", "epochs": 5, "patience": 0}
FLOOR_CASES = [("sgd", 8), ("sgd", 1), ("adagrad", 8), ("adagrad", 1), ("adam", 8), ("rmsprop", 8), ("adadelta", 8)]
TARGET_E2E, TARGET_REPORT_SHARE, TARGET_READ, TARGET_HELP = 0.5, 0.10, 1.0, 0.3


def target_floor(optimizer: str) -> float:
    return 1.5 if optimizer in ("sgd", "adagrad") else 2.0


# --------------------------------------------------------------------------- corpora


def large_corpus(folder: Path) -> dict:
    shape = {**SHAPES["large"], "documents": SHAPES["large"]["documents"] + 10_000}
    texts, labels = make_corpus(seed=0, **shape)
    cut = SHAPES["large"]["documents"]
    return {"train": write_csv(folder / "large-train.csv", zip(texts[:cut], labels[:cut])),
            "test": write_csv(folder / "large-test.csv", zip(texts[cut:], labels[cut:])),
            "all": write_csv(folder / "large-all.csv", zip(texts, labels)),
            "description": f"make_synth shape 'large' ({shape}), seed 0; first {cut:,} train, last 10,000 test"}


def fortunes_corpus(folder: Path, log) -> dict:
    rows = fortunes_rows(log)
    texts, labels = [text for text, _, _ in rows], [label for _, label, _ in rows]
    rng = np.random.default_rng(0)
    names, counts = np.unique(labels, return_counts=True)
    kept = names[counts >= MIN_LABEL_TEXTS]  # a label of 2 texts cannot give train, dev and test a share
    codes = np.searchsorted(names, labels)
    train, test = [], []
    for k in np.searchsorted(names, kept):  # per label: a seeded 80/20 split
        members = rng.permutation(np.flatnonzero(codes == k))
        cut = int(round(0.8 * members.size))
        train += members[:cut].tolist()
        test += members[cut:].tolist()
    pick = lambda idx: ([texts[i] for i in sorted(idx)], [labels[i] for i in sorted(idx)])  # noqa: E731
    return {"train": write_csv(folder / "fortunes-train.csv", zip(*pick(train))),
            "test": write_csv(folder / "fortunes-test.csv", zip(*pick(test))),
            "description": f"Debian fortunes ({FORTUNES_TSV}): {len(train) + len(test):,} texts of the {kept.size} "
                           f"categories with at least {MIN_LABEL_TEXTS}, seeded 80/20 split per category"}


# --------------------------------------------------------------------------- the three processes

SKLEARN_JOB = r"""
import csv, json, sys, time, warnings
t0 = time.perf_counter()
from sklearn.exceptions import ConvergenceWarning
from sklearn.feature_extraction.text import TfidfVectorizer
from sklearn.linear_model import SGDClassifier
t1 = time.perf_counter()
def read(path):
    with open(path, encoding="utf-8", newline="") as fh:
        rows = list(csv.DictReader(fh))
    return [r["text"] for r in rows], [r["label"] for r in rows]
texts, labels = read(sys.argv[1])
t2 = time.perf_counter()
options = json.loads(sys.argv[3])  # the features of lintext's default featurizer
vectorizer = TfidfVectorizer(**{**options, "ngram_range": tuple(options["ngram_range"])})
X = vectorizer.fit_transform(texts)
t3 = time.perf_counter()
with warnings.catch_warnings():
    warnings.simplefilter("ignore", ConvergenceWarning)
    clf = SGDClassifier(loss="log_loss", max_iter=5, tol=None, n_jobs=2, random_state=0).fit(X, labels)
t4 = time.perf_counter()
test_texts, test_labels = read(sys.argv[2])
accuracy = clf.score(vectorizer.transform(test_texts), test_labels)
t5 = time.perf_counter()
print(json.dumps({"test_accuracy": float(accuracy), "features": int(X.shape[1]), "phases": {
    "imports": t1 - t0, "read": t2 - t1, "featurize": t3 - t2, "epochs (fit)": t4 - t3,
    "test scoring (predict)": t5 - t4}, "inside_seconds": t5 - t0}))
"""

PHASES_JOB = r"""
import json, sys, time
t0 = time.perf_counter()
sys.path.insert(0, sys.argv[1])
import lintext.engine.trainer as trainer
from lintext.pipeline import build_model
imported = time.perf_counter()
train, test, out, options = sys.argv[2], sys.argv[3], sys.argv[4], json.loads(sys.argv[5])
dev_seconds = []
if hasattr(trainer, "history_row"):  # the dev scores computed after each epoch
    original = trainer.history_row
    def timed_row(*args, **kwargs):
        started = time.perf_counter()
        try:
            return original(*args, **kwargs)
        finally:
            dev_seconds.append(time.perf_counter() - started)
    trainer.history_row = timed_row
events = []
model = build_model(train, test=test, options=options, n_jobs=0,
                    progress=lambda e: events.append([time.perf_counter(), e.get("stage"), e.get("set"), e.get("seconds")]))
built = time.perf_counter()
report = []
def extra(folder):
    started = time.perf_counter()
    from lintext.report.writer import write_report  # as the command does
    write_report(model, folder)
    report.append(time.perf_counter() - started)
model.save(out, extra=extra)
saved = time.perf_counter()
print(json.dumps({"t0": t0, "imported": imported, "events": events, "built": built, "saved": saved,
                  "dev_seconds": dev_seconds if dev_seconds else None, "report": report[0],
                  "test_accuracy": model.info["metrics"]["test"]["accuracy"],
                  "features": model.info["data"]["features"], "nonzeros": model.info["data"]["nonzeros"]}))
"""


def tfidf_options() -> dict:
    """scikit-learn's ``TfidfVectorizer`` options giving the features of lintext's default featurizer."""
    from lintext.text.config import FeaturizerConfig

    c = FeaturizerConfig()
    if c.weighting not in ("tfidf", "log-tfidf") or c.char_ngrams is not None or c.hash_space is not None:
        raise SystemExit(f"no TfidfVectorizer equivalent of the default featurizer {c}")
    return {"ngram_range": list(c.ngrams), "min_df": c.min_df, "max_df": c.max_df, "max_features": c.max_features,
            "lowercase": c.lowercase, "norm": "l2" if c.normalize else None, "sublinear_tf": c.weighting == "log-tfidf"}


def lintext_command(train: Path, test: Path, out: Path) -> list[str]:
    script = Path(sys.executable).with_name("lintext")
    head = [str(script)] if script.exists() else [sys.executable, "-m", "lintext"]
    options = [f"--{k.replace('_', '-')}={v}" for k, v in TRAIN_OPTIONS.items()]
    return head + ["train", str(train), "--test", str(test), *options, "--quiet", "--out", str(out)]


def timed_run(command) -> tuple[float, str]:
    started = time.perf_counter()
    out = subprocess.run(command, check=True, capture_output=True, text=True, cwd=ROOT)
    return time.perf_counter() - started, out.stdout


def lintext_phases(raw: dict, wall: float) -> dict:
    """Seconds per phase from the timestamps of one instrumented run (see PHASES_JOB)."""
    at = {}
    epochs = []
    for t, stage, which, seconds in raw["events"]:
        if stage == "epoch":
            epochs.append(t)
            at.setdefault("training", t - seconds)  # without a "training" event: the first epoch's start
        else:
            at[stage if stage != "evaluating" else f"evaluating {which or 'test'}"] = t  # (older: test only)
    dev_inside = sum(raw["dev_seconds"]) if raw["dev_seconds"] else 0.0
    after_training = at.get("evaluating dev", at.get("evaluating test", raw["built"]))
    test_start = at.get("evaluating test", raw["built"])
    phases = {
        "process start and exit": max(0.0, wall - (raw["saved"] - raw["t0"])),  # interpreter, freeing memory
        "imports": raw["imported"] - raw["t0"],
        "read": at["featurizing"] - at["reading"],
        "featurize": at["training"] - at["featurizing"],
        "epochs (fit)": epochs[-1] - at["training"] - dev_inside,
        "dev scoring": dev_inside + (test_start - after_training),
        "statistics and evidence": after_training - epochs[-1],
        "test scoring (predict)": raw["built"] - test_start,
        "save": raw["saved"] - raw["built"] - raw["report"],
        "report": raw["report"],
    }
    return phases


def end_to_end(name: str, corpus: dict, repeats: int, folder: Path, log) -> dict:
    cli, sk, phased = [], [], []
    for k in range(repeats):
        log(f"  {name}: round {k + 1} of {repeats}: lintext train, scikit-learn, lintext by phase")
        model_dir = folder / f"model-{name}"
        seconds, _ = timed_run(lintext_command(corpus["train"], corpus["test"], model_dir))
        info = json.loads((model_dir / "model.json").read_text(encoding="utf-8"))
        cli.append({"seconds": seconds, "test_accuracy": info["metrics"]["test"]["accuracy"], "load": load()})
        seconds, stdout = timed_run([sys.executable, "-c", SKLEARN_JOB, str(corpus["train"]), str(corpus["test"]),
                                     json.dumps(tfidf_options())])
        job = json.loads(stdout.strip().splitlines()[-1])
        job["phases"] = {"process start and exit": max(0.0, seconds - job["inside_seconds"]), **job["phases"]}
        sk.append({"seconds": seconds, **job, "load": load()})
        seconds, stdout = timed_run([sys.executable, "-c", PHASES_JOB, str(ROOT), str(corpus["train"]),
                                     str(corpus["test"]), str(folder / f"phases-{name}"), json.dumps(TRAIN_OPTIONS)])
        raw = json.loads(stdout.strip().splitlines()[-1])
        phased.append({"seconds": seconds, "phases": lintext_phases(raw, seconds), "load": load(),
                       **{key: raw[key] for key in ("test_accuracy", "features", "nonzeros")}})
    best_cli = min(cli, key=lambda r: r["seconds"])
    best_sk = min(sk, key=lambda r: r["seconds"])
    best_phased = min(phased, key=lambda r: r["seconds"])
    return {"corpus": name, "description": corpus["description"], "command": " ".join(lintext_command(
                corpus["train"], corpus["test"], Path("MODEL_DIR"))[1:]),
            "lintext_seconds": best_cli["seconds"], "sklearn_seconds": best_sk["seconds"],
            "ratio": best_cli["seconds"] / best_sk["seconds"],
            "median_ratio": statistics.median(c["seconds"] for c in cli) / statistics.median(s["seconds"] for s in sk),
            "lintext_test_accuracy": best_cli["test_accuracy"], "sklearn_test_accuracy": best_sk["test_accuracy"],
            "report_share": best_phased["phases"]["report"] / best_cli["seconds"],
            "lintext_phases": best_phased["phases"], "lintext_phased_seconds": best_phased["seconds"],
            "sklearn_phases": best_sk["phases"], "features": best_phased["features"],
            "nonzeros": best_phased["nonzeros"], "sklearn_features": best_sk["features"],
            "runs": {"lintext_train": cli, "sklearn": sk, "lintext_by_phase": phased}}


# --------------------------------------------------------------------------- epoch / floor, reading, start-up


def floor_table(name: str, corpus: dict, epochs: int, log) -> list[dict]:
    import bench_train  # the floor and the timed epochs, as in the training benchmark

    from lintext.text.featurizer import Featurizer, FeaturizerConfig
    from lintext.text.readers import read_corpus

    train = read_corpus(corpus["train"])
    X = Featurizer(FeaturizerConfig(), n_jobs=2).fit_transform(train.texts).tocsr()
    y = train.label_indices()
    n_labels = len(train.label_names)
    floor = bench_train.Floor(X, n_labels)
    floor()  # warm
    rows = []
    for optimizer, batch_size in FLOOR_CASES:
        log(f"  {name}: {optimizer} batch {batch_size}, epoch against the floor")
        row = bench_train.epoch_seconds(X, y, n_labels, floor, optimizer, "softmax", batch_size, epochs)
        rows.append({"corpus": name, "shape": f"{X.shape[0]} x {X.shape[1]}, {X.nnz / X.shape[0]:.1f} non-zeros per row, "
                                             f"{n_labels} labels", **row})
    return rows


def reading(path: Path, repeats: int = 5) -> dict:
    from lintext.text.readers import read_corpus
    from lintext.text.split import split_dev

    read, split = [], []
    for _ in range(repeats):
        started = time.perf_counter()
        corpus = read_corpus(path)
        middle = time.perf_counter()
        split_dev(corpus, 0.1, seed=0)
        read.append(middle - started)
        split.append(time.perf_counter() - middle)
    total = [a + b for a, b in zip(read, split)]
    return {"path": str(path), "megabytes": path.stat().st_size / 1e6, "rows": len(corpus), "read_seconds": min(read),
            "split_seconds": min(split), "seconds": min(total), "all_seconds": total, "load": load()}


def help_timings(runs: int) -> list[dict]:
    from lintext.cli import app

    script = Path(sys.executable).with_name("lintext")
    head = [str(script)] if script.exists() else [sys.executable, "-m", "lintext"]
    cases = [("python -c pass", [sys.executable, "-c", "pass"]), ("lintext --help", head + ["--help"])]
    for command in sorted(c.name or c.callback.__name__ for c in app.registered_commands):
        cases.append((f"lintext {command} --help", head + [command, "--help"]))
    seconds = {label: [] for label, _ in cases}
    for _ in range(runs):  # round robin: a burst of load falls on every case alike
        for label, command in cases:
            started = time.perf_counter()
            subprocess.run(command, check=True, capture_output=True, cwd=ROOT)
            seconds[label].append(time.perf_counter() - started)
    return [{"case": label, "min": min(s), "median": statistics.median(s), "max": max(s), "all_seconds": s,
             "load": load()} for label, s in seconds.items()]


# --------------------------------------------------------------------------- report


def table(results: dict) -> str:
    lines = [["corpus", "measurement", "lintext", "reference", "ratio", "target", "met"]]
    for r in results["end_to_end"]:
        ok = r["ratio"] <= TARGET_E2E and r["lintext_test_accuracy"] >= r["sklearn_test_accuracy"]
        lines.append([r["corpus"], "end to end: lintext train / scikit-learn job (s, test accuracy)",
                      f"{r['lintext_seconds']:.1f} s, {r['lintext_test_accuracy']:.4f}",
                      f"{r['sklearn_seconds']:.1f} s, {r['sklearn_test_accuracy']:.4f}", f"{r['ratio']:.2f}x",
                      f"<= {TARGET_E2E}x, acc >=", "yes" if ok else "NO"])
        runs = r["runs"]
        lines.append([r["corpus"], f"  medians of {len(runs['lintext_train'])} runs",
                      f"{statistics.median(x['seconds'] for x in runs['lintext_train']):.1f} s",
                      f"{statistics.median(x['seconds'] for x in runs['sklearn']):.1f} s", f"{r['median_ratio']:.2f}x", "", ""])
        for phase, seconds in r["lintext_phases"].items():
            theirs = r["sklearn_phases"].get(phase)
            lines.append([r["corpus"], f"  phase: {phase}", f"{seconds:.2f} s", "" if theirs is None else f"{theirs:.2f} s",
                          "" if not theirs else f"{seconds / theirs:.2f}x", "", ""])
        lines.append([r["corpus"], "  report share of lintext train", f"{100 * r['report_share']:.1f}%", "", "",
                      f"<= {100 * TARGET_REPORT_SHARE:.0f}%", "yes" if r["report_share"] <= TARGET_REPORT_SHARE else "NO"])
    for r in results["floor"]:
        target = target_floor(r["optimizer"])
        lines.append([r["corpus"], f"{r['optimizer']} softmax batch {r['batch_size']}: s/epoch vs floor",
                      f"{r['seconds']:.3f} s", f"{r['floor_seconds']:.3f} s", f"{r['ratio']:.2f}x", f"<= {target:g}x",
                      "yes" if r["ratio"] <= target else "NO"])
    if results.get("reading"):
        r = results["reading"]
        lines.append(["large", f"read + dev split, {r['megabytes']:.0f} MB, {r['rows']:,} rows",
                      f"{r['seconds']:.2f} s", "", "", f"< {TARGET_READ:g} s", "yes" if r["seconds"] < TARGET_READ else "NO"])
    for r in results["help"]:
        check = r["case"] != "python -c pass"
        lines.append(["-", f"{r['case']} (min / median / max of {len(r['all_seconds'])})",
                      f"{r['min']:.3f} / {r['median']:.3f} / {r['max']:.3f} s", "", "",
                      f"< {TARGET_HELP:g} s" if check else "", ("yes" if r["median"] < TARGET_HELP else "NO") if check else ""])
    widths = [max(len(str(row[i])) for row in lines) for i in range(len(lines[0]))]
    fmt = lambda row: "  ".join(str(c).ljust(w) if i < 2 else str(c).rjust(w) for i, (c, w) in enumerate(zip(row, widths)))  # noqa: E731
    return "\n".join([fmt(lines[0]), fmt(["-" * w for w in widths])] + [fmt(row) for row in lines[1:]])


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--quick", action="store_true", help="one round, one timed epoch, 5 help runs")
    parser.add_argument("--repeats", type=int, default=3, help="end-to-end rounds per corpus (default 3)")
    parser.add_argument("--epochs", type=int, default=2, help="timed epochs per floor case (default 2)")
    parser.add_argument("--help-runs", type=int, default=10, help="runs of each --help (default 10)")
    parser.add_argument("--corpora", default="large,fortunes", help="comma-separated: large, fortunes")
    parser.add_argument("--skip-floor", action="store_true")
    parser.add_argument("--skip-end-to-end", action="store_true")
    parser.add_argument("--out", default=str(OUT))
    args = parser.parse_args(argv)
    if args.quick:
        args.repeats, args.epochs, args.help_runs = 1, 1, 5
    log = lambda msg: print(msg, file=sys.stderr, flush=True)  # noqa: E731
    wall = time.perf_counter()
    results = {"machine": {"python": platform.python_version(), "cpus": os.cpu_count(), "platform": platform.platform()},
               "settings": vars(args), "train_options": TRAIN_OPTIONS, "load_start": load(),
               "end_to_end": [], "floor": [], "reading": None, "help": []}
    with tempfile.TemporaryDirectory(prefix="lintext-bench-e2e-") as tmp:
        folder = Path(tmp)
        corpora = {}
        for name in args.corpora.split(","):
            log(f"writing the {name} corpus")
            corpora[name] = large_corpus(folder) if name == "large" else fortunes_corpus(folder, log)
        log("start-up: --help timings")
        results["help"] = help_timings(args.help_runs)
        if "large" in corpora:
            log("reading the large CSV")
            results["reading"] = reading(corpora["large"]["all"])
        if not args.skip_end_to_end:
            for name, corpus in corpora.items():
                log(f"end to end: {name}")
                results["end_to_end"].append(end_to_end(name, corpus, args.repeats, folder, log))
        if not args.skip_floor:
            for name, corpus in corpora.items():
                results["floor"] += floor_table(name, corpus, args.epochs, log)
    return finish(results, "lintext end-to-end benchmark", table, Path(args.out), wall)


if __name__ == "__main__":
    sys.exit(main())
