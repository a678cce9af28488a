"""Engine benchmark: our Naive Bayes core against a scikit-learn pipeline measured in the same run.

    .venv/bin/python bench/engine.py [--n 50000] [--quick] [--repeat 3] [--fortunes DIR]

Two corpora: the invented Voltwren support desk from the demo generator (text = subject + body) and the Debian
`fortunes` cookies (one category per file; skipped with a message when the package is not installed).
The reference pipeline is CountVectorizer(ngram_range=(1, 2), min_df=2) + ComplementNB; ours is
NaiveBayes.fit with ModelSpec(text_model="complement", bigrams=True, min_count=2) on the very same texts.
Every figure is printed as a ratio against a measurement taken in this process, next to the raw seconds;
short measurements are repeated and the median is reported.
"""

from __future__ import annotations

import argparse
import gc
import random
import statistics
import sys
import time
import tracemalloc
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from functools import partial
from pathlib import Path
from typing import Any

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

from sklearn.feature_extraction.text import CountVectorizer  # noqa: E402
from sklearn.naive_bayes import ComplementNB  # noqa: E402

from demo_corpus.generate import generate  # noqa: E402
from triage.config import load_config  # noqa: E402
from triage.core.evidence import explain, strongest_batch  # noqa: E402
from triage.core.model import ModelSpec, NaiveBayes  # noqa: E402
from triage.core.schema import FieldRole, FieldSpec, Schema  # noqa: E402
from triage.core.tokens import _TOKEN  # noqa: E402

FORTUNES_DIR = Path("/usr/share/games/fortunes")
TEXT_SCHEMA = Schema((FieldSpec("text", FieldRole.TEXT),), id="id", label="queue")
SPEC = ModelSpec(text_model="complement", bigrams=True, min_count=2)
TOP_TERMS = 5


# ----- corpora -------------------------------------------------------------------------------------------------
@dataclass
class Corpus:
    name: str
    train_texts: list[str]
    train_labels: list[str]
    test_texts: list[str]
    test_labels: list[str]
    schema: Schema = TEXT_SCHEMA
    train_items: list[dict[str, Any]] = field(default_factory=list)  # defaults to {"text": ...}
    test_items: list[dict[str, Any]] = field(default_factory=list)
    field_schema: Schema | None = None  # the scenario's own schema (text fields + category/number fields)
    field_train: list[dict[str, Any]] = field(default_factory=list)
    field_test: list[dict[str, Any]] = field(default_factory=list)

    def __post_init__(self) -> None:
        self.train_items = [{"text": t} for t in self.train_texts]
        self.test_items = [{"text": t} for t in self.test_texts]


def _records(frame: Any, columns: Sequence[str]) -> list[dict[str, Any]]:
    """Rows as plain dicts, pandas missing values as None."""
    sub = frame[list(columns)].astype(object)
    sub = sub.where(sub.notna(), None)
    return sub.to_dict("records")


def voltwren_corpus(n: int, seed: int = 7) -> Corpus:
    labelled, incoming, truth = generate("voltwren", n, seed)

    def texts(df: Any) -> list[str]:
        return (df["subject"].fillna("").astype(str) + " " + df["body"].fillna("").astype(str)).tolist()

    truth_by_id = dict(zip(truth["ticket_id"], truth["queue"], strict=True))
    corpus = Corpus(
        f"voltwren n={n:,}",
        texts(labelled), labelled["queue"].astype(str).tolist(),
        texts(incoming), [str(truth_by_id[i]) for i in incoming["ticket_id"]],
    )
    cfg = load_config(ROOT / "configs" / "voltwren.toml")
    cols = [f.name for f in cfg.schema.fields]
    corpus.field_schema = cfg.schema
    corpus.field_train = _records(labelled, cols)
    corpus.field_test = _records(incoming, cols)
    return corpus


