#!/usr/bin/env python3
"""Successive halving against the full grid: the same best configuration, in how much of the time?

For each corpus (the demo corpus with its dev file; fortunes, from Debian's fortunes package built by
../shared/tools/fortunes_corpus.sh, with a tenth held out), featurizes once into a feature store and
runs the default sweep (sgd, adagrad, adam over 1e-4 .. 1, 50 epochs, patience 5) over it with the
full grid and with ``halving=3``, alternating (full, halving, full, halving, ...) ``--repeat`` times;
the fastest of each is kept. Target: the best run of halving is the full grid's, or one within
0.005 dev macro-F1 of it, in at most 0.4 x the full grid's wall time. Workers: 2 processes.

    python scripts/bench_halving.py [--repeat 2 --workers 2]

Prints a table and writes bench-results/halving.json. Other processes on the machine slow both
sweeps; the load average is printed before and after.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from bench_common import FORTUNES_TSV, fortunes_csv  # noqa: E402
from lintext.from_store import featurize  # noqa: E402
from lintext.tuning.sweep import sweep  # noqa: E402

WORK = Path("/tmp/lintext-bench/halving")


def best_of(result) -> dict:
    row = result.rows[result.best]
    return {"optimizer": row["optimizer"], "learning_rate": row["learning_rate"], "dev_loss": row["dev_loss"],
            "dev_macro_f1": row["dev_macro_f1"], "epochs_trained": sum(r["epochs_run"] for r in result.rows)}


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=2)
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--factor", type=int, default=3)
    args = parser.parse_args()
    cases = [("demo", ROOT / "data/demo/train.csv", ROOT / "data/demo/dev.csv")]
    if FORTUNES_TSV.exists():
        cases.append(("fortunes", fortunes_csv(WORK), None))
    else:
        print(f"{FORTUNES_TSV} missing: run ../shared/tools/fortunes_corpus.sh for the second corpus", flush=True)
    report = {"load_average_before": os.getloadavg(), "cpus": os.cpu_count(), "factor": args.factor, "cases": []}
    print(f"load average {os.getloadavg()[0]:.2f} on {os.cpu_count()} cores", flush=True)
    for name, data, dev in cases:
        store = featurize(data, WORK / name, dev=dev)
        sweep(store.path, workers=args.workers, optimizers="sgd,adagrad,adam", learning_rates=[0.1],
              options={"epochs": 1})  # warm-up: worker processes and compiled kernels loaded
        times = {"full": [], "halving": []}
        results = {}
        for _ in range(args.repeat):
            for how, halving in (("full", None), ("halving", args.factor)):
                started = time.perf_counter()
                results[how] = sweep(store.path, workers=args.workers, halving=halving)
                times[how].append(time.perf_counter() - started)
        full, halved = best_of(results["full"]), best_of(results["halving"])
        case = {"corpus": name, "full_seconds": round(min(times["full"]), 2), "halving_seconds": round(min(times["halving"]), 2),
                "ratio": round(min(times["halving"]) / min(times["full"]), 3), "full_best": full, "halving_best": halved,
                "same_best": (full["optimizer"], full["learning_rate"]) == (halved["optimizer"], halved["learning_rate"]),
                "macro_f1_gap": round(full["dev_macro_f1"] - halved["dev_macro_f1"], 4),
                "rungs": results["halving"].settings["halving"]["rungs"], "all_seconds": times}
        report["cases"].append(case)
        print(f"{name:9s} full grid {case['full_seconds']:6.1f} s ({full['epochs_trained']} epochs), best {full['optimizer']} "
              f"{full['learning_rate']:g} (dev macro-F1 {full['dev_macro_f1']:.4f}); halving {case['halving_seconds']:6.1f} s "
              f"({halved['epochs_trained']} epochs), best {halved['optimizer']} {halved['learning_rate']:g} "
              f"({halved['dev_macro_f1']:.4f}); time ratio {case['ratio']:.2f} (target <= 0.4)", flush=True)
    report["load_average_after"] = os.getloadavg()
    out = ROOT / "bench-results"
    out.mkdir(exist_ok=True)
    (out / "halving.json").write_text(json.dumps(report, indent=2) + "\n")
    print(f"load average after {os.getloadavg()[0]:.2f}; written to {out / 'halving.json'}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
