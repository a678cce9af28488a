"""Guess a workspace config from a sample of an item file, with a reason for every column.

The guess is a starting point for `triage init`: the reasons are written beside the fields so a person can
check each role before importing and training.
"""

from __future__ import annotations

import math
import re
import warnings
from collections import Counter
from pathlib import Path
from typing import Any

import pandas as pd

from triage.config import Config, QueueSettings
from triage.core.schema import FieldRole, FieldSpec, Schema
from triage.ingest import IngestError, read_raw_sample

LABEL_NAMES = ("queue", "label", "team", "class", "category")  # in order of preference
ID_NAMES = ("id", "key", "number")
TIME_WORDS = ("received", "created", "date", "time", "timestamp", "arrived", "opened", "submitted")
SAFETY_WORDS = ("safety", "security", "hazard", "incident", "urgent", "emergency", "self_harm", "selfharm")
SAFETY_PRECISION = 0.99

# watch-word proposals for never-auto queues: how many, and how few items of the queue must carry one
MAX_WATCH_WORDS = 8
MIN_WATCH_ITEMS = 3
WATCH_PREFIX = 4  # "smok" covers smoke / smoking / smoky, "burn" burning / burnt

SHORT_TEXT_WEIGHT = 2.0  # subjects and titles: few words, each says a lot
LONG_TEXT_CHARS = 60
TEXT_MIN_MEAN_CHARS = 25
MAX_CATEGORIES = 100
# a column not named like a time is the arrival time when this share of it parses as dates; the rest are
# read as missing times on import (counted), not as text
TIME_MIN_SHARE = 0.8


def _words(name: str) -> list[str]:
    """Split a column name into lower-case words: 'ReceivedAt' / 'received_at' -> ['received', 'at']."""
    spaced = re.sub(r"([a-z0-9])([A-Z])", r"\1 \2", name)
    return [w for w in re.split(r"[^0-9a-zA-Z]+", spaced.lower()) if w]


def _cell(v: Any) -> str:
    """A raw value as stripped text, '' for missing, so every format is judged the same way."""
    if v is None or (isinstance(v, float) and math.isnan(v)) or v is pd.NA or v is pd.NaT:
        return ""
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, float) and v.is_integer():
        return str(int(v))
    if hasattr(v, "isoformat"):
        return v.isoformat()
    return str(v).strip()


def _is_number(s: str) -> bool:
    try:
        return math.isfinite(float(s))
    except ValueError:
        return False


def _letter_share(values: pd.Series) -> float:
    """The share of letters among the characters of the values (a package name is mostly letters, an order
    number mostly digits)."""
    joined = "".join(values)
    return sum(ch.isalpha() for ch in joined) / max(len(joined), 1)


def _pct(x: float) -> str:
    return f"{100 * x:.0f}%"


def _find_label(columns: list[str], label: str | None, source: str) -> tuple[str, str]:
    if label is not None:
        if label not in columns:
            raise IngestError(f"{source}: no column {label!r} for the label (columns: {', '.join(columns)})")
        return label, "the label (queue), as given"
    for wanted in LABEL_NAMES:  # an exact name first, then a name containing the word
        for c in columns:
            if c.strip().lower() == wanted:
                return c, f"the label (queue): the column is named {c!r}"
    for wanted in LABEL_NAMES:
        for c in columns:
            if wanted in _words(c):
                return c, f"the label (queue): the name contains {wanted!r}"
    raise IngestError(
        f"{source}: no column looks like the queue (named like {', '.join(LABEL_NAMES)}); "
        f"name it with --label (columns: {', '.join(columns)})"
    )


def _looks_like_id_name(name: str) -> bool:
    low = name.strip().lower()
    words = _words(name)
    return low in ID_NAMES or low.endswith("id") or (bool(words) and words[-1] in ID_NAMES)


def _word_starts(text: str) -> set[str]:
    """The word starts of one text: the first WATCH_PREFIX letters of each word of 3 letters or more."""
    return {w[:WATCH_PREFIX] for w in re.findall(r"[^\W\d_]{3,}", text.casefold())}


def propose_watch_words(texts: list[str], labels: list[str], queue: str) -> list[tuple[str, int, int]]:
    """Word starts most typical of `queue` against the other queues, as (start, items of the queue with it,
    other items with it), best first.

    Each start is scored by the log odds ratio of appearing in the queue's items rather than in the others'
    (0.5 added to every cell). Only starts whose ratio is clearly above zero count: its z-score (the ratio over
    its standard error, as in Monroe, Colaresi & Quinn 2008, "Fightin' words") must reach 3, and at least
    MIN_WATCH_ITEMS of the queue's items must carry it. The survivors are ranked by the ratio itself, so a
    word nearly only the queue uses ("burn") comes before a common one it uses a little more ("start").
    These are suggestions for a person to review, not rules."""
    inside: Counter[str] = Counter()
    outside: Counter[str] = Counter()
    n_in = n_out = 0
    for text, lab in zip(texts, labels, strict=True):
        starts = _word_starts(text)
        if lab == queue:
            n_in += 1
            inside.update(starts)
        else:
            n_out += 1
            outside.update(starts)
    if n_in < MIN_WATCH_ITEMS or n_out == 0:
        return []
    scored: list[tuple[float, str]] = []
    for w, a in inside.items():
        b = outside.get(w, 0)
        if a < MIN_WATCH_ITEMS or a / n_in <= b / n_out:
            continue
        a1, a0, b1, b0 = a + 0.5, n_in - a + 0.5, b + 0.5, n_out - b + 0.5
        lor = math.log(a1 / a0) - math.log(b1 / b0)
        z = lor / math.sqrt(1 / a1 + 1 / a0 + 1 / b1 + 1 / b0)
        if z >= 3.0:  # common practice (|z| > 1.96 in that paper; 3 keeps the list short), no source
            scored.append((lor, w))
    scored.sort(key=lambda t: (-t[0], t[1]))
    return [(w, inside[w], outside.get(w, 0)) for _z, w in scored[:MAX_WATCH_WORDS]]


