"""The Dask engine on a real local cluster of two worker processes: the same model, array for array.

Reference: `NaiveBayes.fit` on all items in one process (the definition the cluster must reproduce), the
in-process engine for out-of-fold scores, training and routing in this process for the application-level
checks, and pyarrow reading back the Parquet decisions. One cluster serves the whole module (a start costs
seconds).
"""

from __future__ import annotations

import json
import re
import socket
from pathlib import Path

import numpy as np
import pyarrow.parquet as pq
import pytest

from demo_corpus.generate import generate
from triage.config import load_config
from triage.core.model import ModelSpec, NaiveBayes
from triage.engine import InProcessEngine
from triage.engine.history import History
from triage.ingest import read_items

distributed = pytest.importorskip("dask.distributed")

import dask.config  # noqa: E402

from tests.helpers import build_demo_workspace, copy_workspace  # noqa: E402
from tests.test_engine import assert_same_model  # noqa: E402
from triage.app import Workspace  # noqa: E402
from triage.cli import main  # noqa: E402
from triage.engine.cluster import DaskEngine  # noqa: E402

ROOT = Path(__file__).resolve().parent.parent
CONFIG = load_config(ROOT / "configs" / "voltwren.toml")


@pytest.fixture(scope="module")
def engine():
    cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None,
                                       host="127.0.0.1")  # loopback only
    client = distributed.Client(cluster)
    try:
        yield DaskEngine(client=client)
    finally:
        client.close()
        cluster.close()


@pytest.fixture(scope="module")
def tickets():
    labelled, _, _ = generate("voltwren", 1500, 11)  # invented demo tickets: input only, never a reference value
    cols = [f.name for f in CONFIG.schema.fields]
    frame = labelled[cols].astype(object)
    frame = frame.where(frame.notna(), None)
    return frame.to_dict("records"), labelled["queue"].astype(str).tolist()


def test_cluster_model_equals_one_process(engine, tickets) -> None:
    items, labels = tickets
    spec = ModelSpec(text_model="complement", alpha_text=0.5, min_count=2)
    h = History(engine, CONFIG.schema, spec, items, labels, n_older=1200, rows=250)
    assert engine.workers == 2 and len(h._tokenised) >= 6  # several partitions over both workers
    assert_same_model(h.model(spec), NaiveBayes.fit(CONFIG.schema, items, labels, spec))
    assert_same_model(h.model(spec, "older"), NaiveBayes.fit(CONFIG.schema, items[:1200], labels[:1200], spec))
    # out-of-fold scores of a small grid: the cluster equals the in-process engine bit for bit
    folds = np.arange(1200) % 3
    specs = [spec, ModelSpec(text_model="multinomial", alpha_text=1.0, min_count=2),
             ModelSpec(text_model="bernoulli", alpha_text=0.1, min_count=2)]
    local = History(InProcessEngine(), CONFIG.schema, spec, items, labels, n_older=1200, rows=250)
    for ours, ref in zip(h.out_of_fold_jll(specs, folds), local.out_of_fold_jll(specs, folds), strict=True):
        np.testing.assert_array_equal(ours, ref)
    h.close()


# ----- the application on the cluster ---------------------------------------------------------------------------
@pytest.fixture(scope="module")
def trained(tmp_path_factory):
    return build_demo_workspace(tmp_path_factory.mktemp("cluster") / "ws", rows=800)


def test_train_on_the_cluster_equals_training_here(engine, trained, tmp_path) -> None:
    ws_dir = copy_workspace(trained, tmp_path)
    config = ws_dir / "triage.toml"  # the settings grid too: text model and smoothing chosen by cross-validation
    config.write_text(config.read_text(encoding="utf-8").replace('text_model = "multinomial"', 'text_model = "auto"')
                      .replace("alpha_text = 1.0", 'alpha_text = "auto"'), encoding="utf-8")
    with Workspace.open(ws_dir) as ws:
        here = ws.train(engine=InProcessEngine())
        model_here, policy_here = ws.model, ws.policy
        there = ws.train(engine=engine)
        assert there.version.version == here.version.version + 1
        assert_same_model(ws.model, model_here)
        assert ws.policy.to_dict() == policy_here.to_dict()
        assert there.selection == here.selection and len(there.selection) == 12
        assert there.measurement.scorecard.to_dict() == here.measurement.scorecard.to_dict()


