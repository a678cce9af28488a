"""The routing policy: turn calibrated confidences into "route to queue" or "hold for review".

An item is auto-routed to its top queue only when the calibrated confidence reaches that queue's cutoff.
Queues marked never-auto (a safety queue, a security-incident queue) are never auto-routed: every item whose top
queue is one of them is held for a human, and so is any item that gives such a queue a probability of at least
`watch_probability`, however confident the model is about another queue. A wrong "billing" on a ticket that
mentions smoke costs far more than a second look.
"""

from __future__ import annotations

import functools
import unicodedata
from collections.abc import Collection, Mapping, Sequence
from dataclasses import dataclass, field
from enum import StrEnum

import numpy as np
import regex

from triage.core.calibrate import IsotonicCalibrator, temperature_softmax

HELD_BELOW_CUTOFF = "below cutoff"
HELD_NEVER_AUTO = "never auto-routed: a person reviews every item here"
HELD_NO_CUTOFF = "no cutoff meets this queue's target precision yet"
HELD_WATCH = "may belong to a never-auto queue"
HELD_WORD = "mentions a watch word of"
_PLAIN_WORD = regex.compile(r"[\p{L}\p{M}\p{N}]+")


class HeldBy(StrEnum):
    """Why an item is held for review; decided once, in `decide`, and stored with the decision."""

    NEVER_AUTO = "never_auto"  # its top queue is one a person always sees
    WATCH_WORD = "watch_word"  # it mentions a watch word of a never-auto queue
    WATCH_PROBABILITY = "watch_probability"  # a never-auto queue has a real chance
    NO_CUTOFF = "no_cutoff"  # no cutoff meets its top queue's target precision yet
    BELOW_CUTOFF = "below_cutoff"  # its confidence is below its top queue's cutoff
    NEW_QUEUE = "new_queue"  # its top queue has too few items to be suggested yet (triage.app.routing)

    @property
    def safeguard(self) -> bool:
        """Held by a never-auto rule although the top queue is another one (watch word or probability)."""
        return self in (HeldBy.WATCH_WORD, HeldBy.WATCH_PROBABILITY)


@dataclass(frozen=True)
class RoutingPolicy:
    """Cutoffs per queue (None = no cutoff reaches the target, hold everything), plus the calibration.

    Calibration is a temperature on the joint log-likelihood, then optionally an isotonic map of the top queue's
    temperature-scaled probability. Only the top queue's confidence (the number cutoffs compare against) is
    remapped; the other queues keep their temperature-scaled probabilities, which the watch-probability rule reads.
    """

    cutoffs: Mapping[str, float | None]
    never_auto: frozenset[str] = field(default_factory=frozenset)
    watch_probability: float = 0.10
    temperature: float = 1.0
    isotonic: IsotonicCalibrator | None = field(default=None, compare=False)

    def cutoff(self, queue: str) -> float | None:
        """The queue's cutoff; None (hold everything) for a queue without one, e.g. one added by a correction."""
        return self.cutoffs.get(queue)

    def calibrated(self, jll: np.ndarray) -> np.ndarray:
        """Posterior probabilities with the temperature applied (T > 1 softens NB's over-confidence)."""
        return temperature_softmax(jll, self.temperature)

    def top_confidence(self, p_top: np.ndarray | float) -> np.ndarray:
        """The routing confidence of a top queue from its temperature-scaled probability (isotonic if fitted)."""
        p = np.asarray(p_top, dtype=float)
        return self.isotonic.transform(p) if self.isotonic is not None else p

    def to_dict(self) -> dict[str, object]:
        return {"cutoffs": dict(self.cutoffs), "never_auto": sorted(self.never_auto),
                "watch_probability": self.watch_probability, "temperature": self.temperature,
                "isotonic": self.isotonic.to_dict() if self.isotonic is not None else None}

    @classmethod
    def from_dict(cls, d: Mapping[str, object]) -> RoutingPolicy:
        return cls(cutoffs=dict(d.get("cutoffs", {})), never_auto=frozenset(d.get("never_auto", [])),
                   watch_probability=float(d.get("watch_probability", 0.10)),
                   temperature=float(d.get("temperature", 1.0)),
                   isotonic=IsotonicCalibrator.from_dict(iso) if (iso := d.get("isotonic")) else None)


