#!/usr/bin/env python3
"""Featurizing throughput: lintext's Featurizer against scikit-learn, side by side in one run.

On a synthetic corpus (``make_synth.make_corpus``, 200,000 short texts by
default) and on the real fortunes corpus, times

* scikit-learn ``CountVectorizer(ngram_range=(1, 2)).fit_transform`` (the reference),
* lintext ``Featurizer`` with the same features (word 1-2-grams, raw counts,
  no normalisation) in one pass (``n_jobs=1``) and chunked over worker
  processes (``n_jobs=2``), plus the chunked counting run in this process only
  (a diagnostic separating the per-core gain from the parallel gain),
* the default lintext configuration (tf-idf, unit rows) against scikit-learn's
  ``TfidfVectorizer`` with the same options,
* ``transform`` of the same texts with the fitted vocabulary,

checks that the matrices, vocabularies and document frequencies are
identical, prints one table and writes the same numbers to
``bench-results/features.json``.  Each timing is the best of ``--repeats``
runs (median and every run also recorded); the runs go round-robin over the
cases so that load from other processes falls on all cases alike.  The worker pool is started before timing; its
start-up cost is reported separately as ``cold_start_seconds``.  Because the
machine may be shared, one more chunked fit per corpus records CPU seconds in
this process and in each worker (``cpu_accounting_count_chunked``).

    .venv/bin/python scripts/bench_features.py [--documents 200000] [--repeats 3] [--jobs 2]
"""

from __future__ import annotations

import argparse
import gc
import os
import platform
import statistics
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
sys.path.insert(0, str(HERE))
sys.path.insert(0, str(ROOT))

import numpy as np  # noqa: E402
import scipy.sparse as sp  # noqa: E402
import sklearn  # noqa: E402
from joblib import delayed  # noqa: E402
from sklearn.feature_extraction.text import CountVectorizer, TfidfVectorizer  # noqa: E402

from bench_common import FORTUNES_TSV, fortunes_rows, load, write_results  # noqa: E402
from lintext.text.featurizer import PARALLEL_MIN_DOCS, Featurizer, FeaturizerConfig  # noqa: E402
from make_synth import make_corpus  # noqa: E402

COUNT = FeaturizerConfig(ngrams=(1, 2), min_df=1, weighting="count", normalize=False)  # = CountVectorizer((1, 2))
DEFAULT = FeaturizerConfig()


def default_reference():
    """scikit-learn's TfidfVectorizer with the options of lintext's default configuration."""
    c = DEFAULT
    return TfidfVectorizer(ngram_range=c.ngrams, min_df=c.min_df, max_df=c.max_df, max_features=c.max_features,
                           lowercase=c.lowercase, norm="l2" if c.normalize else None,
                           sublinear_tf=c.weighting == "log-tfidf")  # log-tfidf: 1 + ln tf


def timed_round_robin(cases, repeats, log):
    """Time every case ``repeats`` times, one case after the other in each round, so that
    load from other processes spreads over all cases alike.  Returns, per label, the
    seconds and load average after every run, and the result of the last run."""
    seconds = {label: [] for label, _ in cases}
    loads = {label: [] for label, _ in cases}
    results = {}
    for round_ in range(repeats):
        for label, fn in cases:
            log(f"    round {round_ + 1}/{repeats}: {label}")
            results[label] = None
            gc.collect()
            started = time.perf_counter()
            results[label] = fn()
            seconds[label].append(time.perf_counter() - started)
            loads[label].append(load())  # 1-minute load average after the run
    return seconds, loads, results


def canonical(X) -> sp.csr_matrix:
    X = sp.csr_matrix(X, dtype=np.float64, copy=True)  # never sort the caller's shared index arrays
    X.sum_duplicates()
    X.sort_indices()
    return X


def identical(A, B) -> bool:
    """Same shape, same stored entries, same values, bit for bit."""
    A, B = canonical(A), canonical(B)
    return (
        A.shape == B.shape
        and np.array_equal(A.indptr, B.indptr)
        and np.array_equal(A.indices, B.indices)
        and np.array_equal(A.data, B.data)
    )


