"""The scorecard's reliability chart and the Fields view's independence check and merge trial, with the pilot
over the real demo workspace; the figures on screen are compared with the workspace's and tuning's own."""

from __future__ import annotations

from pathlib import Path

from textual.widgets import DataTable, Static

from triage.app import tuning
from triage.tui.app import TriageApp
from triage.tui.views import PAIR_ROWS, FieldsView, ScorecardView, is_word
from triage.tui.widgets import ACC_MARK, CONF_MARK, reliability_chart

from .pilot import run, settle, text_of


def chart_rows(text: str) -> list[str]:
    """The per-bin lines of a reliability chart (they start with a bin such as 0.9–1.0)."""
    return [line for line in text.splitlines() if len(line) > 7 and line[3] == "–" and line[:3].replace(".", "").isdigit()]


def test_reliability_chart_reads_without_colour() -> None:
    bins = [{"lo": 0.5, "hi": 0.6, "n": 10, "mean_confidence": 0.55, "accuracy": 0.3},
            {"lo": 0.9, "hi": 1.0, "n": 90, "mean_confidence": 0.95, "accuracy": 0.95}]
    rows = chart_rows(reliability_chart(bins, width=20).plain)
    assert len(rows) == 2
    low, high = rows
    # accuracy 0.3 of 20 cells is 6 blocks; the mean confidence's mark sits at cell 11, past the bar
    assert low.count(ACC_MARK) == 6 and low.index(CONF_MARK) - low.index(ACC_MARK) == 11
    assert low.split()[-3:] == ["0.30", "0.55", "-0.25"]
    # a calibrated bin: the mark right at the end of its bar
    assert high.count(ACC_MARK) == 19 and high.index(CONF_MARK) == high.rindex(ACC_MARK) + 1
    assert high.split()[-1] == "+0.00"
    assert "no items" in reliability_chart([]).plain


def test_scorecard_shows_reliability_on_the_newest_items(workspace_path: Path) -> None:
    async def go(app: TriageApp, pilot) -> None:  # noqa: ANN001
        await pilot.press("3")
        await settle(app, pilot)
        sv = app.query_one(ScorecardView)
        hold = sv.meas.calibration["holdout"]
        box = app.query_one("#score-reliability", Static)
        text = text_of(box)
        # the test items' figures, not the ones on the calibration items themselves
        assert f"{sv.card.n} items, the newest, not trained on" in text
        assert sum(b["n"] for b in hold["reliability"]) == sv.card.n
        assert f"ECE before {hold['ece_before']:.3f} → after {hold['ece_after']:.3f}" in text
        assert f"temperature only {hold['ece_temperature']:.3f}" in text
        rows = chart_rows(text)
        assert len(rows) == len(hold["reliability"]) > 1
        for line, b in zip(rows, hold["reliability"], strict=True):
            parts = line.split()
            assert parts[0] == f"{b['lo']:.1f}–{b['hi']:.1f}" and parts[1] == str(b["n"])
            assert parts[-3:] == [f"{b['accuracy']:.2f}", f"{b['mean_confidence']:.2f}",
                                  f"{b['accuracy'] - b['mean_confidence']:+.2f}"]
            # a bar of 16 cells at accuracy 1; the confidence's mark covers a cell of it when it is shorter
            blocks, mark = round(b["accuracy"] * 16), round(b["mean_confidence"] * 16)
            assert line.count(ACC_MARK) == blocks - (mark < blocks)
            assert line.index(CONF_MARK) == 15 + mark  # the bar starts after "0.9–1.0   834  "
        # c shows the raw posterior's bins (and scrolls down to them), c again the calibrated ones
        scroll = app.query_one("#score-scroll")
        assert scroll.scroll_y == 0
        await pilot.press("c")
        await pilot.pause(0.1)
        assert scroll.scroll_y > 0 and box.region.bottom <= scroll.region.bottom
        raw = text_of(box)
        assert "reliability of the raw posterior" in raw
        assert [r.split()[1] for r in chart_rows(raw)] == [str(b["n"]) for b in hold["reliability_before"]]
        await pilot.press("c")
        await pilot.pause()
        assert text_of(box) == text

    run(go, workspace_path)


def test_fields_lists_dependent_pairs_and_tries_a_merge(workspace_path: Path) -> None:
    async def go(app: TriageApp, pilot) -> None:  # noqa: ANN001
        ws = app.ws
        await pilot.press("6")
        await settle(app, pilot)
        fv = app.query_one(FieldsView)
        expected = tuning.independence(ws)
        n_flagged = sum(1 for p in expected if p["flagged"])
        shown = expected[:max(PAIR_ROWS, n_flagged)]
        table = app.query_one("#pairs-table", DataTable)
        assert fv.pairs == shown and table.row_count == len(shown)
        assert fv.pairs_for == ws.active_version.version
        for k, p in enumerate(shown):
            mark, a, b, cmi, merge = (str(c) for c in table.get_row_at(k))
            assert (a, b, cmi) == (p["a"], p["b"], f"{p['cmi_nats']:.4f}")
            assert (mark == "! dependent") == p["flagged"]
            assert (merge == "m") == (not is_word(a) and not is_word(b))
        title = str(app.query_one("#pairs-title").render())
        assert f"{len(expected)} pairs checked, {n_flagged} flagged" in title
        # i goes to the pairs
        await pilot.press("i")
        await pilot.pause()
        assert app.focused is table
        # a pair with a word is not merged
        words = next(k for k, p in enumerate(shown) if is_word(p["b"]))
        table.move_cursor(row=words)
        await pilot.press("m")
        await settle(app, pilot)
        assert fv.merge_result is None and not [w for w in app.workers if w.group == "merge"]
        # a pair of fields: apart vs merged, the same figures as tuning's own run
        fields = next(k for k, p in enumerate(shown) if not is_word(p["a"]) and not is_word(p["b"]))
        table.move_cursor(row=fields)
        fv.MERGE_FOLDS = 3
        await pilot.press("m")
        await settle(app, pilot)
        pair = shown[fields]
        want = tuning.try_merge(ws, pair["a"], pair["b"], folds=3)
        assert fv.merge_result == want
        text = text_of(app.query_one("#merge-result", Static))
        assert f"{pair['a']} and {pair['b']}, apart vs merged into {want['field']}" in text
        for key in ("apart", "merged"):
            r = want[key]
            line = next(x for x in text.splitlines() if x.strip().startswith(key))
            assert line.split()[1:] == [f"{100 * r['accuracy']:.1f}%", f"{r['macro_f1']:.3f}", f"{r['log_loss']:.3f}"]
        assert ("merging helps" in text) == want["merge_helps"]

    run(go, workspace_path)