@dataclass(frozen=True)
class Verdict:
    """The routing part of a decision (the evidence is added by the caller)."""

    suggested: str
    confidence: float
    runner_up: str | None
    runner_up_confidence: float
    queue: str | None  # None when held
    held_by: HeldBy | None  # None when routed
    reason: str
    top_index: int
    runner_up_index: int
    watch: tuple[str, ...] = ()  # the watch-word hits or the never-auto queues behind a safeguard hold

    @property
    def held(self) -> bool:
        return self.held_by is not None


def plain_words(text: str | None) -> list[str]:
    """The words of a text for watch-word matching: NFKC, casefolded, runs of letters, marks and digits.

    Deliberately not the model's tokens: those fold "SN-48213-smoking" into one identifier, and a safeguard
    must see every word a person could read."""
    if not text or not isinstance(text, str):
        return []
    return _PLAIN_WORD.findall(unicodedata.normalize("NFKC", text).casefold())


def watch_hits(words: Collection[str], watch_words: Mapping[str, Sequence[str]]) -> list[str]:
    """'queue: entry' for every watch entry the item's words (see plain_words) match.

    An entry is one or more word starts ("burn", "carbon monox", "self-harm", "can't breathe"), split into words
    the same way as the text: it matches when every one of its parts starts one of the item's words."""
    parsed = [(queue, entry, _entry_parts(entry)) for queue, entries in watch_words.items() for entry in entries]
    # "a word starts with p" is "p is the word's prefix of len(p)": one set of the prefixes of the lengths the
    # entries use, instead of every word against every entry (routing a batch calls this once per item)
    lengths = {len(p) for _, _, parts in parsed for p in parts}
    starts = {w[:k] for w in words for k in lengths if len(w) >= k}
    return [f"{queue}: {entry}" for queue, entry, parts in parsed if parts and all(p in starts for p in parts)]


@functools.lru_cache(maxsize=4096)
def _entry_parts(entry: str) -> tuple[str, ...]:
    return tuple(plain_words(entry))


def decide(probs: np.ndarray, queues: list[str], policy: RoutingPolicy,
           hits: Sequence[Sequence[str]] | None = None, watch_probs: np.ndarray | None = None) -> list[Verdict]:
    """One verdict per row of temperature-scaled probabilities; `hits` are each item's watch-word hits (see
    watch_hits). The top queue's confidence is the policy's `top_confidence` (isotonic when fitted).
    `watch_probs` (the model's scores before its score layer, `NaiveBayes.watch_probabilities`) are read by the
    watch-probability rule only: a never-auto queue's chance is the larger of the two, so a layer that lowers it
    never lets such an item through."""
    probs = np.atleast_2d(probs)
    watch_p = probs if watch_probs is None else np.maximum(probs, np.atleast_2d(watch_probs))
    order = np.argsort(-probs, axis=1, kind="stable")
    tops = policy.top_confidence(probs[np.arange(probs.shape[0]), order[:, 0]]) if probs.shape[0] else []
    watch_idx = [i for i, q in enumerate(queues) if q in policy.never_auto]
    out: list[Verdict] = []
    for n, (row, p, pw) in enumerate(zip(order, probs, watch_p, strict=True)):
        words = hits[n] if hits is not None else ()
        a = int(row[0])
        b = int(row[1]) if len(row) > 1 else a
        top, conf = queues[a], float(tops[n])
        cut = policy.cutoff(top)
        watched = [queues[i] for i in watch_idx if i != a and pw[i] >= policy.watch_probability]
        watch: tuple[str, ...] = ()
        held_by: HeldBy | None
        if top in policy.never_auto:
            held_by, reason = HeldBy.NEVER_AUTO, HELD_NEVER_AUTO
        elif words:
            held_by, watch, reason = HeldBy.WATCH_WORD, tuple(words), f"{HELD_WORD} {', '.join(words)}"
        elif watched:
            held_by, watch, reason = HeldBy.WATCH_PROBABILITY, tuple(watched), f"{HELD_WATCH} ({', '.join(watched)})"
        elif cut is None:
            held_by, reason = HeldBy.NO_CUTOFF, HELD_NO_CUTOFF
        elif conf < cut:
            held_by, reason = HeldBy.BELOW_CUTOFF, f"{HELD_BELOW_CUTOFF} ({conf:.2f} < {cut:.2f})"
        else:
            held_by, reason = None, f"confidence {conf:.2f} >= cutoff {cut:.2f}"
        out.append(Verdict(top, conf, queues[b] if b != a else None, float(p[b]) if b != a else 0.0,
                           None if held_by is not None else top, held_by, reason, a, b, watch))
    return out
