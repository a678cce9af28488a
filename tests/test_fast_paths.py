"""The fast paths give exactly what the general paths give.

Reference: the general Unicode pattern of the tokenizer (itself checked in test_tokens.py against Unicode's
NFKC and case-folding tables) and the two-pass fit-then-transform of the encoder.
"""

from __future__ import annotations

import random
import string
import unicodedata

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from triage.core import tokens as T
from triage.core.encode import Encoder
from triage.core.schema import FieldRole, FieldSpec, Schema


def _general_words(text: str, cap: int = 40) -> list[str]:
    """The tokenizer's Unicode path, applied whatever the text holds."""
    if not text:
        return []
    text = unicodedata.normalize("NFKC", text).casefold()
    out: list[str] = []
    for tok in T._TOKEN.findall(text):
        if tok.isalpha():
            out.append(tok[:cap])
        elif tok.startswith(("http://", "https://", "www.")):
            out.append(T.URL)
        elif "@" in tok:
            out.append(T.EMAIL)
        else:
            out.extend(T._classify(tok, cap))
    return out


ASCII_SOUP = string.ascii_letters + string.digits + " .,-/@:_%+<>'\"()[]\t\n" + "www." + "http://"


@settings(max_examples=400, deadline=None)
@given(st.text(alphabet=st.sampled_from(list(ASCII_SOUP)), max_size=80))
def test_ascii_path_equals_unicode_path(text: str) -> None:
    assert T.Tokenizer().words(text) == _general_words(text)


def test_ascii_path_on_ticket_like_text() -> None:
    rnd = random.Random(3)
    samples = ["Order VW-104233 charged twice, see https://pay.example/x?id=9 or mail a.b@c.example",
               "Paid 1,299.50 on 12/03; acct 10442311 self-serve 4G v2 hc15", "", "   "]
    samples += ["".join(rnd.choice(ASCII_SOUP) for _ in range(rnd.randint(0, 120))) for _ in range(2000)]
    tok = T.Tokenizer()
    for s in samples:
        assert tok.words(s) == _general_words(s), s


SCHEMA = Schema(fields=(FieldSpec("subject", FieldRole.TEXT, weight=2.0), FieldSpec("body", FieldRole.TEXT),
                        FieldSpec("channel", FieldRole.CATEGORY), FieldSpec("n", FieldRole.NUMBER, bins=3)),
                id="id", label="q")

words = st.sampled_from(["refund", "invoice", "smoke", "app", "login", "Ünïcode", "VW-104233", "12", "a", "b"])
item = st.fixed_dictionaries({
    "subject": st.lists(words, max_size=4).map(" ".join),
    "body": st.one_of(st.none(), st.lists(words, max_size=12).map(" ".join)),
    "channel": st.one_of(st.none(), st.sampled_from(["email", "phone"])),
    "n": st.one_of(st.none(), st.floats(0, 100)),
})


@settings(max_examples=150, deadline=None)
@given(st.lists(item, min_size=1, max_size=25), st.integers(1, 3), st.one_of(st.none(), st.integers(1, 6)),
       st.booleans())
def test_fit_transform_equals_fit_then_transform(items, min_count, max_vocab, bigrams) -> None:
    a = Encoder(SCHEMA, T.Tokenizer(bigrams=bigrams), min_count=min_count, max_vocab=max_vocab)
    batch_a = a.fit_transform(items)
    b = Encoder(SCHEMA, T.Tokenizer(bigrams=bigrams), min_count=min_count, max_vocab=max_vocab).fit(items)
    batch_b = b.transform(items)
    assert a.terms_ == b.terms_
    assert (batch_a.X != batch_b.X).nnz == 0
    assert np.array_equal(batch_a.codes, batch_b.codes)


def test_a_pruned_vocabulary_does_not_grow_so_training_items_stay_consistent() -> None:
    """After pruning at fit, a word dropped there must not come back through a correction: the training items
    holding it were counted without it, so forgetting them would fail (found by a property test)."""
    from triage.core.model import ModelSpec, NaiveBayes

    items = [{"subject": "refund", "body": "rare", "channel": "email", "n": 1.0},
             {"subject": "refund", "body": "", "channel": "email", "n": 2.0},
             {"subject": "login", "body": "", "channel": "phone", "n": 3.0},
             {"subject": "login", "body": "", "channel": "phone", "n": 4.0}]
    labels = ["billing", "billing", "app", "app"]
    model = NaiveBayes.fit(SCHEMA, items, labels, ModelSpec(min_count=2))
    assert "rare" not in model.encoder.vocabulary_ and model.encoder.pruned_
    model.learn({"subject": "rare words", "body": "", "channel": "fax", "n": 5.0}, "billing")
    assert "rare" not in model.encoder.vocabulary_  # no word growth after pruning
    assert "fax" in model.encoder.level_index_["channel"]  # category values still grow
    model.relabel(items[0], "billing", "app")  # the training item holding the pruned word can still move
    fresh = NaiveBayes.fit(SCHEMA, items + [{"subject": "rare words", "body": "", "channel": "fax", "n": 5.0}],
                           ["app", "billing", "app", "app", "billing"], ModelSpec(min_count=2),
                           encoder=model.encoder)
    batch = model.encoder.transform(items, allow_missing=True)
    got, want = model.joint_log_likelihood(batch), fresh.joint_log_likelihood(batch)
    order = [fresh.queues.index(q) for q in model.queues]
    assert np.allclose(got, want[:, order], atol=1e-9)
