"""The Dask engine on a real local cluster of two worker processes: the same model, array for array.

Reference: `NaiveBayes.fit` on all items in one process (the definition the cluster must reproduce), and the
in-process engine for out-of-fold scores. One cluster is started for the whole module (a start costs seconds).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from demo_corpus.generate import generate
from triage.config import load_config
from triage.core.model import ModelSpec, NaiveBayes
from triage.engine import InProcessEngine
from triage.engine.history import History

distributed = pytest.importorskip("dask.distributed")

from tests.test_engine import assert_same_model  # noqa: E402
from triage.engine.cluster import DaskEngine  # noqa: E402

ROOT = Path(__file__).resolve().parent.parent
CONFIG = load_config(ROOT / "configs" / "voltwren.toml")


@pytest.fixture(scope="module")
def engine():
    cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None)
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
