"""An open dataset: the Debian package `fortunes` (one category per file, cookies separated by lines "%").

Our model's test accuracy must equal a scikit-learn pipeline's (CountVectorizer with our tokenizer as analyzer,
so both see the same tokens, then the matching naive Bayes classifier with the same alpha) on one fixed
stratified split, within 0.5 accuracy points.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from sklearn.feature_extraction.text import CountVectorizer
from sklearn.model_selection import train_test_split
from sklearn.naive_bayes import BernoulliNB, ComplementNB, MultinomialNB

from triage.core.model import ModelSpec, NaiveBayes
from triage.core.schema import FieldRole, FieldSpec, Schema
from triage.core.tokens import Tokenizer

FORTUNES = Path("/usr/share/games/fortunes")  # where the Debian package `fortunes` installs its data
CATEGORIES = ("computers", "definitions", "people", "politics", "science", "songs-poems")
SCHEMA = Schema(fields=(FieldSpec("text", FieldRole.TEXT),), id="id", label="category")
TOLERANCE = 0.005  # 0.5 accuracy points


def _cookies(path: Path) -> list[str]:
    text = path.read_text(encoding="utf-8", errors="replace")
    out, cur = [], []
    for line in text.splitlines():
        if line.strip() == "%":
            out.append("\n".join(cur).strip())
            cur = []
        else:
            cur.append(line)
    out.append("\n".join(cur).strip())
    return [c for c in out if c]


@pytest.fixture(scope="module")
def split():
    if not FORTUNES.is_dir():
        pytest.skip(f"{FORTUNES} is absent: install the open dataset with `apt-get install fortunes`")
    missing = [c for c in CATEGORIES if not (FORTUNES / c).is_file()]
    if missing:
        pytest.skip(f"fortune categories {missing} are absent from {FORTUNES}: `apt-get install fortunes`")
    texts, labels = [], []
    for cat in CATEGORIES:
        for cookie in _cookies(FORTUNES / cat):
            texts.append(cookie)
            labels.append(cat)
    assert len(texts) > 3000  # the larger files of the package hold several hundred cookies each
    return train_test_split(texts, labels, test_size=0.3, random_state=20260, stratify=labels)


REFERENCE = {
    "multinomial": MultinomialNB,
    "bernoulli": BernoulliNB,
    "complement": lambda alpha: ComplementNB(alpha=alpha, norm=False),
}


@pytest.mark.parametrize("alpha", [1.0, 0.1])
@pytest.mark.parametrize("text_model", list(REFERENCE))
def test_accuracy_equals_sklearn_pipeline(split, text_model: str, alpha: float) -> None:
    x_train, x_test, y_train, y_test = split
    tok = Tokenizer()
    # sklearn's ComplementNB decides without the prior (with more than one class); ours adds it unless the
    # prior is uniform, so the like-for-like comparison uses a uniform prior there
    prior = "uniform" if text_model == "complement" else "fitted"
    model = NaiveBayes.fit(SCHEMA, [{"text": t} for t in x_train], y_train,
                           ModelSpec(text_model=text_model, alpha_text=alpha, prior=prior))
    ours = np.array(model.predict(model.encoder.transform([{"text": t} for t in x_test])))

    vec = CountVectorizer(analyzer=tok.tokens, lowercase=False)
    X_train = vec.fit_transform(x_train)
    assert len(vec.vocabulary_) == model.encoder.n_terms  # the same tokens on both sides
    ref = REFERENCE[text_model](alpha=alpha).fit(X_train, y_train)
    theirs = ref.predict(vec.transform(x_test))

    y = np.array(y_test)
    acc_ours, acc_theirs = float(np.mean(ours == y)), float(np.mean(theirs == y))
    assert abs(acc_ours - acc_theirs) <= TOLERANCE, (acc_ours, acc_theirs)
    assert acc_ours > 2 / len(CATEGORIES)  # well above chance (1/6), so the comparison means something
