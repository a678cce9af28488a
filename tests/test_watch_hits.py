"""Watch-word matching by a set of word prefixes equals its definition, on any words and entries (hypothesis).

Reference: the rule as the README states it (an entry matches when every one of its parts starts one of the
item's words), written out directly with str.startswith below.
"""

from __future__ import annotations

from hypothesis import given, settings
from hypothesis import strategies as st

from triage.core.routing import plain_words, watch_hits

LETTERS = st.text(alphabet="abcdeé'-", min_size=1, max_size=6)


def by_definition(words: set[str], watch: dict[str, list[str]]) -> list[str]:
    return [f"{q}: {e}" for q, entries in watch.items() for e in entries
            if plain_words(e) and all(any(w.startswith(p) for w in words) for p in plain_words(e))]


@settings(max_examples=300, deadline=None)
@given(st.sets(LETTERS, max_size=8),
       st.dictionaries(st.sampled_from(["safety", "security"]),
                       st.lists(st.lists(LETTERS, min_size=1, max_size=3).map(" ".join), max_size=4), max_size=2))
def test_prefix_matching_equals_the_definition(words, watch) -> None:
    words = {w for text in words for w in plain_words(text)}
    assert watch_hits(words, watch) == by_definition(words, watch)


def test_examples() -> None:
    watch = {"safety": ["burn", "carbon monox", "can't breathe"]}
    assert watch_hits(set(plain_words("it was burning, and carbon monoxide")), watch) == [
        "safety: burn", "safety: carbon monox"]
    assert watch_hits(set(plain_words("I can't breathe")), watch) == ["safety: can't breathe"]
    assert watch_hits(set(plain_words("bur carbon")), watch) == []
