"""Quality benchmark: how much `triage` auto-routes at a 95% precision target, side by side with scikit-learn.

    .venv/bin/python bench/quality.py [--quick] [--corpus fortunes debian] [--seed 0] [--no-best]

Corpora (public, from Debian packages; `bench/corpora.py` builds them into bench/.cache, never committed):
  fortunes  Debian's `fortunes`, every category (43 queues, 15k cookies, text only)
  debian    Debian's package index from `apt-cache dumpavail` (50+ sections as queues, 63k packages: the package
            name, a one-line summary, priority, architecture, maintainer domain, multi-arch, installed size)

Split: per queue, seeded, 60% train / 20% validation / 20% test (a queue of n items gives round(0.2 n) to
validation and to test; every item of a tiny queue may stay in train). The test items are seen by nobody.

Systems:
  triage defaults  as a new user: `triage init --from train+validation.jsonl`, `import`, `train`, `route --json` on
                   the test items (through the real CLI, each command a subprocess). triage chooses its own
                   calibration and cutoffs inside train+validation.
  triage best      then `triage tune --adopt` and `train` again (skipped with --no-best).
  layer off        with --layer-off: the defaults again with `score_layer = false` (the layer's share of train time)
  ComplementNB, LogisticRegression, LinearSVC (scikit-learn): fitted on train, on TF-IDF of words (sublinear tf) of
                   every text field plus one token per category value (the same columns triage reads, numbers
                   left out); cutoffs per queue on the validation items, by the same rule triage uses (the
                   lowest cutoff whose 95% Wilson lower bound of precision reaches the target,
                   triage.core.metrics.solve_cutoff) on each system's top score (predict_proba, or
                   decision_function for LinearSVC), then applied to the test items.

Figures on the test split: macro-F1 and accuracy of the top queue (every item), coverage (share auto-routed at
the 95% target) and the precision of those auto-routed items, with how many they are and the 95% Wilson interval. Ratios against LogisticRegression (coverage) and
LinearSVC (macro-F1) are printed, with the train time of triage defaults.

--quick subsamples each corpus (per queue, seeded) to QUICK_ITEMS items and skips `tune` unless --best is given.
"""

from __future__ import annotations

import argparse
import csv
import json
import os
import subprocess
import sys
import tempfile
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

import scipy.sparse as sp  # noqa: E402
from sklearn.feature_extraction.text import TfidfVectorizer  # noqa: E402
from sklearn.linear_model import LogisticRegression  # noqa: E402
from sklearn.metrics import accuracy_score, f1_score  # noqa: E402
from sklearn.naive_bayes import ComplementNB  # noqa: E402
from sklearn.svm import LinearSVC  # noqa: E402

from bench.corpora import CACHE, build  # noqa: E402
from triage.core.metrics import solve_cutoff, wilson_interval  # noqa: E402

TARGET = 0.95
QUICK_ITEMS = 10000
CORPORA = {  # name: (csv file, label column, text columns, category columns)
    "fortunes": ("fortunes.csv", "category", ("text",), ()),
    "debian": ("debian_packages.csv", "section", ("name", "summary"),
               ("priority", "architecture", "maintainer_domain", "multi_arch")),
}


@dataclass
class Result:
    system: str
    macro_f1: float
    accuracy: float
    coverage: float
    precision: float
    seconds: float
    note: str = ""


def read_rows(path: Path) -> list[dict[str, str]]:
    with path.open(encoding="utf-8", newline="") as fh:
        return list(csv.DictReader(fh))