def max_abs_diff(A, B) -> float:
    D = canonical(A) - canonical(B)
    return float(abs(D).max()) if D.nnz else 0.0


def _timed_in_worker(fn, *args):
    started = time.process_time()
    return fn(*args), time.process_time() - started


def cpu_accounting(config, texts, jobs) -> dict:
    """CPU seconds of one chunked fit_transform: this process, and each worker's counting.

    With other programs busy on the machine, wall-clock ratios of the parallel
    rows understate what the code does on free cores; this records where the
    work goes (``main`` is serial: merging, names, weighting, pickling)."""
    import lintext.text.featurizer as features

    run, worker = features.run_parallel, []

    def accounted(tasks, n_jobs):
        out = run([delayed(_timed_in_worker)(fn, *args) for fn, args, _ in tasks], n_jobs)
        worker.extend(seconds for _, seconds in out)
        return [result for result, _ in out]

    features.run_parallel = accounted
    try:
        started = time.process_time()
        Featurizer(config, n_jobs=jobs, parallel_min_docs=0).fit_transform(texts)
        main = time.process_time() - started
    finally:
        features.run_parallel = run
    return {"main_cpu_seconds": main, "worker_cpu_seconds": worker,
            "free_cores_estimate_seconds": main + max(worker) if worker else main}


def chunked_in_process(config, texts):
    """Diagnostic: the chunked counting with a single chunk in this process (no workers)."""
    featurizer = Featurizer(config)
    return featurizer, featurizer._weight(featurizer._fit_chunked(list(texts), 1))