def _datetime_share(values: pd.Series) -> float:
    if values.empty:
        return 0.0
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        head = values.head(200)  # parsing mixed formats is slow; most columns are ruled out by a glance
        share = float(pd.to_datetime(head, errors="coerce", utc=True, format="mixed").notna().mean())
        if share < 0.5 or len(head) == len(values):
            return share
        parsed = pd.to_datetime(values, errors="coerce", utc=True, format="mixed")
    return float(parsed.notna().mean())


def infer_config(
    path: Path | str, label: str | None = None, *, sample_rows: int = 5000
) -> tuple[Config, dict[str, str]]:
    """Guess a Config from the first `sample_rows` rows of a file; returns it with a reason per column.

    Rules, in order (each column gets the first role that fits):
      - label: the column given, else one named queue / label / team / class / category (exactly, then as a
        word in the name). None found -> IngestError asking for --label.
      - id: a column with a distinct, non-empty value on every sampled row whose name looks like an id
        (id, *_id, *id, key, *number); else the first such all-distinct column. None -> IngestError.
      - time: one column whose name suggests a time (received_at, created, date, time, timestamp, ...) and
        whose values mostly parse as dates, or whose values are not numbers and >= 95% parse as dates.
      - number: >= 95% of the non-empty values parse as numbers (the rest would be rejected on import).
      - left out: an empty or single-valued column.
      - text of character grams (pieces "grams"): a short code without spaces, mostly letters, all distinct or
        too many-valued for a category (package names, product models); an all-distinct numeric code is left out.
      - text: mean length >= 25 characters, or > 50% distinct and > 30 distinct values, or most values hold
        several words and there are > 30 distinct ones (subjects, job titles). Long text (mean
        >= 60 characters) gets weight 1.0, short text (subjects, titles) weight 2.0.
      - category: at most 100 distinct values or at most 20% distinct.
      - left out: anything else (too many short distinct values for a category, too short for text).
    Queue names in the label column that sound like safety or security (safety, security, hazard, incident,
    urgent, emergency, self_harm) get a policy that never auto-routes and asks for 0.99 precision; their
    reasons are keyed `queues.<name>`.
    """
    source = Path(path).name
    columns, rows = read_raw_sample(path, sample_rows)
    frame = pd.DataFrame({c: [_cell(r.get(c)) for r in rows] for c in columns}, dtype=object)
    n = len(frame)
    reasons: dict[str, str] = {}

    label_col, reasons[label_col] = _find_label(columns, label, source)

    unique_cols = [
        c for c in columns if c != label_col and (frame[c] != "").all() and frame[c].nunique() == n
    ]
    named = [c for c in unique_cols if _looks_like_id_name(c)]
    if named:
        id_col = named[0]
        reasons[id_col] = f"the item id: every value is distinct and the name {id_col!r} looks like an id"
    elif unique_cols:
        id_col = unique_cols[0]
        reasons[id_col] = "the item id: the first column with a distinct value on every row"
    else:
        raise IngestError(
            f"{source}: no column has a distinct, non-empty value on every row to serve as the item id"
        )

    time_col: str | None = None
    specs: list[FieldSpec] = []
    for c in columns:
        if c in (label_col, id_col):
            continue
        values = frame[c]
        filled = values[values != ""]
        if filled.empty:
            reasons[c] = "left out: empty in the sample"
            continue
        distinct = int(filled.nunique())
        unique_share = distinct / len(filled)
        numeric_share = float(filled.map(_is_number).mean())
        time_hint = any(w in TIME_WORDS for w in _words(c)) or c.lower().endswith("_at")
        if time_col is None and (time_hint or numeric_share < 0.95):
            dt_share = _datetime_share(filled)
            if (time_hint and dt_share >= 0.5) or (numeric_share < 0.95 and dt_share >= TIME_MIN_SHARE):
                time_col = c
                why = "the name suggests a time and " if time_hint else ""
                failed = round((1 - dt_share) * len(filled))
                extra = "" if failed == 0 else (
                    f"; {failed} of {len(filled)} sampled values do not parse, their items get no arrival time "
                    "(never scored as the newest)")
                reasons[c] = f"the arrival time: {why}{_pct(dt_share)} of values parse as dates{extra}"
                continue
        if numeric_share >= 0.95:
            if distinct == 1:
                reasons[c] = "left out: one value only in the sample"
                continue
            specs.append(FieldSpec(name=c, role=FieldRole.NUMBER))
            extra = "" if numeric_share == 1 else "; rows holding text here will be rejected on import"
            reasons[c] = f"number: {_pct(numeric_share)} of non-empty values are numbers{extra}"
            continue
        if distinct == 1:
            reasons[c] = "left out: one value only in the sample"
            continue
        mean_len = float(filled.str.len().mean())
        spaced = float(filled.str.contains(r"\s", regex=True).mean())
        # short codes of letters (package names, product models, e-mail domains): their words rarely repeat,
        # but their character grams do ("python3-requests", "python3-numpy"); numeric codes share nothing useful
        code_like = mean_len < TEXT_MIN_MEAN_CHARS and spaced < 0.1 and _letter_share(filled) >= 0.5
        if code_like and (distinct == len(filled) or distinct > MAX_CATEGORIES and unique_share > 0.2):
            specs.append(FieldSpec(name=c, role=FieldRole.TEXT, weight=1.0, pieces="grams"))
            reasons[c] = (
                f"short code-like text (mean {mean_len:.0f} characters, {_pct(unique_share)} distinct, mostly "
                "letters, no spaces): counted as character 3-5-grams inside words (pieces = \"grams\"), so codes "
                "sharing a stem share evidence; weight 1.0"
            )
            continue
        if distinct == len(filled) and mean_len < TEXT_MIN_MEAN_CHARS and spaced < 0.1:
            reasons[c] = "left out: every value is distinct, short and without spaces (a code, not the id)"
            continue
        # words, not codes: most values hold several words and there are many of them (subjects, job titles);
        # as text, "VP Operations" and "VP of Operations" share evidence, as categories they would not
        wordy = spaced >= 0.5 and distinct > 30
        if mean_len >= TEXT_MIN_MEAN_CHARS or (unique_share > 0.5 and distinct > 30) or wordy:
            if mean_len >= LONG_TEXT_CHARS:
                specs.append(FieldSpec(name=c, role=FieldRole.TEXT, weight=1.0))
                reasons[c] = f"long text (mean {mean_len:.0f} characters), weight 1.0"
            else:
                specs.append(FieldSpec(name=c, role=FieldRole.TEXT, weight=SHORT_TEXT_WEIGHT))
                reasons[c] = (
                    f"short text (mean {mean_len:.0f} characters, {_pct(unique_share)} distinct), "
                    f"weight {SHORT_TEXT_WEIGHT}"
                )
            continue
        if distinct <= MAX_CATEGORIES or unique_share <= 0.2:
            specs.append(FieldSpec(name=c, role=FieldRole.CATEGORY))
            reasons[c] = f"category: {distinct} distinct values"
            continue
        reasons[c] = (
            f"left out: {distinct} distinct short values (mean {mean_len:.0f} characters), "
            "too many for a category and too short for text"
        )

    if not specs:
        raise IngestError(
            f"{source}: no column could serve as a text, category or number field; "
            + "; ".join(f"{c}: {r}" for c, r in reasons.items())
        )

    queues: dict[str, QueueSettings] = {}
    text_cols = [f.name for f in specs if f.role is FieldRole.TEXT]
    texts = [" ".join(frame[c].iat[i] for c in text_cols) for i in range(n)]
    labels = list(frame[label_col])
    for q in sorted({v for v in frame[label_col] if v}):
        norm = re.sub(r"[^a-z0-9]+", "_", q.lower())
        hit = next((w for w in SAFETY_WORDS if w in norm), None)
        if hit:
            queues[q] = QueueSettings(target_precision=SAFETY_PRECISION, never_auto=True)
            reasons[f"queues.{q}"] = (
                f"queue {q!r} sounds like {hit.replace('_', '-')}: never auto-routed, "
                f"target precision {SAFETY_PRECISION}"
            )
            reasons[f"queues.{q}.watch_words"] = _watch_note(q, propose_watch_words(texts, labels, q),
                                                             labels.count(q))

    schema = Schema(fields=tuple(specs), id=id_col, label=label_col, time=time_col)
    return Config(schema=schema, queues=queues), reasons


WATCH_NONE = "no watch words proposed"


def _watch_note(queue: str, words: list[tuple[str, int, int]], n_items: int) -> str:
    """The reason line for a never-auto queue's watch words: the proposals to review, or plainly none."""
    if not words:
        return (f"{WATCH_NONE}: no word start is clearly typical of the {n_items} sampled {queue!r} items; "
                "until you add watch_words, only the model guards this queue")
    listed = ", ".join(f'"{w}"' for w, _a, _b in words)
    detail = "; ".join(f"{w}: {a} of its items, {b} others" for w, a, b in words)
    return (f"suggested watch_words = [{listed}] (word starts most typical of {queue!r}: {detail}); review "
            "them and uncomment the line in triage.toml, they are not active yet")