def split(labels: list[str], seed: int, share: float = 0.2) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Stratified, seeded train / validation / test row indices (per queue: round(share n) each to val and test)."""
    rng = np.random.default_rng(seed)
    y = np.asarray(labels)
    parts: tuple[list[int], list[int], list[int]] = ([], [], [])
    for q in sorted(set(labels)):
        idx = rng.permutation(np.flatnonzero(y == q))
        k = int(round(share * idx.size))
        parts[2].extend(idx[:k])
        parts[1].extend(idx[k:2 * k])
        parts[0].extend(idx[2 * k:])
    return tuple(rng.permutation(np.asarray(p, dtype=np.int64)) for p in parts)  # type: ignore[return-value]


def subsample(rows: list[dict[str, str]], label: str, n: int, seed: int) -> list[dict[str, str]]:
    """About n rows, the same share of every queue (at least 5 of each, or all it has)."""
    if len(rows) <= n:
        return rows
    rng = np.random.default_rng(seed + 1)
    y = np.array([r[label] for r in rows])
    keep: list[int] = []
    for q in sorted(set(y)):
        idx = np.flatnonzero(y == q)
        k = min(idx.size, max(5, int(round(idx.size * n / len(rows)))))
        keep.extend(rng.choice(idx, size=k, replace=False))
    return [rows[i] for i in sorted(keep)]


# ----- the references -------------------------------------------------------------------------------------
def documents(rows: list[dict[str, str]], texts: tuple[str, ...], cats: tuple[str, ...]) -> list[str]:
    """Every text field's words, plus one token per category value (field name and value glued together)."""
    out = []
    for r in rows:
        parts = [r.get(t, "") or "" for t in texts]
        parts += ["zzcat" + c + "_" + "".join(ch for ch in (r.get(c) or "none") if ch.isalnum()) for c in cats]
        out.append(" ".join(parts))
    return out


def cutoffs_on(scores: np.ndarray, y: np.ndarray) -> dict[int, float | None]:
    top = scores.argmax(axis=1)
    conf = scores[np.arange(len(y)), top]
    return {int(q): solve_cutoff(conf[top == q], (top == y)[top == q], TARGET).cutoff
            for q in np.unique(top)}


def routed_figures(scores: np.ndarray, y: np.ndarray, cuts: dict[int, float | None]) -> tuple[float, float]:
    top = scores.argmax(axis=1)
    conf = scores[np.arange(len(y)), top]
    limit = np.array([np.inf if cuts.get(int(t)) is None else cuts[int(t)] for t in top])
    routed = conf >= limit
    prec = float((top[routed] == y[routed]).mean()) if routed.any() else float("nan")
    return float(routed.mean()), prec


def references(rows: list[dict[str, str]], parts: tuple[np.ndarray, ...], label: str,
               texts: tuple[str, ...], cats: tuple[str, ...]) -> list[Result]:
    tr, va, te = parts
    queues = sorted({r[label] for r in rows})
    qi = {q: i for i, q in enumerate(queues)}
    y = np.array([qi[r[label]] for r in rows])
    docs = documents(rows, texts, cats)
    t0 = time.perf_counter()
    vec = TfidfVectorizer(sublinear_tf=True)
    X_tr = vec.fit_transform([docs[i] for i in tr])
    X_va, X_te = vec.transform([docs[i] for i in va]), vec.transform([docs[i] for i in te])
    t_vec = time.perf_counter() - t0
    out = []
    systems = {
        "ComplementNB": ComplementNB(alpha=0.3),
        "LogisticRegression": LogisticRegression(C=10.0, solver="saga", tol=1e-3, max_iter=300),
        "LinearSVC": LinearSVC(C=1.0),
    }
    for name, clf in systems.items():
        t0 = time.perf_counter()
        clf.fit(X_tr, y[tr])
        seconds = time.perf_counter() - t0 + t_vec

        def scores(X: sp.csr_matrix, clf=clf) -> np.ndarray:
            s = clf.decision_function(X) if isinstance(clf, LinearSVC) else clf.predict_proba(X)
            full = np.full((X.shape[0], len(queues)), -np.inf)  # a queue absent from train: never chosen
            full[:, clf.classes_] = s
            return full

        s_va, s_te = scores(X_va), scores(X_te)
        cov, prec = routed_figures(s_te, y[te], cutoffs_on(s_va, y[va]))
        pred = s_te.argmax(axis=1)
        out.append(Result(name, float(f1_score(y[te], pred, average="macro", labels=range(len(queues)),
                                                zero_division=0)),
                          float(accuracy_score(y[te], pred)), cov, prec, seconds))
    return out