def bench_corpus(name, texts, jobs, repeats, log):
    n = len(texts)
    sk_count = "scikit-learn CountVectorizer(1-2)"
    sk_tfidf = f"scikit-learn TfidfVectorizer(1-2, min_df={DEFAULT.min_df})"
    sk_transform = "scikit-learn CountVectorizer.transform"

    def fit(make):
        return lambda: (lambda f: (f, f.fit_transform(texts)))(make())

    fits = [  # (label, reference, function)
        (sk_count, None, fit(lambda: CountVectorizer(ngram_range=(1, 2)))),
        ("lintext count, n_jobs=1", sk_count, fit(lambda: Featurizer(COUNT, n_jobs=1))),
        (f"lintext count, n_jobs={jobs}", sk_count, fit(lambda: Featurizer(COUNT, n_jobs=jobs))),
    ]
    if n < PARALLEL_MIN_DOCS:  # below the threshold n_jobs > 1 means one pass; time the chunked path too
        fits.append((f"lintext count, n_jobs={jobs}, parallel_min_docs=0", sk_count,
                     fit(lambda: Featurizer(COUNT, n_jobs=jobs, parallel_min_docs=0))))
    fits += [
        ("lintext count, chunked counting in 1 process (diagnostic)", sk_count, lambda: chunked_in_process(COUNT, texts)),
        (sk_tfidf, None, fit(default_reference)),
        ("lintext default (tf-idf), n_jobs=1", sk_tfidf, fit(lambda: Featurizer(DEFAULT, n_jobs=1))),
        (f"lintext default (tf-idf), n_jobs={jobs}", sk_tfidf,
         fit(lambda: Featurizer(DEFAULT, n_jobs=jobs, parallel_min_docs=0))),
    ]
    log(f"  {name}: fitting, {len(fits)} cases x {repeats}")
    fit_seconds, fit_loads, fitted = timed_round_robin([(label, fn) for label, _, fn in fits], repeats, log)

    sk_vec, sk_X = fitted[sk_count]
    fitted_one, fitted_par = fitted["lintext count, n_jobs=1"][0], fitted[f"lintext count, n_jobs={jobs}"][0]
    fitted_par.parallel_min_docs = 0  # transform over chunks even below the threshold
    transforms = [
        (sk_transform, None, lambda: sk_vec.transform(texts)),
        ("lintext count transform, n_jobs=1", sk_transform, lambda: fitted_one.transform(texts)),
        (f"lintext count transform, n_jobs={jobs}", sk_transform, lambda: fitted_par.transform(texts)),
    ]
    log(f"  {name}: transforming, {len(transforms)} cases x {repeats}")
    transform_seconds, transform_loads, transformed = timed_round_robin([(label, fn) for label, _, fn in transforms], repeats, log)

    checks = {}
    sk_names = sk_vec.get_feature_names_out().tolist()
    sk_df = np.bincount(canonical(sk_X).indices, minlength=sk_X.shape[1])
    for label, reference, _ in fits:
        if reference == sk_count:
            f, X = fitted[label]
            short = label.replace("lintext count, ", "")
            checks[f"count {short}: matrix identical to scikit-learn"] = identical(X, sk_X)
            checks[f"count {short}: vocabulary identical to scikit-learn"] = f.feature_names == sk_names
            checks[f"count {short}: document frequencies identical to scikit-learn"] = bool(
                np.array_equal(f.document_frequency, sk_df)
            )
    tf_one = fitted["lintext default (tf-idf), n_jobs=1"][1]
    tf_par = fitted[f"lintext default (tf-idf), n_jobs={jobs}"][1]
    checks[f"tf-idf n_jobs={jobs}: matrix identical to n_jobs=1"] = identical(tf_one, tf_par)
    checks["tf-idf n_jobs=1: max |difference| to TfidfVectorizer"] = max_abs_diff(tf_one, fitted[sk_tfidf][1])
    for label, reference, _ in transforms[1:]:
        checks[f"{label}: identical to scikit-learn"] = identical(transformed[label], transformed[sk_transform])

    rows = []
    for kind, cases, seconds, loads in (
        ("fit_transform", fits, fit_seconds, fit_loads),
        ("transform", transforms, transform_seconds, transform_loads),
    ):
        for label, reference, _ in cases:
            best = min(seconds[label])
            rows.append({
                "case": label, "kind": kind, "reference": reference, "seconds": best,
                "median_seconds": statistics.median(seconds[label]), "all_seconds": seconds[label],
                "load_after_each_run": loads[label],
                "docs_per_second": n / best,
                "speed_vs_reference": (min(seconds[reference]) / best) if reference else 1.0,
                "speed_vs_reference_median": (
                    statistics.median(seconds[reference]) / statistics.median(seconds[label]) if reference else 1.0
                ),
            })
    log(f"  {name}: CPU accounting of one chunked fit")
    accounting = cpu_accounting(COUNT, texts, jobs)
    accounting["scikit_learn_best_seconds"] = min(fit_seconds[sk_count])
    accounting["speed_vs_reference_on_free_cores"] = accounting["scikit_learn_best_seconds"] / accounting["free_cores_estimate_seconds"]
    return {"documents": n, "features": int(sk_X.shape[1]), "nonzeros": int(sk_X.nnz), "rows": rows, "checks": checks,
            "cpu_accounting_count_chunked": accounting}


def cold_start(jobs) -> float:
    """Seconds of the first chunked call in this process: starting workers that import lintext."""
    sample, _ = make_corpus(documents=2000, features=5000, seed=1)
    started = time.perf_counter()
    Featurizer(COUNT, n_jobs=jobs, parallel_min_docs=0).fit_transform(sample)
    return time.perf_counter() - started


