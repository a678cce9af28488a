"""The workspace layer on real folders: corrections equal a fresh fit, new queues, the scorecard and cutoffs."""

from __future__ import annotations

import csv
import itertools
import re
import shutil
from pathlib import Path

import numpy as np
import pytest
from sklearn.metrics import confusion_matrix, precision_recall_fscore_support
from statsmodels.stats.proportion import proportion_confint

from triage.app import Workspace, WorkspaceError
from triage.app.errors import AlreadyInQueue, Conflict, UnknownQueue
from triage.core.model import NaiveBayes
from triage.core.routing import decide

REPO = Path(__file__).resolve().parents[1]
DEMO = REPO / "demo_corpus"
N_ROWS = 1500
HELD = "(held)"


def demo_rows(n: int, name: str = "voltwren_tickets.csv") -> list[dict[str, str]]:
    with (DEMO / name).open(newline="", encoding="utf-8") as fh:
        return list(itertools.islice(csv.DictReader(fh), n))


def write_csv(path: Path, rows: list[dict[str, str]]) -> Path:
    with path.open("w", newline="", encoding="utf-8") as fh:
        w = csv.DictWriter(fh, fieldnames=list(rows[0]))
        w.writeheader()
        w.writerows(rows)
    return path


def pinned_config(target: float = 0.85) -> str:
    text = (REPO / "configs" / "voltwren.toml").read_text(encoding="utf-8")
    text, n1 = re.subn(r'(?m)^text_model = "auto"', 'text_model = "multinomial"', text)
    text, n2 = re.subn(r'(?m)^alpha_text = "auto"', "alpha_text = 1.0", text)
    text, n3 = re.subn(r"(?m)^(\[routing\]\ntarget_precision = )[0-9.]+", rf"\g<1>{target}", text)
    assert (n1, n2, n3) == (1, 1, 1), "the demo config changed shape; update pinned_config"
    return text


@pytest.fixture(scope="module")
def trained(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, object]:
    """A trained workspace folder and the measurement of its training."""
    d = tmp_path_factory.mktemp("ws-module")
    root = d / "ws"
    root.mkdir()
    (root / "triage.toml").write_text(pinned_config(), encoding="utf-8")
    src = write_csv(d / "tickets.csv", demo_rows(N_ROWS))
    with Workspace.open(root) as ws:
        assert ws.import_file(src).added == N_ROWS
        report = ws.train()
    return root, report.measurement


@pytest.fixture
def ws(trained: tuple[Path, object], tmp_path: Path):
    dest = tmp_path / "ws"
    shutil.copytree(trained[0], dest)
    w = Workspace.open(dest)
    yield w
    w.close()


def jll_by_queue(model: NaiveBayes, fields: list[dict]) -> dict[str, np.ndarray]:
    batch = model.encoder.transform(fields, allow_missing=True)
    jll = model.joint_log_likelihood(batch)
    return {q: jll[:, i] for i, q in enumerate(model.queues)}


def assert_models_equal(a: NaiveBayes, b: NaiveBayes, fields: list[dict]) -> None:
    ja, jb = jll_by_queue(a, fields), jll_by_queue(b, fields)
    assert set(ja) == set(jb)
    for q in ja:
        np.testing.assert_allclose(ja[q], jb[q], rtol=0, atol=1e-9, err_msg=q)
    ca = dict(zip(a.queues, a.counts.class_count_, strict=True))
    cb = dict(zip(b.queues, b.counts.class_count_, strict=True))
    assert ca == pytest.approx(cb, abs=1e-12)


def fresh_fit(ws: Workspace) -> NaiveBayes:
    """A fit from scratch on the store's current labels, with the active model's vocabulary and bins."""
    recs = ws.store.labelled_items()
    return NaiveBayes.fit(ws.config.schema, [r.fields for r in recs], [r.label for r in recs], ws.model.spec,
                          encoder=ws.model.encoder)


