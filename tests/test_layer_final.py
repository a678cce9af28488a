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


def test_word_pairs_on_auto_are_measured_on_the_best_setting_and_kept_only_if_they_rank_first(
        fortunes_workspace: Path) -> None:
    """bigrams = "auto" (the default init writes): the best of the words-only grid is measured once more with word
    pairs on the same folds, and the model keeps whichever ranks first by the one rule (selection.ranked)."""
    from triage.core.selection import ranked
    from triage.core.tokens import is_bigram

    with Workspace.open(fortunes_workspace) as ws:
        assert ws.config.model.bigrams == "auto"
        recs = labelled(ws)
        model, meas, selection, base = _fit(ws, InProcessEngine(), recs, lambda s, f: None, lambda: None)
        n_older = meas.split["train_items"]
    words = [s for s in selection if not s["spec"]["bigrams"]]
    pairs = [s for s in selection if s["spec"]["bigrams"]]
    assert len(pairs) == 1 and len(words) == len(selection) - 1

    def figures(s):
        return (s["coverage"], s["macro_f1"], s["log_loss"])

    best_words = ranked(words, figures, n_older)[0]
    assert {k: v for k, v in pairs[0]["spec"].items() if k != "bigrams"} == \
        {k: v for k, v in best_words["spec"].items() if k != "bigrams"}
    winner = ranked(selection, figures, n_older)[0]
    assert base.bigrams == winner["spec"]["bigrams"] and model.spec.bigrams == base.bigrams
    # the model's vocabulary has word pairs exactly when they were kept
    assert any(is_bigram(t) for t in model.encoder.terms_) == base.bigrams