def print_table(results):
    try:
        from rich.console import Console
        from rich.table import Table
    except ImportError:  # plain text
        Console = None
    header = ["corpus", "case", "best s", "median s", "docs/s", "speed vs", "ratio", "ratio (median)"]
    numeric = {"best s", "median s", "docs/s", "ratio", "ratio (median)"}
    lines = []
    for corpus, res in results["corpora"].items():
        for r in res["rows"]:
            lines.append([corpus, r["case"], f"{r['seconds']:.2f}", f"{r['median_seconds']:.2f}",
                          f"{r['docs_per_second']:,.0f}", r["reference"] or "-", f"{r['speed_vs_reference']:.2f}x",
                          f"{r['speed_vs_reference_median']:.2f}x"])
    if Console is not None:
        table = Table(title=f"Featurizing: best and median of {results['repeats']} runs, docs/s from the best "
                            f"(1-min load average before / after: {results['load_before']} / {results['load_after']})")
        for h in header:
            table.add_column(h, justify="right" if h in numeric else "left")
        for line in lines:
            table.add_row(*line)
        Console(width=190).print(table)
    else:
        widths = [max(len(str(x[i])) for x in lines + [header]) for i in range(len(header))]
        for line in [header] + lines:
            print("  ".join(str(v).ljust(w) for v, w in zip(line, widths)))
    for corpus, res in results["corpora"].items():
        print(f"{corpus}: {res['documents']:,} texts, {res['features']:,} features, {res['nonzeros']:,} nonzeros")
        for check, value in res["checks"].items():
            print(f"  {check}: {value}")
        acc = res["cpu_accounting_count_chunked"]
        print(f"  CPU accounting, count n_jobs={results['jobs']}: main {acc['main_cpu_seconds']:.2f} s, workers "
              f"{', '.join(f'{s:.2f}' for s in acc['worker_cpu_seconds'])} s -> on free cores about "
              f"{acc['free_cores_estimate_seconds']:.2f} s, {acc['speed_vs_reference_on_free_cores']:.2f}x scikit-learn's best")


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--documents", type=int, default=200_000, help="synthetic texts (default 200000)")
    parser.add_argument("--features", type=int, default=200_000, help="synthetic vocabulary size")
    parser.add_argument("--labels", type=int, default=50)
    parser.add_argument("--length", type=float, default=20.0, help="mean tokens per synthetic text")
    parser.add_argument("--seed", type=int, default=0)
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--jobs", type=int, default=2, help="worker processes for the parallel rows (default 2)")
    parser.add_argument("--fortunes", default=str(FORTUNES_TSV), help="fortunes TSV; built if missing")
    parser.add_argument("--skip-fortunes", action="store_true")
    parser.add_argument("--out", default=str(ROOT / "bench-results" / "features.json"))
    args = parser.parse_args(argv)

    def log(msg):
        print(msg, file=sys.stderr, flush=True)

    results = {
        "benchmark": "features",
        "repeats": args.repeats,
        "jobs": args.jobs,
        "cpu_count": os.cpu_count(),
        "python": platform.python_version(),
        "numpy": np.__version__,
        "scikit_learn": sklearn.__version__,
        "parallel_min_docs": PARALLEL_MIN_DOCS,
        "load_before": load(),
        "corpora": {},
    }
    log("starting the worker pool (cold start) ...")
    results["cold_start_seconds"] = cold_start(args.jobs)

    log(f"generating {args.documents:,} synthetic texts ...")
    started = time.perf_counter()
    texts, _ = make_corpus(args.documents, args.features, args.labels, args.length, args.seed)
    results["synthetic_generation_seconds"] = time.perf_counter() - started
    synthetic = bench_corpus("synthetic", texts, args.jobs, args.repeats, log)
    synthetic["generator"] = {"documents": args.documents, "features": args.features, "labels": args.labels,
                              "length": args.length, "seed": args.seed}
    results["corpora"]["synthetic"] = synthetic
    del texts
    if not args.skip_fortunes:
        texts = [text for text, _, _ in fortunes_rows(log, Path(args.fortunes))]
        results["corpora"]["fortunes"] = bench_corpus("fortunes", texts, args.jobs, args.repeats, log)
    results["load_after"] = load()

    print_table(results)
    out = Path(args.out)
    write_results(out, results, default=None)
    print(f"wrote {out}")
    ok = all(v is True or isinstance(v, float) and v < 1e-9 for res in results["corpora"].values() for v in res["checks"].values())
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
