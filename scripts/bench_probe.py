#!/usr/bin/env python3
"""The learning-rate probe against brute force: its suggestion beside the best rate of full runs.

For each corpus and each of sgd, adagrad and adam (every other option at lintext's defaults):

* **Sweep.** Full training runs (the command line's defaults: up to 50 epochs, early stopping
  on the dev loss with patience 5) at every rate ``10 ** (j / 4)`` from 0.001 to 100, the
  probe's own ladder; the best rate by dev loss (what ``lintext sweep`` ranks by), and the
  rates within 5 % of the best dev loss.
* **Probe.** ``probe_learning_rate`` with each of ``--steps`` rungs lengths and ``--seeds``
  seeds: verdicts, upper bounds and suggestions; how far the upper bound moves between seeds
  (in rungs); and the dev loss of a full run at the suggested rate relative to the best
  (``excess``: 0 % when the suggestion is the sweep's best rate), and the same for the best of
  the four rates the probe's advice proposes to sweep (two and four rungs below the
  suggestion, the suggestion, the upper bound).

Corpora: the demo corpus (``data/demo``: train.csv, dev.csv), fortunes
(``../shared/tools/fortunes_corpus.sh``: Debian's fortunes, about 15,000 texts and 43
labels, a stratified 10 % held out as dev) and a synthetic one (``make_synth.make_corpus``:
8,000 texts, 30,000 invented words, 20 labels, 10 % dev), each featurized with the default
featurizer through ``lintext.pipeline.prepare_data``.

Prints one table per section and writes every number to ``bench-results/probe.json``.
The probe's timings are wall-clock and depend on the machine's load (recorded).

    .venv/bin/python scripts/bench_probe.py [--corpora demo,fortunes,synthetic] [--steps 10,20,40,80] [--seeds 5]
"""

from __future__ import annotations

import argparse
import json
import math
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
sys.path.insert(0, str(HERE))
sys.path.insert(0, str(ROOT))

import numpy as np  # noqa: E402

from bench_common import fortunes_rows, load, write_csv  # noqa: E402
from lintext.engine.options import TrainOptions  # noqa: E402
from lintext.engine.trainer import fit  # noqa: E402
from lintext.errors import DivergenceError  # noqa: E402
from lintext.pipeline import prepare_data  # noqa: E402
from lintext.tuning.ladder import DEFAULT_STEPS_PER_RUNG, ladder_index, ladder_rate  # noqa: E402
from lintext.tuning.probe import probe_learning_rate  # noqa: E402
from make_synth import make_corpus  # noqa: E402

OUT = ROOT / "bench-results" / "probe.json"
OPTIMIZERS = ("sgd", "adagrad", "adam")
GRID = range(-12, 9)  # ladder indices: rates 0.001 .. 100
NEAR_BEST = 0.05
ADVISED = (-4, -2, 0, 2)  # rungs relative to the suggestion in the probe's advice


def corpus(name: str, folder: Path):
    """The prepared data of one corpus (train rows, dev rows, labels)."""
    if name == "demo":
        return prepare_data(ROOT / "data" / "demo" / "train.csv", ROOT / "data" / "demo" / "dev.csv")
    if name == "fortunes":
        rows = [(text, label) for text, label, _ in fortunes_rows()]
        return prepare_data(write_csv(folder / "fortunes.csv", rows), None, 0.1)
    texts, labels = make_corpus(documents=8000, features=30000, labels=20, seed=0)
    return prepare_data(write_csv(folder / "synthetic.csv", zip(texts, labels)), None, 0.1)


