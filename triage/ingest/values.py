"""One cell at a time: a raw value made into text, a category, a number, a key, a label or a time, or refused
with the reason a person can act on.
"""

from __future__ import annotations

import math
import re
import unicodedata
import warnings
from datetime import UTC, date, datetime
from typing import Any

import pandas as pd


class BadValue(Exception):
    """Raised inside row checks; becomes a Reject for that row and field."""

    def __init__(self, field_name: str | None, reason: str) -> None:
        super().__init__(reason)
        self.field_name = field_name
        self.reason = reason


# what exports write for "no value" in a number column; read as missing (the field's missing bin), not as text.
# Compared case-folded. Common practice (pandas' default NA strings overlap), no single source.
MISSING_MARKERS = frozenset({"", "n/a", "na", "nan", "-", "--", "null", "none", "#n/a"})


MAX_DIGITS = 200  # a JSON integer longer than this is no id, count or measurement (Python will not print past 4300)


class _TooManyDigits(str):
    """A JSON integer of more than MAX_DIGITS digits, kept as its text so that only the row check touches it."""


def parse_int(text: str) -> int | str:
    return int(text) if len(text.lstrip("-")) <= MAX_DIGITS else _TooManyDigits(text)


def unusable(v: Any) -> str | None:
    """Why no store, JSON answer or rejects file can hold `v`, or None."""
    if isinstance(v, _TooManyDigits) or (isinstance(v, int) and v.bit_length() > 3.33 * MAX_DIGITS):
        return f"is an integer of more than {MAX_DIGITS} digits"
    if isinstance(v, str):
        try:
            v.encode("utf-8")
        except UnicodeEncodeError:
            return "holds a lone surrogate (such as \\ud800), which is not a character; send valid Unicode"
    return None


def printable(v: Any) -> Any:
    """`v` with what cannot be written as UTF-8 JSON made visible (for the rejects file and error records)."""
    if isinstance(v, dict):
        return {printable(k): printable(x) for k, x in v.items()}
    if isinstance(v, list | tuple):
        return [printable(x) for x in v]
    if isinstance(v, _TooManyDigits) or (isinstance(v, int) and v.bit_length() > 3.33 * MAX_DIGITS):
        return f"<an integer of more than {MAX_DIGITS} digits>"
    if isinstance(v, str):
        return v.encode("utf-8", "backslashreplace").decode("utf-8")
    return v


def is_missing(v: Any) -> bool:
    if v is None:
        return True
    if isinstance(v, float) and math.isnan(v):
        return True
    return v is pd.NA or v is pd.NaT


def kind_of(v: Any) -> str:
    """A user-facing name for a JSON value's type."""
    if isinstance(v, dict):
        return "an object"
    if isinstance(v, list | tuple):
        return "a list"
    if isinstance(v, bool):
        return "a boolean"
    return type(v).__name__


def scalar_text(v: Any) -> str:
    """Scalars from JSON/Parquet as the text a CSV export would hold."""
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, float) and v.is_integer():
        return str(int(v)) if abs(v) < 2**53 else repr(v)
    if isinstance(v, datetime | date):
        return v.isoformat()
    if isinstance(v, bytes):
        return v.decode("utf-8", errors="replace")
    return str(v)


def as_text(v: Any, name: str) -> str:
    if is_missing(v):
        return ""
    if isinstance(v, str):
        return v
    if isinstance(v, dict | list | tuple):
        raise BadValue(name, f"is {kind_of(v)}, expected text")
    return scalar_text(v)


def as_category(v: Any, name: str) -> str | None:
    if is_missing(v):
        return None
    if isinstance(v, dict | list | tuple):
        raise BadValue(name, f"is {kind_of(v)}, expected a single value")
    s = (v if isinstance(v, str) else scalar_text(v)).strip()
    return s or None


def _grouped(s: str, thousands: str) -> str | None:
    """'1,200.50' with thousands=',' -> '1200.50' (with '.', the decimal mark is ','); None when the grouping
    is not well formed, so '1,2,3' stays an error instead of becoming 123."""
    decimal = "," if thousands == "." else "."
    sep, dec = re.escape(thousands), re.escape(decimal)
    if not re.fullmatch(rf"[+-]?\d{{1,3}}({sep}\d{{3}})+({dec}\d+)?", s):
        return None
    return s.replace(thousands, "").replace(decimal, ".")


