"""Character grams of short code-like text fields: the same grams as scikit-learn's `char_wb` analyzer.

Reference: scikit-learn's CountVectorizer(analyzer="char_wb", ngram_range=(3, 5)) (lower-cases, then grams inside
word boundaries padded with one space). Texts: the cookies of Debian's package `fortunes` (an open dataset; the
ASCII ones, where our NFKC casefolding is plain lower-casing as scikit-learn's) and package names as Debian's own
index spells them (from memory: typical names of the index, e.g. "python3-requests").
"""

from __future__ import annotations

from collections import Counter
from pathlib import Path

import numpy as np
import pytest
from sklearn.feature_extraction.text import CountVectorizer

from triage.config import ConfigError, config_from_dict, dump_config
from triage.core.encode import Encoder
from triage.core.schema import FieldRole, FieldSpec, Schema
from triage.core.tokens import GRAM_MARK, Tokenizer, grams, is_bigram

FORTUNES = Path("/usr/share/games/fortunes")
NAMES = ["python3-requests", "libc6-dev", "golang-github-stretchr-testify-dev", "0ad", "r-cran-ggplot2",
         "fonts-noto-cjk", "x", "ab", "gcc-12  multilib", "node-babel7\tcore"]
REFERENCE = CountVectorizer(analyzer="char_wb", ngram_range=(3, 5))


def _cookies() -> list[str]:
    if not (FORTUNES / "computers").is_file():
        pytest.skip(f"{FORTUNES}/computers is absent: install the open dataset with `apt-get install fortunes`")
    text = (FORTUNES / "computers").read_text(encoding="utf-8", errors="replace")
    return [c.strip() for c in text.split("\n%\n") if c.strip() and c.isascii()][:300]


def _ours(text: str) -> list[str]:
    out = grams(text)
    assert all(g.startswith(GRAM_MARK) for g in out)
    return [g[len(GRAM_MARK):] for g in out]


def test_grams_equal_char_wb_on_package_names() -> None:
    analyze = REFERENCE.build_analyzer()
    for name in NAMES:
        assert _ours(name) == analyze(name), name  # same grams, same order


def test_grams_equal_char_wb_on_fortunes_cookies() -> None:
    analyze = REFERENCE.build_analyzer()
    cookies = _cookies()
    assert len(cookies) > 100
    for text in cookies:
        assert Counter(_ours(text)) == Counter(analyze(text))


def test_encoder_counts_equal_char_wb_counts() -> None:
    """A field counted as grams gives the count matrix CountVectorizer(char_wb) gives, column for column."""
    texts = _cookies()[:120] + NAMES
    schema = Schema(fields=(FieldSpec("name", FieldRole.TEXT, pieces="grams"),), id="id", label="q")
    enc = Encoder(schema, Tokenizer())
    X = enc.fit_transform([{"name": t} for t in texts]).X.toarray()
    ref = REFERENCE.fit(texts)
    R = ref.transform(texts).toarray()
    ours_terms = [t[len(GRAM_MARK):] for t in enc.terms_]
    assert sorted(ours_terms) == sorted(ref.get_feature_names_out())
    cols = [ref.vocabulary_[t] for t in ours_terms]
    np.testing.assert_array_equal(X, R[:, cols])


def test_words_and_grams_are_kept_apart() -> None:
    """A three-letter word and the gram of the same letters are two terms; grams are never taken for bigrams."""
    tok = Tokenizer(bigrams=True)
    pieces = tok.pieces("abc de", "words+grams")
    assert "abc" in pieces and GRAM_MARK + "abc" in pieces
    assert "abc de" in pieces and is_bigram("abc de")
    assert not any(is_bigram(p) for p in pieces if p.startswith(GRAM_MARK))
    assert tok.pieces("abc", "words") == ["abc"]


def test_pieces_in_the_config_round_trip_and_a_bad_value_names_the_key() -> None:
    data = {"data": {"id": "id", "label": "q"},
            "fields": {"name": {"role": "text", "pieces": "grams"}, "body": {"role": "text"}}}
    cfg = config_from_dict(data)
    assert cfg.schema.field("name").pieces == "grams" and cfg.schema.field("body").pieces == "words"
    assert 'pieces = "grams"' in dump_config(cfg)
    data["fields"]["name"]["pieces"] = "char_wb"
    with pytest.raises(ConfigError, match=r"fields\.name\.pieces"):
        config_from_dict(data)