def fortunes_corpus(directory: Path, limit: int | None = None, seed: int = 7) -> Corpus | None:
    """Cookies of every file without an extension; the file name is the category. 80/20 seeded split."""
    if not directory.is_dir():
        return None
    rows: list[tuple[str, str]] = []
    for path in sorted(directory.iterdir()):
        if not path.is_file() or path.is_symlink() or "." in path.name:
            continue
        text = path.read_text(encoding="utf-8", errors="replace")
        cookie: list[str] = []
        for line in [*text.splitlines(), "%"]:
            if line.rstrip() == "%":
                body = "\n".join(cookie).strip()
                if body:
                    rows.append((body, path.name))
                cookie = []
            else:
                cookie.append(line)
    if not rows:
        return None
    rng = random.Random(seed)
    rng.shuffle(rows)
    if limit is not None:
        rows = rows[:limit]
    cut = int(len(rows) * 0.8)
    train, test = rows[:cut], rows[cut:]
    return Corpus(f"fortunes n={len(rows):,}", [t for t, _ in train], [c for _, c in train],
                  [t for t, _ in test], [c for _, c in test])


# ----- measuring -----------------------------------------------------------------------------------------------
def timed(fn: Callable[[], Any]) -> tuple[float, Any]:
    t0 = time.perf_counter()
    out = fn()
    return time.perf_counter() - t0, out


def peak_bytes(fn: Callable[[], Any]) -> int:
    gc.collect()
    tracemalloc.start()
    try:
        fn()
        return tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()


def findall_pass(texts: Sequence[str]) -> int:
    findall = _TOKEN.findall
    return sum(len(findall(t)) for t in texts)


def fit_ours(items: Sequence[dict[str, Any]], labels: Sequence[str], schema: Schema = TEXT_SCHEMA,
             spec: ModelSpec = SPEC) -> NaiveBayes:
    return NaiveBayes.fit(schema, items, labels, spec)


def fit_reference(texts: Sequence[str], labels: Sequence[str]) -> tuple[CountVectorizer, ComplementNB]:
    vec = CountVectorizer(ngram_range=(1, 2), min_df=2)
    X = vec.fit_transform(texts)
    return vec, ComplementNB().fit(X, labels)


def route_ours(model: NaiveBayes, items: Sequence[dict[str, Any]]) -> list[tuple[str, list[Any]]]:
    """Batch routing with evidence: encode, score, then the top-5 terms of each item's top queue against its
    runner-up, for the whole batch at once (what the workspace does when it routes)."""
    batch = model.encoder.transform(items, allow_missing=True)
    jll = model.joint_log_likelihood(batch)
    order = np.argsort(-jll, axis=1, kind="stable")[:, :2]
    terms = strongest_batch(model, batch, order[:, 0], order[:, 1], TOP_TERMS)
    queues = model.queues
    return [(queues[a], t) for a, t in zip(order[:, 0].tolist(), terms, strict=True)]


def route_reference(pipe: tuple[CountVectorizer, ComplementNB], texts: Sequence[str]) -> np.ndarray:
    vec, clf = pipe
    return clf.predict_proba(vec.transform(texts))


def route_one(model: NaiveBayes, item: dict[str, Any]) -> tuple[str, list[Any]]:
    enc = model.encoder.encode(item, allow_missing=True)
    jll = model.joint_log_likelihood_one(enc)
    order = np.argsort(-jll, kind="stable")
    a, b = int(order[0]), int(order[1])
    ev = explain(model, enc, top=a, runner_up=b)
    return model.queues[a], ev.strongest(TOP_TERMS)


@dataclass
class Row:
    corpus: str
    measure: str
    ours: str
    reference: str
    ratio: float | None = None
    target: str = ""
    met: bool | None = None


ROWS: list[Row] = []


def add(corpus: str, measure: str, ours: str, reference: str = "", ratio: float | None = None,
        target: tuple[str, float] | None = None, unit: str = "") -> None:
    """One printed line; `ratio` is a ratio against the reference, or an absolute figure when `unit` is set."""
    met = None
    text = ""
    if target is not None and ratio is not None:
        op, bound = target
        met = ratio <= bound if op == "<=" else ratio >= bound
        text = f"{op} {bound:g}{unit}"
    ROWS.append(Row(corpus, measure, ours, reference, ratio, text, met))
    status = "" if met is None else ("met" if met else "MISSED")
    r = "" if ratio is None else f"{ratio:.3g}"
    print(f"  {measure:<46} ours {ours:>14}  ref {reference:>14}  value {r:>7}  {text:>10} {status}", flush=True)