def test_corrections_equal_a_fresh_fit_on_the_corrected_labels(ws: Workspace, tmp_path: Path) -> None:
    rows = demo_rows(200)
    incoming = demo_rows(30, "voltwren_incoming.csv")
    decisions, _, _ = ws.route_file(write_csv(tmp_path / "incoming.csv", incoming))
    by_queue: dict[str, list[str]] = {}
    for r in rows:
        by_queue.setdefault(r["queue"], []).append(r["ticket_id"])
    a, b, c = by_queue["installation"][:3]
    routed = incoming[0]["ticket_id"]  # stored unlabelled by routing: the correction is its first label
    v0 = ws.active_version.version

    ws.correct(a, "billing", by="dana")
    ws.correct(b, "hardware_fault", by="dana")
    ws.correct(b, "app_connectivity", by="lee")  # corrected twice
    ws.correct(c, "warranty_claims", by="dana", new_queue=True)  # a brand-new queue
    rep = ws.correct(routed, "cancellations", by="dana")
    assert rep.before is None and rep.after == "cancellations"
    ws.correct(routed, "billing", by="dana")
    undone = ws.undo(by="dana")  # back to cancellations
    assert undone.correction.undo_of is not None and undone.after == "cancellations"
    assert ws.active_version.version == v0 + 7

    labels = {r.item_id: r.label for r in ws.store.labelled_items()}
    assert (labels[a], labels[b], labels[c], labels[routed]) == ("billing", "app_connectivity",
                                                                 "warranty_claims", "cancellations")
    probe = [r["ticket_id"] for r in rows[:80]] + [d["id"] for d in decisions]
    fields = [r.fields for r in ws.store.get_items(probe)]
    assert_models_equal(ws.model, fresh_fit(ws), fields)

    # what was learned survives a restart: the reopened workspace replays the same corrections
    root = ws.root
    before = jll_by_queue(ws.model, fields)
    ws.close()
    with Workspace.open(root) as again:
        assert again.active_version.version == v0 + 7
        after = jll_by_queue(again.model, fields)
        assert set(after) == set(before)
        for q in before:
            np.testing.assert_allclose(after[q], before[q], rtol=0, atol=1e-9)
        assert_models_equal(again.model, fresh_fit(again), fields)


def test_a_correction_to_a_new_queue(ws: Workspace) -> None:
    item = demo_rows(1)[0]["ticket_id"]
    assert "warranty_claims" not in ws.model.queues
    # a queue not yet known is refused unless asked for explicitly, with the closest known queue named
    with pytest.raises(UnknownQueue, match=r"'biling' is not a known queue; did you mean 'billing'\?"):
        ws.correct(item, "biling", by="dana")
    assert ws.store.corrections() == []
    rep = ws.correct(item, "warranty_claims", by="dana", new_queue=True)
    assert "warranty_claims" in ws.model.queues
    assert ws.store.queue_counts()["warranty_claims"] == 1
    counts = dict(zip(ws.model.queues, ws.model.counts.class_count_, strict=True))
    assert counts["warranty_claims"] == 1
    assert rep.decision["id"] == item
    x = ws.explain(item)
    assert x["label"] == "warranty_claims"
    # a queue with no measured cutoff auto-routes nothing until the next training measures it
    if x["suggested"] == "warranty_claims":
        assert x["held"] and x["queue"] is None
    with pytest.raises(WorkspaceError):
        ws.correct(item, "not a queue!", by="dana")
    with pytest.raises(WorkspaceError):
        ws.correct(item, "   ", by="dana")


def test_a_correction_to_the_queue_the_item_has_is_refused(ws: Workspace) -> None:
    row = demo_rows(1)[0]
    item, queue = row["ticket_id"], row["queue"]
    v0 = ws.active_version.version
    with pytest.raises(AlreadyInQueue, match=rf"{item} is already in {queue}: nothing to correct, nothing recorded"):
        ws.correct(item, queue, by="dana")
    with pytest.raises(Conflict):  # the service maps it as a clash with the stored state
        ws.correct(item, f"  {queue} ", by="dana")
    assert ws.store.corrections() == [] and ws.active_version.version == v0
    assert [v.version for v in ws.models()] == [v0]

    # a second workspace opened before another one decided the item: its stale view must not add "X -> X"
    other = next(q for q in ws.model.queues if q not in (queue, "safety"))
    with Workspace.open(ws.root) as second:
        ws.correct(item, other, by="dana")
        with pytest.raises(AlreadyInQueue, match=f"already in {other}"):
            second.correct(item, other, by="lee")
        assert [c.by for c in second.store.corrections()] == ["dana"]
        assert second.active_version.version == v0 + 1