def test_route_on_the_cluster_writes_parquet_and_stores_the_run(engine, trained, tmp_path, capsys) -> None:
    ws_dir = copy_workspace(trained, tmp_path)
    incoming = ROOT / "demo_corpus" / "voltwren_incoming.csv"
    with Workspace.open(ws_dir) as ws:
        expected = ws.decide_records(read_items(incoming, ws.config.schema, require_label=False).records)
    address = engine.client.scheduler.address
    assert main(["route", str(incoming), "-w", str(ws_dir), "--json", "--engine", "dask",
                 "--scheduler", address]) == 0
    captured = capsys.readouterr()
    decisions = [json.loads(line) for line in captured.out.splitlines()]
    assert decisions == expected and len(decisions) == 500  # the same decisions, evidence included, in order
    run = int(re.search(r"run-(\d+)\.parquet", captured.err).group(1))
    table = pq.read_table(ws_dir / "runs" / f"run-{run}.parquet")
    assert table.num_rows == 500 and table.to_pylist() == expected
    assert (ws_dir / "runs" / f"run-{run}.parquet").stat().st_mode & 0o777 == 0o600  # the items' words: private
    with Workspace.open(ws_dir) as ws:
        stored = ws.store.decisions(batch_id=run, limit=1000)
        assert sorted(d.item_id for d in stored) == sorted(d["id"] for d in expected)
    assert main(["route", str(incoming), "-w", str(ws_dir), "--scheduler", address]) == 2  # needs --engine dask


def _tasks_seen(engine: DaskEngine) -> int:
    """How many task state changes the module's scheduler has made: it grows only when work runs there."""
    return engine.client.run_on_scheduler(lambda dask_scheduler: dask_scheduler.transition_counter)


def test_train_with_a_scheduler_address_joins_that_cluster(engine, trained, tmp_path, capsys) -> None:
    ws_dir = copy_workspace(trained, tmp_path)
    address = engine.client.scheduler.address
    assert address.startswith("tcp://127.0.0.1:")
    before = _tasks_seen(engine)
    assert main(["train", "-w", str(ws_dir), "--json", "--engine", "dask", "--scheduler", address]) == 0
    capsys.readouterr()
    assert _tasks_seen(engine) > before  # the partitions were counted on that cluster, not on a new local one
    with Workspace.open(ws_dir) as ws:
        there = ws.model
        ws.train(engine=InProcessEngine())
        assert_same_model(ws.model, there)


def _closed_port() -> int:
    with socket.socket() as s:  # bound then closed: nothing listens there
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


@pytest.mark.parametrize("command", ["train", "route"])
def test_an_unreachable_scheduler_is_a_one_line_error_and_nothing_changes(trained, tmp_path, capsys,
                                                                          command: str) -> None:
    ws_dir = copy_workspace(trained, tmp_path)
    address = f"tcp://127.0.0.1:{_closed_port()}"
    with Workspace.open(ws_dir) as ws:
        active, items, batch = ws.active_version, ws.store.count_items(), ws.store.latest_batch()
    args = [command, "-w", str(ws_dir), "--engine", "dask", "--scheduler", address]
    if command == "route":
        args.insert(1, str(ROOT / "demo_corpus" / "voltwren_incoming.csv"))
    # Dask's own connect setting, which the engine honours (the default of 30 s is long for a test)
    with dask.config.set({"distributed.comm.timeouts.connect": "1s"}):
        assert main(args) == 2
    err = capsys.readouterr().err
    assert "cannot reach the Dask scheduler" in err and address in err and "Traceback" not in err
    with Workspace.open(ws_dir) as ws:
        assert (ws.active_version, ws.store.count_items(), ws.store.latest_batch()) == (active, items, batch)