def sec(s: float) -> str:
    return f"{s:.3f} s"


def ms(s: float) -> str:
    return f"{s * 1e3:.3f} ms"


def median(xs: Sequence[float]) -> float:
    return float(statistics.median(xs))


# ----- the benchmark -------------------------------------------------------------------------------------------
def bench_corpus(c: Corpus, repeat: int, singles: int) -> NaiveBayes:
    print(f"\n[{c.name}] train {len(c.train_texts):,} items, {len(set(c.train_labels))} queues, "
          f"route {len(c.test_texts):,} items", flush=True)
    # fit: interleave the three so that drift (thermal, caches) hits them alike
    t_find, t_ours, t_ref = [], [], []
    model = pipe = None
    for _ in range(repeat):
        t, n_tok = timed(lambda: findall_pass(c.train_texts))
        t_find.append(t)
        t, model = timed(lambda: fit_ours(c.train_items, c.train_labels))
        t_ours.append(t)
        t, pipe = timed(lambda: fit_reference(c.train_texts, c.train_labels))
        t_ref.append(t)
    assert model is not None and pipe is not None
    f, o, r = median(t_find), median(t_ours), median(t_ref)
    print(f"  ({n_tok:,} findall tokens; vocabulary ours {model.encoder.n_terms:,}, "
          f"reference {len(pipe[0].vocabulary_):,})")
    add(c.name, "fit / one bare findall pass", sec(o), sec(r), o / f, ("<=", 2.0))
    add(c.name, "  reference fit / findall (for scale)", "", f"{r / f:.2f}x", r / f)
    add(c.name, "  findall pass itself", sec(f), "")
    add(c.name, "fit / reference fit", sec(o), sec(r), o / r, ("<=", 0.25))
    if c.field_schema is not None:
        tf = median([timed(lambda: fit_ours(c.field_train, c.train_labels, c.field_schema))[0]
                     for _ in range(max(1, repeat - 1))])
        add(c.name, "  fit with the scenario's fields / reference", sec(tf), sec(r), tf / r)

    # accuracy, as a sanity check that both pipelines learned the same task
    pred_ours = [q for q, _ in route_ours(model, c.test_items)]
    proba = route_reference(pipe, c.test_texts)
    pred_ref = pipe[1].classes_[proba.argmax(axis=1)]
    acc_o = float(np.mean([p == t for p, t in zip(pred_ours, c.test_labels, strict=True)]))
    acc_r = float(np.mean(pred_ref == np.asarray(c.test_labels)))
    add(c.name, "  accuracy on the routed items (info)", f"{acc_o:.4f}", f"{acc_r:.4f}")

    # batch routing with evidence vs reference predict_proba
    n = len(c.test_items)
    t_o = median([timed(lambda: route_ours(model, c.test_items))[0] for _ in range(repeat)])
    t_r = median([timed(lambda: route_reference(pipe, c.test_texts))[0] for _ in range(repeat)])
    add(c.name, f"batch routing + top-{TOP_TERMS} evidence, items/s", f"{n / t_o:,.0f}/s", f"{n / t_r:,.0f}/s",
        (n / t_o) / (n / t_r), (">=", 2.0))
    add(c.name, "  batch seconds", sec(t_o), sec(t_r))
    if c.field_schema is not None:
        fmodel = fit_ours(c.field_train, c.train_labels, c.field_schema)
        t_f = median([timed(lambda: route_ours(fmodel, c.field_test))[0] for _ in range(repeat)])
        add(c.name, "  batch routing with fields, items/s (info)", f"{n / t_f:,.0f}/s", f"{n / t_r:,.0f}/s",
            (n / t_f) / (n / t_r))

    # single item route with evidence
    sample = c.test_items[:singles]
    for item in sample[:50]:
        route_one(model, item)  # warm
    lat = [timed(lambda it=item: route_one(model, it))[0] for item in sample]
    ref_lat = [timed(lambda t=t: route_reference(pipe, [t]))[0] for t in c.test_texts[: min(singles, 300)]]
    add(c.name, "single item route + evidence, median", ms(median(lat)), ms(median(ref_lat)),
        median(lat) * 1e3, ("<=", 0.2), " ms")
    add(c.name, "  p90", ms(float(np.percentile(lat, 90))), ms(float(np.percentile(ref_lat, 90))))

    # peak memory during fit
    m_o = peak_bytes(lambda: fit_ours(c.train_items, c.train_labels))
    m_r = peak_bytes(lambda: fit_reference(c.train_texts, c.train_labels))
    add(c.name, "peak traced memory during fit", f"{m_o / 2**20:.1f} MiB", f"{m_r / 2**20:.1f} MiB", m_o / m_r,
        ("<=", 0.5))
    return model