# ----- triage through its command line ---------------------------------------------------------------------
def _triage(*args: str, cwd: Path) -> str:
    cmd = [sys.executable, "-m", "triage", *args]
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    done = subprocess.run(cmd, cwd=cwd, capture_output=True, text=True, env=env)
    if done.returncode != 0:
        raise RuntimeError(f"{' '.join(args)} failed ({done.returncode}): {done.stderr.strip()[-2000:]}")
    return done.stdout


def triage_figures(ws: Path, test_csv: Path, truth: list[str], queues: list[str]) -> tuple[float, float, float, float]:
    out = _triage("route", str(test_csv), "--json", "-w", str(ws), cwd=ws)
    decisions = [json.loads(line) for line in out.splitlines() if line.startswith("{")]
    by_id = {d["id"]: d for d in decisions}
    qi = {q: i for i, q in enumerate(queues)}
    ids = [row_id for row_id, _ in truth]
    y = np.array([qi[lab] for _, lab in truth])
    pred = np.array([qi.get(by_id[i]["suggested"], -1) for i in ids])
    routed = np.array([not by_id[i]["held"] for i in ids])
    prec = float((pred[routed] == y[routed]).mean()) if routed.any() else float("nan")
    f1 = float(f1_score(y, pred, average="macro", labels=range(len(queues)), zero_division=0))
    return f1, float(accuracy_score(y, pred)), float(routed.mean()), prec


def run_triage(rows: list[dict[str, str]], parts: tuple[np.ndarray, ...], label: str, best: bool,
               tmp: Path, layer_off: bool = False) -> tuple[list[Result], dict[str, object]]:
    tr, va, te = parts
    queues = sorted({r[label] for r in rows})
    cols = list(rows[0])
    # JSON Lines, not CSV: the texts hold line breaks (cookies are several lines), which JSON keeps unambiguous
    fit_csv, test_csv = tmp / "train_validation.jsonl", tmp / "test.jsonl"
    with fit_csv.open("w", encoding="utf-8") as fh:
        fh.writelines(json.dumps(rows[i], ensure_ascii=False) + "\n" for i in np.concatenate([tr, va]))
    with test_csv.open("w", encoding="utf-8") as fh:
        fh.writelines(json.dumps({c: rows[i][c] for c in cols if c != label}, ensure_ascii=False) + "\n"
                      for i in te)
    truth = [(rows[i]["id"], rows[i][label]) for i in te]
    ws = tmp / "ws"
    _triage("init", "--from", str(fit_csv), "--label", label, "-w", str(ws), cwd=tmp)
    _triage("import", str(fit_csv), "-w", str(ws), "--json", cwd=tmp)
    t0 = time.perf_counter()
    report = json.loads(_triage("train", "-w", str(ws), "--json", cwd=tmp))
    t_train = time.perf_counter() - t0
    spec = report["spec"]
    note = f"{spec['text_model']} a={spec['alpha_text']:g}" + (" word pairs" if spec.get("bigrams") else "")
    out = [Result("triage defaults", *triage_figures(ws, test_csv, truth, queues), t_train, note)]
    info: dict[str, object] = {"train_seconds": t_train, "config": (ws / "triage.toml").read_text(encoding="utf-8")}
    layer = report["calibration"].get("score_layer") or {}
    out[0].note += " layer " + ("on" if layer.get("used") else f"off ({layer.get('why', 'older triage')})")
    if layer_off:
        # the same defaults with the score layer off: what the layer adds, in figures and in train time
        cfg = ws / "triage.toml"
        cfg.write_text(cfg.read_text(encoding="utf-8").replace('score_layer = "auto"', "score_layer = false"),
                       encoding="utf-8")
        t0 = time.perf_counter()
        _triage("train", "-w", str(ws), "--json", cwd=tmp)
        out.append(Result("triage defaults, layer off", *triage_figures(ws, test_csv, truth, queues),
                          time.perf_counter() - t0, "score_layer = false"))
        cfg.write_text(cfg.read_text(encoding="utf-8").replace("score_layer = false", 'score_layer = "auto"'),
                       encoding="utf-8")
    if best:
        t0 = time.perf_counter()
        _triage("tune", "--adopt", "-w", str(ws), "--json", cwd=tmp)
        report = json.loads(_triage("train", "-w", str(ws), "--json", cwd=tmp))
        spec = report["spec"]
        note = (f"{spec['text_model']} a={spec['alpha_text']:g} bigrams={spec['bigrams']} "
                f"transforms={spec['tf_log']}")
        # the routed figures are for a fresh routing of the same test items (route stores them; ids repeat)
        ws2 = ws
        out.append(Result("triage best (tune)", *triage_figures(ws2, test_csv, truth, queues),
                          time.perf_counter() - t0, note))
    return out, info


