"""The command line's words: what a support lead reads at 80 columns, with no Python leaking into the text.

Tables are rendered into a fixed-width console (80 columns, a common terminal) on the trained demo workspace
and compared as plain text. Precision over zero auto-routed items is undefined (scikit-learn's
precision_score warns and falls back to `zero_division`), so the table must show "-", never "0.0%".
"""

from __future__ import annotations

import re
from io import StringIO
from pathlib import Path

import pytest
from rich.console import Console

from triage.app import Workspace
from triage.cli.output import MACRO_F1, count, plain
from triage.cli.render import render_explanation, render_overview, render_scorecard

OLD_WORDS = ("supp.", "cover.", "prec.", "queue size (prior)", "gap", "likely misroute", "Adopt")


def rendered(fn, *args) -> str:  # noqa: ANN001  (a render function and its record)
    buf = StringIO()
    fn(*args, console=Console(file=buf, width=80, color_system=None, highlight=False))
    return buf.getvalue()


@pytest.fixture(scope="module")
def looked(demo_1200: Path) -> dict:
    with Workspace.open(demo_1200, read_only=True) as ws:
        card = ws.evaluate().scorecard.to_dict()
        first = ws.overview()
        item = ws.explain(_some_item(demo_1200), n=500)  # every term
    return {"card": card, "overview": first, "explain": item}


def _some_item(root: Path) -> str:
    return (root / "t.csv").read_text(encoding="utf-8").splitlines()[1].split(",", 1)[0]


def test_scorecard_fits_80_columns_in_plain_words(looked: dict) -> None:
    text = rendered(render_scorecard, looked["card"])
    assert max(len(line.rstrip()) for line in text.splitlines()) <= 80
    table = text.split("Per queue", 1)[1]
    assert "…" not in table  # every header and every queue name whole
    for word in ("precision", "true", "items", "auto-", "routed", "held"):
        assert word in table
    for old in OLD_WORDS:
        assert old not in text
    # the long name comes first; the short one never before it
    flat = " ".join(text.split())
    assert MACRO_F1 in flat and flat.find("macro-F1") == flat.find(MACRO_F1) + MACRO_F1.index("macro-F1")


def test_a_queue_with_nothing_auto_routed_shows_a_dash_for_precision(looked: dict) -> None:
    card = looked["card"]
    text = rendered(render_scorecard, card)
    rows = {line.split()[0]: line.split() for line in text.split("Per queue", 1)[1].splitlines()
            if line.split() and line.split()[0] in card["queues"]}
    header = ["queue", "target", "cutoff", "precision", "recall", "F1", "true items", "auto-routed", "held"]
    at = header.index("precision")
    nothing = [q for q in card["per_queue"] if q["routed"] == 0]
    some = [q for q in card["per_queue"] if q["routed"] > 0]
    assert nothing and some  # the never-auto safety queue routes nothing; the others route some
    for q in nothing:
        assert rows[q["queue"]][at] == "-"
    for q in some:
        assert rows[q["queue"]][at] == f"{100 * q['precision']:.1f}%"
        assert rows[q["queue"]][header.index("true items")] == f"{q['support']:,}"


def test_overview_is_sentences_not_a_dict(looked: dict) -> None:
    text = rendered(render_overview, looked["overview"])
    flat = " ".join(text.split())
    for leak in ("{", "}", "None", "null", "macro_f1", "'"):
        assert leak not in text
    assert not re.search(r"\b\d+\.0\b", text)  # no count printed as a float
    data = looked["overview"]
    assert f"{data['items']:,} items" in flat and f"{data['labelled']:,} of them labelled" in flat
    assert MACRO_F1 in flat and "never auto-routed" in flat


def test_explanation_says_base_rate_and_log_odds_margin(looked: dict) -> None:
    text = rendered(render_explanation, looked["explain"])
    flat = " ".join(text.split())
    assert "log-odds margin" in flat and "natural log" in flat
    assert "base rate" in flat  # the prior's term, always among the terms of a decision
    for old in OLD_WORDS:
        assert old not in text


def test_values_in_words() -> None:
    # what a settings change or a count prints: never Python's None/True or a float count
    assert plain(None) == "not set" and plain(True) == "on" and plain(False) == "off"
    assert plain(1.0) == "1" and plain(["a", "b"]) == "a, b" and plain({"subject": 2.0}) == "subject 2"
    assert count(814.0) == "814" and count(6500) == "6,500" and count(None) == "-"