def bench_corrections(c: Corpus, sizes: Sequence[int], k: int) -> None:
    """Median time of one correction (relabel of an item already learned) at several corpus sizes."""
    print(f"\n[{c.name}] corrections: NaiveBayes.relabel on learned items, {k} round trips per size", flush=True)
    rng = random.Random(11)
    for text_model in ("complement", "multinomial"):
        spec = ModelSpec(text_model=text_model, bigrams=True, min_count=2)
        for size in sizes:
            items, labels = c.train_items[:size], c.train_labels[:size]
            model = NaiveBayes.fit(TEXT_SCHEMA, items, labels, spec)
            queues = model.queues
            picks = rng.sample(range(len(items)), min(k, len(items)))
            times = []
            for i in picks:
                old = labels[i]
                new = queues[(queues.index(old) + 1) % len(queues)]
                times.append(timed(partial(model.relabel, items[i], old, new))[0])
                times.append(timed(partial(model.relabel, items[i], new, old))[0])  # and back
            name = f"relabel, {text_model}, {size:,} items (V={model.encoder.n_terms:,}), median"
            add(c.name, name, ms(median(times)), "", median(times) * 1e3, ("<=", 1.0), " ms")
            add(c.name, "  p90", ms(float(np.percentile(times, 90))), "")


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--n", type=int, default=50_000, help="Voltwren tickets to generate (default 50000)")
    ap.add_argument("--quick", action="store_true", help="small sizes (5,000 tickets), runs in under a minute")
    ap.add_argument("--repeat", type=int, default=None, help="repeats of each timed step (median is reported)")
    ap.add_argument("--fortunes", type=Path, default=FORTUNES_DIR, help="fortunes directory")
    args = ap.parse_args(argv)
    n = 5_000 if args.quick else args.n
    repeat = args.repeat or 3
    singles = 500 if args.quick else 2000
    k = 50 if args.quick else 200
    print(f"triage engine benchmark: n={n:,}, repeat={repeat}, python {sys.version.split()[0]}")
    print("reference pipeline: CountVectorizer(ngram_range=(1, 2), min_df=2) + ComplementNB")
    print(f"ours: NaiveBayes.fit(ModelSpec(text_model={SPEC.text_model!r}, bigrams=True, min_count=2))")

    t0 = time.perf_counter()
    volt = voltwren_corpus(n)
    print(f"generated {n:,} voltwren tickets in {time.perf_counter() - t0:.1f} s")
    bench_corpus(volt, repeat, singles)
    bench_corrections(volt, sorted({max(1000, n // 5), n}), k)

    fort = fortunes_corpus(args.fortunes, limit=3000 if args.quick else None)
    if fort is None:
        print(f"\n[fortunes] skipped: no fortune files in {args.fortunes} (install the Debian package `fortunes`)")
    else:
        bench_corpus(fort, repeat, min(singles, len(fort.test_items)))

    print("\nsummary")
    print(f"  {'corpus':<18} {'measure':<60} {'value':>8} {'target':>10}  status")
    for row in ROWS:
        if row.met is None:
            continue
        status = "met" if row.met else "MISSED"
        print(f"  {row.corpus:<18} {row.measure:<60} {row.ratio:>8.3g} {row.target:>10}  {status}")
    missed = sum(1 for r in ROWS if r.met is False)
    print(f"  {missed} of {sum(1 for r in ROWS if r.met is not None)} targets missed; total "
          f"{time.perf_counter() - t0:.0f} s")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