def as_number(v: Any, name: str, thousands: str | None = None) -> float | None:
    if is_missing(v):
        return None
    if isinstance(v, bool) or isinstance(v, dict | list | tuple):
        raise BadValue(name, f"is {kind_of(v)}, expected a number")
    if isinstance(v, int | float):
        if isinstance(v, float) and math.isnan(v):
            return None
        x = float(v)
    else:
        s = str(v).strip()
        if s.casefold() in MISSING_MARKERS:
            return None
        try:
            x = float(s)
        except ValueError:
            plain = _grouped(s, thousands) if thousands else None
            if plain is None:
                hint = "" if thousands or not re.fullmatch(r"[+-]?\d{1,3}(,\d{3})+(\.\d+)?", s) else \
                    " (set thousands = \",\" for this field in triage.toml to read 1,200 as 1200)"
                raise BadValue(name, f"{s!r} is not a number{hint}") from None
            x = float(plain)
        if math.isnan(x):
            return None  # "NaN" is how some exports write a missing value
    if not math.isfinite(x):
        raise BadValue(name, f"{v!r} is not a finite number")
    return x


def as_key(v: Any, name: str, what: str) -> str | None:
    """An id or label: a stripped string, None when empty."""
    if is_missing(v):
        return None
    if isinstance(v, bool) or isinstance(v, dict | list | tuple):
        raise BadValue(name, f"is {kind_of(v)}, expected {what}")
    s = (v if isinstance(v, str) else scalar_text(v)).strip()
    return s or None


def as_label(v: Any, name: str) -> str | None:
    """A queue name; a control character (a NUL or a tab from a broken export) is refused, since such a
    name would make a queue of its own that no person can tell from the real one."""
    label = as_key(v, name, "a queue name")
    if label is not None:
        bad = next((c for c in label if unicodedata.category(c) == "Cc"), None)
        if bad is not None:
            raise BadValue(name, f"the queue name {label!r} holds a control character (U+{ord(bad):04X})")
    return label


class BadTime(Exception):
    """A time cell that is not a date and time; the row is kept without an arrival time."""


def parse_time(s: str) -> str | None:
    """An arrival time as ISO 8601 text, or None when it is not a date and time.

    ISO text is kept as written; anything else pandas can read ("03/01/2024 09:00", "1 Mar 2024") is
    rewritten as ISO so times sort correctly as text. Words ("yesterday", "now") are refused, not read
    relative to today."""
    try:
        datetime.fromisoformat(s)
        return s
    except ValueError:
        pass
    if not any(ch.isdigit() for ch in s):
        return None
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            ts = pd.to_datetime(s)
    except (ValueError, TypeError, OverflowError):
        return None
    if ts is pd.NaT or pd.isna(ts):
        return None
    dt = ts.to_pydatetime()
    if dt.tzinfo is not None:
        dt = dt.astimezone(UTC)
    return dt.isoformat()


def as_time(v: Any, name: str) -> str | None:
    if is_missing(v):
        return None
    if isinstance(v, datetime | date):
        return v.isoformat()
    if isinstance(v, dict | list | tuple):
        raise BadValue(name, f"is {kind_of(v)}, expected a date and time")
    s = (v if isinstance(v, str) else scalar_text(v)).strip()
    if not s:
        return None
    parsed = parse_time(s)
    if parsed is None:
        raise BadTime(s)
    return parsed


def label_key(label: str) -> str:
    """What two queue names share when they differ only by case, spacing or number format."""
    try:
        x = float(label)
        if math.isfinite(x):
            return repr(x)
    except ValueError:
        pass
    return re.sub(r"\s+", "", label.casefold())


def similar_labels(counts: dict[str, int]) -> list[list[tuple[str, int]]]:
    """Groups of queue names that differ only by case, spacing or number format ('Network', 'NETWORK';
    '1', '1.0'), each name with its count, most frequent first."""
    groups: dict[str, list[tuple[str, int]]] = {}
    for name, n in counts.items():
        groups.setdefault(label_key(name), []).append((name, n))
    return [sorted(g, key=lambda t: (-t[1], t[0])) for g in groups.values() if len(g) > 1]


def describe_similar(source: str, group: list[tuple[str, int]]) -> str:
    """The warning for one group of look-alike queue names, with a [labels] line that would merge them."""
    names = ", ".join(f"{name!r} ({n})" for name, n in group)
    keep = group[0][0]
    example = "; ".join(f'"{name}" = "{keep}"' for name, _ in group[1:])
    return (f"{source}: queue names that differ only by case, spacing or number format: {names}; they stay "
            f"separate queues unless [labels] in triage.toml maps them, e.g. {example}")
