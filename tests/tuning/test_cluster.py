"""Sweeps and featurizing on a Dask cluster: the same results as on this machine, a lost worker's run
retried, and a one-line error without Dask.

Reference for every result: the same sweep or featurize run locally (lintext's own, itself checked
against scikit-learn elsewhere). The clusters are ``distributed.LocalCluster`` with two worker
processes listening on 127.0.0.1 only, started by the test and always closed by it.
"""

from __future__ import annotations

import os
import signal
import sys

import numpy as np
import pytest
from typer.testing import CliRunner

from lintext.cli import app
from lintext.errors import ConfigError
from lintext.from_store import featurize
from lintext.tuning.sweep import sweep
from tests.conftest import DEMO

GRID = dict(optimizers="sgd,adagrad", learning_rates=[0.01, 0.3, 3.0])
OPTIONS = {"epochs": 6, "patience": 2}


def comparable(result):
    rows = [{k: v for k, v in row.items() if k not in ("seconds", "cpu_seconds", "attempts")} for row in result.rows]
    histories = [[{k: v for k, v in h.items() if k != "seconds"} for h in hist] for hist in result.histories]
    return rows, histories, result.best


@pytest.fixture(scope="module")
def cluster():
    distributed = pytest.importorskip("distributed")
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                                  dashboard_address=None, silence_logs=50) as local:
        with distributed.Client(local, set_as_default=False) as client:
            yield local, client


@pytest.mark.slow
def test_cluster_sweep_gives_the_local_table_and_weights(cluster, small_split):
    local_cluster, _ = cluster
    here = sweep(small_split["train"], dev=small_split["dev"], workers=1, options=OPTIONS, **GRID)
    there = sweep(small_split["train"], dev=small_split["dev"], cluster=local_cluster.scheduler_address,
                  options=OPTIONS, **GRID)
    assert comparable(here) == comparable(there)
    assert np.array_equal(here.model.coef, there.model.coef) and np.array_equal(here.model.intercept, there.model.intercept)
    assert there.settings["cluster"]["workers"] == 2 and there.settings["cluster"]["data"] == "shared folder"
    assert all(r["attempts"] == 1 for r in there.rows)


@pytest.mark.slow
def test_cluster_sweep_with_halving_over_a_sharded_store(cluster, small_split, tmp_path):
    local_cluster, client = cluster
    featurize(small_split["train"], tmp_path / "s", dev=small_split["dev"], shard_rows=40)  # 3 shards, read one by one
    kwargs = dict(optimizers="sgd,adam", learning_rates=[0.01, 0.3, 3.0], options={"epochs": 4, "patience": 2}, halving=2)
    here = sweep(tmp_path / "s", workers=2, **kwargs)
    events = []
    there = sweep(tmp_path / "s", cluster=client, progress=events.append, **kwargs)
    assert comparable(here) == comparable(there)
    # One event per run trained in each rung (the bracket as run), the run's own, with the tasks still
    # running or queued; no second event for the same run.
    runs = [e for e in events if "row" in e]
    rungs = there.settings["halving"]["rungs"]
    assert [e["stage"] for e in runs] == ["run"] * sum(len(r["runs"]) for r in rungs)
    assert [(e["rung"], e["done"], e["total"]) for e in runs] == \
        [(k + 1, done, len(r["runs"])) for k, r in enumerate(rungs) for done in range(1, len(r["runs"]) + 1)]
    assert all(e["running"] + e["queued"] == e["total"] - e["done"] and min(e["running"], e["queued"]) >= 0 for e in runs)
    assert any(r["status"].startswith("pruned at epoch") for r in there.rows)
    assert np.array_equal(here.model.coef, there.model.coef)


@pytest.mark.slow
def test_a_worker_lost_mid_sweep_is_retried_and_the_table_is_complete(cluster, small_split):
    local_cluster, client = cluster
    killed = []

    def kill_first(event):  # the first run to start: its worker process is killed at once (the nanny restarts it)
        _, message = event
        if not killed:
            killed.append(message["run"])
            os.kill(message["pid"], signal.SIGKILL)

    import lintext.tuning.cluster as cluster_module

    original = cluster_module.ClusterRunner._started

    def started(self, event):
        original(self, event)
        kill_first(event)

    cluster_module.ClusterRunner._started = started
    try:
        options = {"epochs": 30, "patience": 0}  # long enough that the run is still going when the kill lands
        there = sweep(small_split["train"], dev=small_split["dev"], cluster=client, options=options, **GRID)
    finally:
        cluster_module.ClusterRunner._started = original
    here = sweep(small_split["train"], dev=small_split["dev"], workers=1, options=options, **GRID)
    assert killed and len(there.rows) == 6
    assert comparable(here) == comparable(there)
    assert there.rows[killed[0]]["attempts"] == 2
    assert all(r["attempts"] == 1 for r in there.rows if r["run"] != killed[0])


@pytest.mark.slow
def test_featurize_on_the_cluster_writes_the_local_store(cluster, tmp_path):
    from lintext.tuning.cluster import featurize_mapper
    from lintext.text.config import FeaturizerConfig

    local_cluster, _ = cluster
    config = FeaturizerConfig(hash_space=2**14)
    here = featurize(DEMO / "train.csv", tmp_path / "here", featurizer=config, shard_rows=700)
    with featurize_mapper(local_cluster.scheduler_address, config) as mapper:
        there = featurize(DEMO / "train.csv", tmp_path / "there", featurizer=config, shard_rows=700, map_chunks=mapper)
    for part in ("data", "dev"):
        assert len(here.shards(part)) == len(there.shards(part))
        for k in range(len(here.shards(part))):
            a, b = here.load_shard(part, k), there.load_shard(part, k)
            assert (a.X != b.X).nnz == 0 and np.array_equal(a.labels, b.labels) and np.array_equal(a.records, b.records)
    assert np.array_equal(here.featurizer.document_frequency, there.featurizer.document_frequency)


def test_without_dask_cluster_says_how_to_install(small_split, tmp_path, monkeypatch):
    monkeypatch.setitem(sys.modules, "distributed", None)  # import distributed -> ImportError
    with pytest.raises(ConfigError, match=r"pip install 'lintext\[cluster\]'"):
        sweep(small_split["train"], dev=small_split["dev"], cluster="tcp://127.0.0.1:8786", workers=1)
    result = CliRunner().invoke(app, ["sweep", str(small_split["train"]), "--out", str(tmp_path / "x"),
                                      "--cluster", "tcp://127.0.0.1:8786"])
    assert result.exit_code == 2
    assert result.output.strip().splitlines() == [
        "error: --cluster='tcp://127.0.0.1:8786': needs Dask (distributed), an optional extra: pip install 'lintext[cluster]'"]
    assert not (tmp_path / "x").exists()


def test_featurize_on_a_cluster_needs_hashing(small_split, tmp_path):
    result = CliRunner().invoke(app, ["featurize", str(small_split["train"]), "--out", str(tmp_path / "s"),
                                      "--cluster", "tcp://127.0.0.1:8786"])
    assert result.exit_code == 2 and "hashing mode only" in result.output and not (tmp_path / "s").exists()
