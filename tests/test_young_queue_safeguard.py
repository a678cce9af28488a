"""A young queue is put behind an established runner-up, but never at the cost of a safety hold.

Project rule (README, "Cautions"): an item held because it mentions a watch word of a never-auto queue, or gives
such a queue a real chance, keeps that reason wherever else it is re-ordered; no outside reference value here."""

from __future__ import annotations

import numpy as np

from triage.app.routing import HELD_YOUNG, MIN_QUEUE_ITEMS, _young_second
from triage.core.routing import HeldBy, Verdict

QUEUES_ITEMS = np.array([400, 300, 1])  # billing, hardware_fault, warranty (a queue made by one correction)


def _verdict(held_by: HeldBy | None, watch: tuple[str, ...] = ()) -> Verdict:
    return Verdict(suggested="warranty", confidence=0.7, runner_up="billing", runner_up_confidence=0.2,
                   queue=None if held_by else "warranty", held_by=held_by, reason="original reason",
                   top_index=2, runner_up_index=0, watch=watch)


def test_a_watch_word_hold_keeps_its_reason_when_the_top_queue_is_young() -> None:
    out = _young_second([_verdict(HeldBy.WATCH_WORD, ("smok",))], QUEUES_ITEMS, frozenset({"safety"}))[0]
    assert out.held_by is HeldBy.WATCH_WORD and out.watch == ("smok",)
    assert out.reason == "original reason" and out.queue is None
    assert out.suggested == "billing" and out.runner_up == "warranty"  # still not suggested over billing


def test_a_watch_probability_hold_keeps_its_reason_when_the_top_queue_is_young() -> None:
    out = _young_second([_verdict(HeldBy.WATCH_PROBABILITY, ("safety",))], QUEUES_ITEMS, frozenset({"safety"}))[0]
    assert out.held_by is HeldBy.WATCH_PROBABILITY and out.watch == ("safety",)


def test_an_ordinary_item_still_puts_the_young_queue_second() -> None:
    out = _young_second([_verdict(None)], QUEUES_ITEMS, frozenset({"safety"}))[0]
    assert out.suggested == "billing" and out.runner_up == "warranty"
    assert out.held_by is HeldBy.NEW_QUEUE and out.queue is None
    assert out.reason.startswith(HELD_YOUNG) and str(MIN_QUEUE_ITEMS) in out.reason
