"""The tokenizer: Unicode words in any script, NFKC + case folding, placeholders, bigrams, the length cap.

Normalisation expectations are taken from the Unicode Standard itself, named beside each check:
UAX #15 (Unicode Normalization Forms) for NFKC, CaseFolding.txt (Unicode Character Database) for full case
folding, and the General Category property (UnicodeData.txt) for letters versus combining marks.
"""

from __future__ import annotations

import unicodedata

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from triage.core.tokens import EMAIL, IDENT, NUMBER, PLACEHOLDERS, URL, Tokenizer

TOK = Tokenizer()


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        # Latin with diacritics, Greek, Cyrillic, Arabic, Hebrew: space-separated words, one token each
        ("Café déjà vu", ["café", "déjà", "vu"]),
        ("Привет мир", ["привет", "мир"]),
        ("مرحبا بالعالم", ["مرحبا", "بالعالم"]),
        ("שלום עולם", ["שלום", "עולם"]),
        # Devanagari: the virama (U+094D) and vowel sign E (U+0947) are combining marks (General Category Mn,
        # UnicodeData.txt); a word split at marks would fall apart into letters
        ("नमस्ते दुनिया", ["नमस्ते", "दुनिया"]),
        # Han and kana have no spaces; without a dictionary segmenter a run of them stays one token
        ("東京 タワー", ["東京", "タワー"]),
    ],
)
def test_words_in_several_scripts(text: str, expected: list[str]) -> None:
    assert TOK.words(text) == expected


def test_nfkc_and_casefold() -> None:
    # UAX #15, compatibility decomposition: U+FB01 LATIN SMALL LIGATURE FI -> "fi";
    # fullwidth U+FF21.. (FULLWIDTH LATIN CAPITAL LETTER A..) -> ASCII; U+2460 CIRCLED DIGIT ONE -> "1"
    assert TOK.words("ﬁle") == ["file"]
    assert TOK.words("ＡＢＣ") == ["abc"]
    assert TOK.words("\u2460") == [NUMBER]
    # UAX #15: NFKC composes "e" + U+0301 COMBINING ACUTE ACCENT into U+00E9, so both spellings are one token
    assert TOK.words("cafe\u0301") == TOK.words("caf\u00e9") == ["caf\u00e9"]
    # CaseFolding.txt: U+00DF LATIN SMALL LETTER SHARP S folds to "ss" (full folding, status F);
    # U+03A3 GREEK CAPITAL SIGMA and U+03C2 FINAL SIGMA both fold to U+03C3
    assert TOK.words("STRASSE Straße") == ["strasse", "strasse"]
    assert TOK.words("ΣΊΣΥΦΟΣ σίσυφος") == ["σίσυφοσ", "σίσυφοσ"]
    # Kelvin sign U+212A: NFKC maps it to "K", folding to "k" (UAX #15 / CaseFolding.txt)
    assert TOK.words("\u212a") == ["k"]


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("see https://example.com/a?b=1 now", ["see", URL, "now"]),
        ("HTTP://EXAMPLE.ORG", [URL]),
        ("at www.example.com.", ["at", URL]),
        ("mail John.Doe@example.com today", ["mail", EMAIL, "today"]),
        ("user+tag@mail.example.co.uk", [EMAIL]),
        ("3 panels, 12.5 kW, 1,000 euros", [NUMBER, "panels", NUMBER, "kw", NUMBER, "euros"]),
        ("12345", [NUMBER]),  # five digits: a quantity
        ("123456", [IDENT]),  # six digits: an account or order number
        ("order VW-104233 late", ["order", IDENT, "late"]),
        ("ref ord-2026-0012", ["ref", IDENT]),
        ("case 2026/118", ["case", IDENT]),
        ("hash a1b2c3d4e5", ["hash", IDENT]),
        ("covid-19 wi-fi", ["covid", NUMBER, "wi", "fi"]),
        ("4g v2 modem", ["4g", "v2", "modem"]),
    ],
)
def test_placeholders(text: str, expected: list[str]) -> None:
    assert TOK.words(text) == expected


def test_bigrams_follow_the_words() -> None:
    tok = Tokenizer(bigrams=True)
    assert tok.tokens("Battery not charging") == [
        "battery", "not", "charging", "battery not", "not charging",
    ]
    assert tok.tokens("alone") == ["alone"]
    assert Tokenizer().tokens("battery not charging") == ["battery", "not", "charging"]
    # bigrams are built from placeholders too
    assert tok.tokens("order VW-104233") == ["order", IDENT, f"order {IDENT}"]


def test_length_cap() -> None:
    blob = "q" * 100
    assert TOK.words(blob) == ["q" * 40]
    assert Tokenizer(max_token_chars=8).words(f"{blob} ok") == ["q" * 8, "ok"]
    # a short code with digits is cut as well
    assert Tokenizer(max_token_chars=4).words("abc1defg") == ["abc1"]


@pytest.mark.parametrize("text", [None, "", "   ", "\n\t", "!!! ... ---", 17, 3.5])
def test_empty_or_missing_text_gives_no_tokens(text: object) -> None:
    assert TOK.tokens(text) == []  # type: ignore[arg-type]
    assert Tokenizer(bigrams=True).tokens(text) == []  # type: ignore[arg-type]


@settings(max_examples=200, deadline=None)
@given(st.text(max_size=120), st.booleans(), st.integers(min_value=1, max_value=50))
def test_tokens_are_well_formed_and_deterministic(text: str, bigrams: bool, cap: int) -> None:
    tok = Tokenizer(bigrams=bigrams, max_token_chars=cap)
    out = tok.tokens(text)
    assert out == tok.tokens(text) == Tokenizer(bigrams=bigrams, max_token_chars=cap).tokens(text)
    words = tok.words(text)
    assert out[: len(words)] == words
    if bigrams and len(words) > 1:
        assert len(out) == 2 * len(words) - 1
    for w in words:
        assert w  # never an empty token
        assert not any(ch.isspace() for ch in w)
        assert w in PLACEHOLDERS or len(w) <= cap
        # every word is already NFKC-normalised and case-folded (or a placeholder)
        assert w in PLACEHOLDERS or unicodedata.normalize("NFKC", w) == w


@settings(max_examples=100, deadline=None)
@given(st.lists(st.text(alphabet="abcdefghijklmnopqrstuvwxyz", min_size=1, max_size=10), max_size=10))
def test_ascii_case_does_not_matter(ws: list[str]) -> None:
    text = " ".join(ws)
    assert TOK.words(text.upper()) == TOK.words(text) == ws