def sweep_grid(data, optimizer: str) -> dict:
    """Best dev loss of a full default run at every grid rate (None where the run diverged)."""
    losses = {}
    for j in GRID:
        try:
            run = fit(data.X, data.y, len(data.labels), data.X_dev, data.y_dev,
                      TrainOptions(optimizer=optimizer, learning_rate=ladder_rate(j)))
            losses[j] = float(run.history[run.best_epoch - 1]["dev_loss"])
        except DivergenceError:
            losses[j] = None
    return losses


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--corpora", default="demo,fortunes,synthetic")
    parser.add_argument("--steps", default=f"10,20,{DEFAULT_STEPS_PER_RUNG},80", help="rung lengths to compare")
    parser.add_argument("--seeds", type=int, default=5)
    args = parser.parse_args()
    steps_list = [int(s) for s in args.steps.split(",")]
    results = {"load_before": load(), "cases": []}
    print(f"load average {results['load_before']}")
    with tempfile.TemporaryDirectory(prefix="lintext-bench-probe-") as tmp:
        for name in args.corpora.split(","):
            data = corpus(name, Path(tmp))
            for optimizer in OPTIMIZERS:
                grid = sweep_grid(data, optimizer)
                finite = {j: v for j, v in grid.items() if v is not None}
                best_j = min(finite, key=finite.get)
                near = [j for j, v in finite.items() if v <= (1 + NEAR_BEST) * finite[best_j]]
                case = {"corpus": name, "optimizer": optimizer, "labels": len(data.labels),
                        "sweep": {ladder_rate(j): v for j, v in grid.items()}, "best_rate": ladder_rate(best_j),
                        "best_dev_loss": finite[best_j], "near_best": [ladder_rate(min(near)), ladder_rate(max(near))],
                        "probes": []}
                for steps in steps_list:
                    for seed in range(args.seeds):
                        started = time.perf_counter()
                        result = probe_learning_rate(data.X, data.y, len(data.labels),
                                                     {"optimizer": optimizer, "seed": seed}, steps_per_rung=steps)
                        seconds = time.perf_counter() - started
                        s = result.suggested_rate
                        excess = advised = None
                        if s is not None and finite.get(ladder_index(s)) is not None:
                            excess = finite[ladder_index(s)] / finite[best_j] - 1
                            # the sweep the probe's advice proposes: two and four rungs below, the upper bound
                            tried = [finite[ladder_index(s) + k] for k in ADVISED if finite.get(ladder_index(s) + k)]
                            advised = min(tried) / finite[best_j] - 1
                        case["probes"].append({"steps_per_rung": steps, "seed": seed, **result.summary(),
                                               "excess": excess, "advised_sweep_excess": advised, "seconds": seconds})
                results["cases"].append(case)
                report(case, steps_list)
    results["load_after"] = load()
    summarise(results, steps_list)
    OUT.parent.mkdir(parents=True, exist_ok=True)
    OUT.write_text(json.dumps(results, indent=1) + "\n", encoding="utf-8")
    print(f"load average {results['load_after']}; written to {OUT}")


def report(case: dict, steps_list) -> None:
    print(f"\n{case['corpus']} / {case['optimizer']}: sweep best {case['best_rate']:.3g} (dev loss "
          f"{case['best_dev_loss']:.4f}), within {NEAR_BEST:.0%}: {case['near_best'][0]:.3g} .. {case['near_best'][1]:.3g}")
    for steps in steps_list:
        runs = [p for p in case["probes"] if p["steps_per_rung"] == steps]
        uppers = [ladder_index(p["upper_bound"]) for p in runs if p["upper_bound"]]
        excess = [p["excess"] for p in runs if p["excess"] is not None]
        suggested = sorted({f"{p['suggested_rate']:.3g}" for p in runs if p["suggested_rate"]}, key=float)
        advised = [p["advised_sweep_excess"] for p in runs if p["advised_sweep_excess"] is not None]
        print(f"  {steps:3d} steps: {len(uppers)}/{len(runs)} suggested, upper bound spread "
              f"{(max(uppers) - min(uppers)) if uppers else '-'} rungs, suggestions {','.join(suggested) or '-'}, "
              f"excess at the suggestion median {np.median(excess) if excess else math.nan:.1%} "
              f"(max {max(excess) if excess else math.nan:.1%}), of the advised 4-rate sweep max "
              f"{max(advised) if advised else math.nan:.1%}, {np.mean([p['seconds'] for p in runs]):.2f} s each")


def summarise(results: dict, steps_list) -> None:
    print("\nsteps  suggested  mean spread (rungs)  median excess  cases near best  advised sweep: worst excess")
    for steps in steps_list:
        spreads, excesses, near, total, suggested, advised = [], [], 0, 0, 0, []
        for case in results["cases"]:
            runs = [p for p in case["probes"] if p["steps_per_rung"] == steps]
            uppers = [ladder_index(p["upper_bound"]) for p in runs if p["upper_bound"]]
            total += len(runs)
            suggested += len(uppers)
            if uppers:
                spreads.append(max(uppers) - min(uppers))
            ex = [p["excess"] for p in runs if p["excess"] is not None]
            advised += [p["advised_sweep_excess"] for p in runs if p["advised_sweep_excess"] is not None]
            if ex:
                excesses.append(float(np.median(ex)))
                near += np.median(ex) <= NEAR_BEST
        print(f"{steps:5d}  {suggested:4d}/{total:<4d}  {np.mean(spreads):19.2f}  {np.median(excesses):13.1%}  "
              f"{near:8d}/{len(results['cases']):<6d}  {max(advised) if advised else math.nan:.1%}")


if __name__ == "__main__":
    main()