def pct(x: float) -> str:
    return "  n/a" if x != x else f"{100 * x:5.1f}%"


def with_interval(precision: float, coverage: float, n_test: int) -> str:
    """The test precision with the items behind it and its 95% Wilson interval: a few dozen routed test items
    measure precision only to several points, so a figure a little under the target may still be noise."""
    n = int(round(coverage * n_test))
    if n == 0 or precision != precision:
        return pct(precision)
    lo, hi = wilson_interval(int(round(precision * n)), n)
    return f"{pct(precision)} of {n} ({100 * lo:.1f}-{100 * hi:.1f})"


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--corpus", nargs="+", default=list(CORPORA), choices=list(CORPORA))
    ap.add_argument("--quick", action="store_true", help=f"subsample each corpus to about {QUICK_ITEMS} items")
    ap.add_argument("--best", action=argparse.BooleanOptionalAction, default=None,
                    help="also run `tune --adopt` (default: on, off with --quick)")
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--layer-off", action="store_true",
                    help="also train the defaults with score_layer = false (train time with and without the layer)")
    ap.add_argument("--show-config", action="store_true", help="print the triage.toml init wrote")
    args = ap.parse_args(argv)
    best = (not args.quick) if args.best is None else args.best
    wanted = {CORPORA[c][0] for c in args.corpus}
    if not all((CACHE / f).is_file() for f in wanted):
        build(CACHE)
    stamp = time.strftime("%Y-%m-%d %H:%M UTC", time.gmtime())
    print(f"# bench/quality.py {' '.join(argv if argv is not None else sys.argv[1:])}  ({stamp}, seed {args.seed})")
    for name in args.corpus:
        file, label, texts, cats = CORPORA[name]
        rows = read_rows(CACHE / file)
        if args.quick:
            rows = subsample(rows, label, QUICK_ITEMS, args.seed)
        labels = [r[label] for r in rows]
        parts = split(labels, args.seed)
        n_q = len(set(labels))
        print(f"\n## {name}: {len(rows)} items, {n_q} queues (largest {max(labels.count(q) for q in set(labels))}, "
              f"smallest {min(labels.count(q) for q in set(labels))}); train {len(parts[0])}, validation "
              f"{len(parts[1])}, test {len(parts[2])}")
        with tempfile.TemporaryDirectory(prefix=f"quality-{name}-") as d:
            ours, info = run_triage(rows, parts, label, best, Path(d), args.layer_off)
        refs = references(rows, parts, label, texts, cats)
        if args.show_config:
            print(info["config"])
        results = ours + refs
        lr = next(r for r in refs if r.system == "LogisticRegression")
        svc = next(r for r in refs if r.system == "LinearSVC")
        print(f"| system | macro-F1 | accuracy | auto-routed at {TARGET:.0%} | precision of those | seconds | "
              "coverage / LR | macro-F1 - SVC |")
        print("|---|---|---|---|---|---|---|---|")
        for r in results:
            ratio = r.coverage / lr.coverage if lr.coverage > 0 else float("nan")
            label_txt = f"{r.system} ({r.note})" if r.note else r.system
            print(f"| {label_txt} | {r.macro_f1:.3f} | {r.accuracy:.3f} | {pct(r.coverage)} | "
                  f"{with_interval(r.precision, r.coverage, len(parts[2]))} | "
                  f"{r.seconds:.1f} | {ratio:.2f} | {r.macro_f1 - svc.macro_f1:+.3f} |")
    return 0


if __name__ == "__main__":
    sys.exit(main())
