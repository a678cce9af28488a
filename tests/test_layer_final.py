"""The model `train` keeps routes through the score layer its scorecard measured.

Reference: the open dataset of Debian's package `fortunes` (eight of its categories, one cookie an item), and
scikit-learn's LogisticRegression (the layer is one: its weights are checked against a fit on the same
out-of-fold scores in tests/test_stack.py).
"""

from __future__ import annotations

import csv
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest

from triage.app import Workspace, infer_config
from triage.app.measuring import labelled
from triage.app.training import _fit
from triage.engine import InProcessEngine

FORTUNES = Path("/usr/share/games/fortunes")
CATEGORIES = ("computers", "definitions", "people", "politics", "science", "songs-poems", "work", "zippy")


@pytest.fixture(scope="module")
def fortunes_workspace(tmp_path_factory: pytest.TempPathFactory) -> Path:
    if not all((FORTUNES / c).is_file() for c in CATEGORIES):
        pytest.skip(f"{FORTUNES} lacks {CATEGORIES}: install the open dataset with `apt-get install fortunes`")
    root = tmp_path_factory.mktemp("fortunes")
    src = root / "cookies.csv"
    with src.open("w", encoding="utf-8", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(["id", "text", "category"])
        n = 0
        for cat in CATEGORIES:
            text = (FORTUNES / cat).read_text(encoding="utf-8", errors="replace")
            for cookie in (c.strip() for c in text.split("\n%\n")):
                if cookie:
                    w.writerow([f"c{n}", " ".join(cookie.split()), cat])
                    n += 1
    config, reasons = infer_config(src, label="category")
    # the layer on whatever it ranks (score_layer = true): this test is about which layer the model keeps
    config = replace(config, model=replace(config.model, score_layer=True))
    Workspace.create(root / "ws", config, comments=reasons)
    with Workspace.open(root / "ws") as ws:
        ws.import_file(src)
    return root / "ws"


def test_the_kept_layer_is_the_measured_one(fortunes_workspace: Path) -> None:
    with Workspace.open(fortunes_workspace) as ws:
        recs = labelled(ws)
        model, meas, _, _ = _fit(ws, InProcessEngine(), recs, lambda s, f: None, lambda: None)
    info = meas.calibration["score_layer"]
    assert info["used"], info  # score_layer = true, and eight categories are enough data for it
    assert model.layer_ is meas.layer and model.layer_active
    assert info["converged"] == model.layer_.converged
    # the layer was fitted on the measured (older) items only: its item count says so
    assert model.layer_.n_items == info["items"] < len(recs)
    assert np.isfinite(model.layer_.weights).all()
