"""Tokenizer: Unicode words, with placeholders so that variable parts (links, addresses, numbers, ids) share evidence.

One `regex.findall` pass finds candidate tokens; a cheap per-token check then maps links, e-mail addresses,
numbers and long identifiers to one placeholder each. Doing the classification outside the pattern keeps the
pattern free of capture groups, which is what makes `findall` fast.
"""

from __future__ import annotations

import re
import unicodedata
from dataclasses import dataclass

import regex

URL = "<url>"
EMAIL = "<email>"
NUMBER = "<num>"
IDENT = "<id>"
PLACEHOLDERS = (URL, EMAIL, NUMBER, IDENT)

# Links, e-mail addresses, then words of letters/marks/digits in any script, joined by - or / when the joined
# parts look like one code (order numbers such as "VW-104233" or "2026/118").
_TOKEN = regex.compile(
    r"(?:https?://|www\.)[^\s<>\"'()\[\]]+"
    r"|[\p{L}\p{N}._%+\-]+@[\p{L}\p{N}\-]+(?:\.[\p{L}\p{N}\-]+)+"
    r"|\p{N}+(?:[.,]\p{N}+)+"
    r"|[\p{L}\p{M}\p{N}]+(?:[\-/][\p{L}\p{M}\p{N}]+)*",
    regex.VERSION1,
)
# The same pattern without the link and e-mail branches, which cannot match in a text holding none of "://",
# "www." and "@": on such texts (most of them) findall gives the same tokens, without trying those branches
# at every word.
_TOKEN_PLAIN = regex.compile(
    r"\p{N}+(?:[.,]\p{N}+)+"
    r"|[\p{L}\p{M}\p{N}]+(?:[\-/][\p{L}\p{M}\p{N}]+)*",
    regex.VERSION1,
)
# On pure-ASCII text (most tickets) the same patterns reduce to ASCII classes: NFKC and casefold are plain
# lower-casing there, and the standard library's `re` runs them about three times faster than `regex` runs the
# Unicode classes. tests/test_tokens.py checks both paths give identical tokens.
_ASCII_TOKEN = re.compile(
    r"(?:https?://|www\.)[^\s<>\"'()\[\]]+"
    r"|[a-z0-9._%+\-]+@[a-z0-9\-]+(?:\.[a-z0-9\-]+)+"
    r"|[0-9]+(?:[.,][0-9]+)+"
    r"|[a-z0-9]+(?:[\-/][a-z0-9]+)*"
)
_ASCII_PLAIN = re.compile(r"[0-9]+(?:[.,][0-9]+)+|[a-z0-9]+(?:[\-/][a-z0-9]+)*")
_NUMERIC = regex.compile(r"[\d.,]+")
_JOINER = re.compile(r"[\-/]")
_LONG_ID_DIGITS = 6  # a run of this many digits reads as an account/order number, not a quantity
GRAM_MARK = "~"  # a character gram's term starts so: no word does, so a gram never shares a word's count
GRAM_SIZES = (3, 5)
_SPACES = re.compile(r"\s\s+")


@dataclass(frozen=True)
class Tokenizer:
    """Turns text into tokens; deterministic, and empty or missing text gives zero tokens.

    `bigrams` adds adjacent word pairs ("not working") after the single words; `max_token_chars` cuts very long
    tokens (base64 blobs, hashes) so they cannot blow up the vocabulary.
    """

    bigrams: bool = False
    max_token_chars: int = 40

    def words(self, text: str | None) -> list[str]:
        """Single tokens, placeholders applied, in text order."""
        if not text or not isinstance(text, str):
            return []
        ascii_text = text.isascii()
        text = text.lower() if ascii_text else unicodedata.normalize("NFKC", text).casefold()
        out: list[str] = []
        cap = self.max_token_chars
        plain = "@" not in text and "://" not in text and "www." not in text
        if ascii_text:
            pattern = _ASCII_PLAIN if plain else _ASCII_TOKEN
        else:
            pattern = _TOKEN_PLAIN if plain else _TOKEN
        append = out.append
        for tok in pattern.findall(text):
            if tok.isalpha():  # the common case first: a word of letters is never a link or an address
                append(tok[:cap])
            elif tok.startswith(("http://", "https://", "www.")):
                append(URL)
            elif "@" in tok:
                append(EMAIL)
            else:
                out.extend(_classify(tok, cap))
        return out

    def tokens(self, text: str | None) -> list[str]:
        """Words plus, when enabled, bigrams ("a b")."""
        words = self.words(text)
        if self.bigrams and len(words) > 1:
            return words + [f"{a} {b}" for a, b in zip(words, words[1:], strict=False)]
        return words

    def pieces(self, text: str | None, kind: str = "words") -> list[str]:
        """What a text field of `kind` (schema.PIECES) is counted as: tokens, grams, or tokens then grams."""
        if kind == "words":
            return self.tokens(text)
        if kind == "grams":
            return grams(text)
        return self.tokens(text) + grams(text)


def grams(text: str | None, lo: int = GRAM_SIZES[0], hi: int = GRAM_SIZES[1]) -> list[str]:
    """Character lo..hi-grams inside word boundaries, each marked with GRAM_MARK.

    The same grams as scikit-learn's `CountVectorizer(analyzer="char_wb")` on lower-cased text (its
    `_char_wb_ngrams`: runs of white space become one space, each white-space-separated word is padded with one
    space on each side, and a word shorter than a size gives its padded self once and no longer grams);
    tests/test_tokens.py checks it against that analyzer. Hand-written rather than calling scikit-learn per
    item because a correction tokenises one item, where a vectorizer object costs more than the work; and the
    text is NFKC-casefolded first like the words (plain lower-casing on ASCII text, as scikit-learn does)."""
    if not text or not isinstance(text, str):
        return []
    text = text.lower() if text.isascii() else unicodedata.normalize("NFKC", text).casefold()
    out: list[str] = []
    append = out.append
    for word in _SPACES.sub(" ", text).split():
        w = f" {word} "
        size = len(w)
        for n in range(lo, hi + 1):
            if n >= size:
                append(GRAM_MARK + w)
                break
            for start in range(size - n + 1):
                append(GRAM_MARK + w[start:start + n])
    return out


def is_bigram(term: str) -> bool:
    """A word pair ("not working"), as opposed to a word or a character gram (which may hold spaces)."""
    return " " in term and not term.startswith(GRAM_MARK)


def _classify(tok: str, cap: int) -> list[str]:
    """Tokens that hold digits or joiners: numbers, identifiers, or joined parts to look at one by one."""
    digits = sum(ch.isdigit() for ch in tok)
    if digits >= _LONG_ID_DIGITS - 1 and not _NUMERIC.fullmatch(tok):
        return [IDENT]  # "VW-104233", "ord-2026-0012", "a1b2c3d4e5"
    if _NUMERIC.fullmatch(tok):
        plain = digits == len(tok)
        return [IDENT if plain and digits >= _LONG_ID_DIGITS else NUMBER]
    if "-" in tok or "/" in tok:
        out: list[str] = []
        for part in _JOINER.split(tok):
            if part:
                out.extend([part[:cap]] if part.isalpha() else _classify(part, cap))
        return out
    return [tok[:cap]]  # short codes such as "4g", "v2", "hc15" stay as they are
