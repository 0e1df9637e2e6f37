"""Sweeps and featurizing on a running Dask cluster (the optional extra: ``pip install 'lintext[cluster]'``).

``lintext sweep ... --cluster tcp://HOST:PORT`` connects a ``distributed.Client`` to a running
scheduler and submits each run of the grid (each run of a rung, with successive halving) as one
task. Workers read the rows from the path the sweep wrote them to, or from the feature store,
when they share that folder with the sweep (checked once: every worker must read back a token the
sweep wrote); otherwise the arrays are scattered to every worker once and each task receives them.
A task runs :func:`lintext.tuning.runs.train_run` with one numba thread and logs an event when it
starts; a worker lost during a run makes the scheduler run the task again elsewhere (Dask's own
rescheduling; ``distributed.scheduler.allowed-failures`` times at most), and the table's
``attempts`` column counts the starts. Runs are seeded by their options, so the table and the best
weights are those of a local sweep.

``lintext featurize --cluster`` in hashing mode maps the chunks' hashed counting (stateless) to the
workers, a few chunks in flight at a time, and writes the results in order: the same store as a
local run.
"""

from __future__ import annotations

import contextlib
import os
import re
import uuid
from collections import Counter, deque
from pathlib import Path

from ..errors import ConfigError
from .runs import RunData, train_run

INSTALL = "pip install 'lintext[cluster]'"
ADDRESS = re.compile(r"(tcp|tls)://[^\s/]+:\d+")
CONNECT_SECONDS = 10


def distributed_module(value=None):
    """``distributed``, or a one-line ConfigError saying how to install it."""
    try:
        import distributed
    except ImportError:
        raise ConfigError("--cluster", value, f"needs Dask (distributed), an optional extra: {INSTALL}") from None
    return distributed


def cluster_client(cluster):
    """A ``distributed.Client`` for an address (``tcp://host:port``); a Client is returned as it is."""
    if not isinstance(cluster, str):
        return cluster
    distributed = distributed_module(cluster)
    if not ADDRESS.fullmatch(cluster):
        raise ConfigError("--cluster", cluster, "expected a scheduler address such as tcp://127.0.0.1:8786")
    try:
        client = distributed.Client(cluster, timeout=CONNECT_SECONDS, set_as_default=False)
        client.wait_for_workers(1, timeout=CONNECT_SECONDS)
    except (OSError, TimeoutError) as exc:
        raise ConfigError("--cluster", cluster, f"no Dask scheduler with workers answers there ({type(exc).__name__})") from None
    return client


def _read_token(path: str) -> str | None:
    try:
        return Path(path).read_text(encoding="utf-8")
    except OSError:
        return None


def workers_share(client, folder: str, store_json: str | None) -> bool:
    """True when every worker reads the token written into ``folder`` (and the same ``store.json``)."""
    token = uuid.uuid4().hex
    Path(folder, "cluster-token").write_text(token, encoding="utf-8")
    seen = client.run(_read_token, str(Path(folder, "cluster-token")))
    if not seen or any(v != token for v in seen.values()):
        return False
    if store_json is not None:
        mine = _read_token(store_json)
        return all(v == mine for v in client.run(_read_token, store_json).values())
    return True


def cluster_task(topic: str, run_data: RunData, index: int, options, n_labels: int, epochs, save_to, arrays=None,
                 resume=None):
    """One run on a worker: log its start (``topic``), then :func:`train_run` with one numba thread."""
    import distributed

    worker = distributed.get_worker()
    worker.log_event(topic, {"run": index, "epochs": epochs, "worker": worker.address, "pid": os.getpid()})
    return train_run(run_data, index, options, n_labels, epochs, save_to, arrays, threads=1, resume=resume)


class ClusterRunner:
    """``runner(tasks)`` for :func:`lintext.tuning.sweep.sweep` on a Dask cluster (see the module docstring)."""

    def __init__(self, client, run_data: RunData, n_labels: int):
        self.client, self.run_data, self.n_labels = client, run_data, n_labels
        self.topic = f"lintext-runs-{uuid.uuid4().hex}"
        self.workers = len(client.scheduler_info()["workers"])
        self.address = client.scheduler.address
        rows = run_data.shards or run_data.dev_shards
        store_json = str(Path(rows.load.path, "store.json")) if rows is not None else None
        self.shared = workers_share(client, run_data.folder, store_json)
        self.arrays = None if self.shared else client.scatter([run_data.in_memory()], broadcast=True)[0]
        self.started = Counter()
        self.last_task: dict[int, tuple] = {}
        self.queue = {"running": 0, "queued": 0}  # the tasks' state when the last result came back
        client.subscribe_topic(self.topic, self._started)

    def _started(self, event) -> None:
        _, message = event
        self.started[(message["run"], message["epochs"])] += 1

    def __call__(self, tasks):
        distributed = distributed_module()
        futures, keys = [], []
        for index, options, epochs, resume in tasks:
            keys.append((index, epochs))
            self.last_task[index] = (index, epochs)
            futures.append(self.client.submit(
                cluster_task, self.topic, self.run_data, index, options, self.n_labels, epochs,
                self.run_data.folder if self.shared else None, self.arrays, resume, pure=False,
                key=f"lintext-run-{index}-{epochs}-{uuid.uuid4().hex[:8]}"))
        finished = set()
        for future in distributed.as_completed(futures, loop=self.client.loop):
            row, history, weights, checkpoint = future.result()
            future.release()
            finished.add(keys[futures.index(future)])
            running = sum(1 for k in keys if k not in finished and self.started[k] > 0)
            self.queue = {"running": running, "queued": len(keys) - len(finished) - running}
            yield row, history, weights, checkpoint

    def annotate(self, event: dict) -> dict:
        """A ``run`` event with the tasks ``running`` and ``queued`` when its run came back."""
        return {**event, **self.queue}

    def count_attempts(self, results: dict) -> None:
        """Set each row's ``attempts``: how many times its last task started (from the logged events)."""
        starts = Counter()
        for _, message in self.client.get_events(self.topic):
            starts[(message["run"], message["epochs"])] += 1
        for index, (row, *_) in results.items():
            row["attempts"] = max(1, starts[self.last_task[index]])

    def close(self) -> None:
        """Stop listening to the runs' start events."""
        self.client.unsubscribe_topic(self.topic)

    def describe(self) -> dict:
        return {"scheduler": self.address, "workers": self.workers,
                "data": "shared folder" if self.shared else "sent to every worker"}


@contextlib.contextmanager
def featurize_mapper(address, featurizer):
    """``map_chunks`` for :func:`lintext.text.streaming.featurize_store` on the cluster at ``address``
    (hashing mode only), or None without an address."""
    if address is None:
        yield None
        return
    if featurizer is None or not featurizer.hashing:
        raise ConfigError("--cluster", address, "featurize maps chunks to a cluster in hashing mode only (give --hash-space)")
    client = cluster_client(address)
    window = 2 * max(1, len(client.scheduler_info()["workers"]))

    def map_chunks(function, chunks):
        pending = deque()
        for chunk in chunks:
            pending.append(client.submit(function, chunk, pure=False))
            if len(pending) >= window:
                yield pending.popleft().result()
        while pending:
            yield pending.popleft().result()

    try:
        yield map_chunks
    finally:
        client.close()
