#!/usr/bin/env python3
"""Does a parallel sweep pay? Wall time of the default sweep with 2 jobs and with 1 job.

Runs ``lintext.sweep.sweep`` on the demo corpus (default grid: sgd, adagrad, adam over
1e-4 .. 1, every other option at its default) with ``--jobs`` workers and with one,
``--repeat`` times each in alternation (2, 1, 2, 1, ...), and prints the wall times, the
ratio of the fastest of each (target: parallel <= 0.6 x sequential on two cores), and
whether every sweep agrees with the first: the same table except its timing columns, the
same per-epoch histories except their ``seconds``, and bit-identical weights for the best
run. Writes JSON to ``bench-results/sweep.json``.

Before timing, a warm-up sweep (one epoch, every optimizer of the grid) runs with one job
and with ``--jobs`` jobs, so numba's compiled kernels are loaded from its cache (or
compiled) in this process and in the worker processes, which joblib keeps alive for the
timed sweeps: compile time and worker start-up are not counted.

Other processes on the machine slow the parallel sweep most (its workers want every
core), so the script also prints, for every sweep, the processor time its runs used and
the processor time every other process on the machine used meanwhile (from /proc/stat);
the ratio in the quietest pair of sweeps (a parallel one and the sequential one right
after it); and a modelled ratio for idle cores: the sequential sweep's processor time per
run dispatched in the sweep's order to the workers, plus its time outside the runs.

    python scripts/bench_sweep.py [--train data/demo/train.csv --dev data/demo/dev.csv --jobs 2 --repeat 2]
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from lintext.files import atomic_file  # noqa: E402
from lintext.tuning.sweep import DEFAULT_LEARNING_RATES, DEFAULT_OPTIMIZERS, TIMINGS, sweep  # noqa: E402

TARGET = 0.6


def comparable(result) -> list:
    rows = [{k: v for k, v in row.items() if k not in TIMINGS} for row in result.rows]
    histories = [[{k: v for k, v in h.items() if k != "seconds"} for h in hist] for hist in result.histories]
    return [rows, histories, result.best]


def machine_busy_seconds() -> float | None:
    """Processor time used by every process on the machine so far (Linux /proc/stat), or None."""
    try:
        with open("/proc/stat") as fh:
            fields = [int(v) for v in fh.readline().split()[1:]]
    except (OSError, ValueError):
        return None
    user, nice, system, idle, iowait, irq, softirq, steal = (fields + [0] * 8)[:8]
    return (user + nice + system + irq + softirq + steal) / os.sysconf("SC_CLK_TCK")


def list_schedule(seconds: list[float], order: list[int], workers: int) -> float:
    """Finish time of runs taken in ``order`` by the first free of ``workers`` (joblib's dispatch with batch_size=1)."""
    free = [0.0] * workers
    for i in order:
        k = free.index(min(free))
        free[k] += seconds[i]
    return max(free)


def same_weights(a, b) -> bool:
    return (a.model is not None and b.model is not None and np.array_equal(a.model.coef, b.model.coef)
            and np.array_equal(a.model.intercept, b.model.intercept))


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--train", default=str(ROOT / "data/demo/train.csv"))
    parser.add_argument("--dev", default=str(ROOT / "data/demo/dev.csv"))
    parser.add_argument("--jobs", type=int, default=2)
    parser.add_argument("--repeat", type=int, default=2)
    parser.add_argument("--out", default=str(ROOT / "bench-results/sweep.json"))
    args = parser.parse_args()

    print(f"warm-up: one-epoch sweeps with 1 and {args.jobs} jobs (numba cache loaded or compiled, "
          "workers started) -- not timed", flush=True)
    for jobs in (1, args.jobs):
        sweep(args.train, dev=args.dev, workers=jobs, learning_rates=[0.1], options={"epochs": 1})

    print(f"timing the default sweep ({len(DEFAULT_OPTIMIZERS)} optimizers x {len(DEFAULT_LEARNING_RATES)} "
          f"learning rates), {args.repeat} time(s) each way", flush=True)
    load_before = os.getloadavg()
    times = {args.jobs: [], 1: []}
    cpu = {args.jobs: [], 1: []}
    others = {args.jobs: [], 1: []}
    results, serial_runs = [], []
    for _ in range(args.repeat):
        for jobs in (args.jobs, 1):
            busy, own, started = machine_busy_seconds(), time.process_time(), time.perf_counter()
            result = sweep(args.train, dev=args.dev, workers=jobs)
            wall = time.perf_counter() - started
            times[jobs].append(wall)
            cpu[jobs].append(sum(r["cpu_seconds"] for r in result.rows))
            # processor time of everything else on the machine meanwhile (approximate: the
            # workers' time outside their runs counts as "else")
            other = None if busy is None else machine_busy_seconds() - busy - (time.process_time() - own) - (
                cpu[jobs][-1] if jobs > 1 else 0.0)
            others[jobs].append(other)
            results.append(result)
            if jobs == 1:
                serial_runs.append((wall, result))
            busy_text = "" if other is None else f", other processes used {max(other, 0):.1f} s ({max(other, 0) / wall:.0%} of a core)"
            print(f"  {jobs} job(s): {wall:.1f} s wall, runs used {cpu[jobs][-1]:.1f} s of processor time{busy_text}", flush=True)
    load_after = os.getloadavg()
    # The quietest pair: a parallel sweep and the sequential one right after it, with the least
    # processor time taken by other processes during the two.
    pairs = list(zip(times[args.jobs], times[1], others[args.jobs], others[1]))
    quiet = min(pairs, key=lambda p: (p[2] or 0) + (p[3] or 0))
    quiet_ratio = quiet[0] / quiet[1]

    reference = comparable(results[0])
    identical_tables = all(comparable(r) == reference for r in results[1:])
    identical_weights = all(same_weights(results[0], r) for r in results[1:])
    t_parallel, t_serial = min(times[args.jobs]), min(times[1])
    ratio = t_parallel / t_serial
    first = results[0]
    best = first.rows[first.best] if first.best is not None else None
    # What idle cores would give: the fastest one-job sweep's processor time per run, dispatched
    # in the sweep's order (smallest learning rate first) to the workers, plus the part of that
    # sweep outside the runs (reading, featurizing, choosing and evaluating the best run).
    serial = min(serial_runs, key=lambda pair: pair[0])[1]
    run_cpu = [r["cpu_seconds"] for r in serial.rows]
    outside = t_serial - sum(r["seconds"] for r in serial.rows)
    order = sorted(range(len(serial.rows)), key=lambda i: (serial.rows[i]["learning_rate"], i))
    modelled = (outside + list_schedule(run_cpu, order, args.jobs)) / (outside + sum(run_cpu))

    print()
    print(f"{'':34}{'1 job':>10}{f'{args.jobs} jobs':>10}")
    print(f"{'wall time, fastest (s)':34}{t_serial:10.1f}{t_parallel:10.1f}")
    print(f"{'processor time of the runs (s)':34}{min(cpu[1]):10.1f}{min(cpu[args.jobs]):10.1f}")
    print(f"ratio {args.jobs} jobs / 1 job: {ratio:.3f} (target <= {TARGET}) -> {'met' if ratio <= TARGET else 'NOT met'}")
    print(f"ratio in the quietest pair of sweeps: {quiet[0]:.1f} / {quiet[1]:.1f} s = {quiet_ratio:.3f} "
          f"(other processes used {max(quiet[2] or 0, 0) + max(quiet[3] or 0, 0):.1f} s meanwhile)")
    print(f"modelled ratio on idle cores (measured processor time per run, dispatched in sweep order): {modelled:.3f}")
    print(f"identical tables except timings: {'yes' if identical_tables else 'NO'}; "
          f"identical best weights: {'yes' if identical_weights else 'NO'}")
    if best:
        print(f"best run: {best['optimizer']} at learning rate {best['learning_rate']:g} "
              f"(dev loss {best['dev_loss']:.4f}, epoch {best['best_epoch']})")
    print(f"load average before / after: {load_before[0]:.2f} / {load_after[0]:.2f} on {os.cpu_count()} cores")

    record = {
        "benchmark": "sweep", "train": args.train, "dev": args.dev, "jobs": args.jobs, "repeat": args.repeat,
        "cores": os.cpu_count(), "python": platform.python_version(),
        "grid": {"optimizers": list(DEFAULT_OPTIMIZERS), "learning_rates": list(DEFAULT_LEARNING_RATES)},
        "seconds_1_job": [round(t, 3) for t in times[1]], f"seconds_{args.jobs}_jobs": [round(t, 3) for t in times[args.jobs]],
        "cpu_seconds_1_job": [round(t, 3) for t in cpu[1]], f"cpu_seconds_{args.jobs}_jobs": [round(t, 3) for t in cpu[args.jobs]],
        "ratio_of_fastest": round(ratio, 4), "target_ratio": TARGET, "target_met": ratio <= TARGET,
        "modelled_ratio_idle_cores": round(modelled, 4), "ratio_quietest_pair": round(quiet_ratio, 4),
        "other_processes_cpu_seconds_1_job": others[1], f"other_processes_cpu_seconds_{args.jobs}_jobs": others[args.jobs],
        "identical_tables": identical_tables, "identical_best_weights": identical_weights, "best": best,
        "rows": first.rows, "load_average_before": load_before, "load_average_after": load_after,
        "warm_up": "numba cache loaded/compiled and workers started before timing",
    }
    atomic_file(Path(args.out), lambda fh: (json.dump(record, fh, indent=2), fh.write("\n")))
    print(f"written to {args.out}")
    return 0 if identical_tables and identical_weights else 1


if __name__ == "__main__":
    sys.exit(main())