def test_scorecard_equals_sklearn_on_the_held_out_rows(trained: tuple[Path, object]) -> None:
    meas = trained[1]
    card = meas.scorecard
    assert meas.test_probs is not None and len(meas.test_labels) == card.n == round(N_ROWS * 0.2)
    queues = card.queues
    y_true = list(meas.test_labels)
    top = [meas.model_queues[i] for i in np.argmax(meas.test_probs, axis=1)]
    assert np.array_equal(np.array(card.matrix), confusion_matrix(y_true, top, labels=queues))
    assert card.accuracy == pytest.approx(np.mean(np.array(y_true) == np.array(top)), abs=1e-12)
    p, r, f, s = precision_recall_fscore_support(y_true, top, labels=queues, zero_division=0)
    assert card.macro_f1 == pytest.approx(f.mean(), abs=1e-12)
    for i, q in enumerate(card.per_queue):
        assert (q.precision_all, q.recall_all, q.f1_all) == pytest.approx((p[i], r[i], f[i]), abs=1e-12)
        assert q.support == s[i]

    # at the cutoffs: an item held for review counts as predicting no queue
    verdicts = decide(meas.test_probs, meas.model_queues, meas.policy, meas.test_hits)
    routed = np.array([not v.held for v in verdicts])
    assert [v.suggested for v in verdicts] == top
    y_auto = [t if ok else HELD for t, ok in zip(top, routed, strict=True)]
    p, r, f, s = precision_recall_fscore_support(y_true, y_auto, labels=queues, zero_division=0)
    for i, q in enumerate(card.per_queue):
        assert (q.precision, q.recall, q.f1) == pytest.approx((p[i], r[i], f[i]), abs=1e-12), q.queue
        assert q.routed == sum(1 for t, ok in zip(top, routed, strict=True) if ok and t == q.queue)
    assert card.coverage == pytest.approx(routed.mean(), abs=1e-12)
    right = np.array(y_true) == np.array(top)
    assert card.auto_precision == pytest.approx(right[routed].mean(), abs=1e-12)
    assert routed.any() and not routed.all()


def test_cutoffs_meet_their_wilson_bound_on_out_of_fold_data(trained: tuple[Path, object]) -> None:
    meas = trained[1]
    solved = 0
    for q, info in meas.cutoffs.items():
        if info.get("fixed"):
            continue
        assert info["target"] == (0.99 if q == "safety" else 0.85)
        if info["cutoff"] is None:
            assert info["routed"] == 0 and meas.policy.cutoffs[q] is None
            continue
        solved += 1
        assert info["lower_bound"] >= info["target"], q
        k = round(info["precision"] * info["routed"])
        assert k / info["routed"] == pytest.approx(info["precision"], abs=1e-12)
        if info.get("method", "").startswith("pooled"):
            # a small queue's pooled bound: the 2.5% quantile of its beta posterior (scipy's beta distribution)
            from scipy.stats import beta

            a0 = info["prior_mean"] * info["prior_strength"]
            b0 = (1 - info["prior_mean"]) * info["prior_strength"]
            low = beta.ppf(0.025, k + a0, info["routed"] - k + b0)
        else:
            low, _ = proportion_confint(k, info["routed"], alpha=0.05, method="wilson")
        assert info["lower_bound"] == pytest.approx(low, abs=1e-9), q
        if info["never_auto"]:
            assert meas.policy.cutoffs[q] is None  # solved for the record, never used to route
        else:
            assert meas.policy.cutoffs[q] == info["cutoff"]
    assert solved >= 2
    assert meas.policy.cutoffs["safety"] is None and "safety" in meas.policy.never_auto
