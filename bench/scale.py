"""Scale benchmark: training and routing from 10k to 1M items, against a scikit-learn pipeline in the same run.

    .venv/bin/python bench/scale.py                      # 10k, 50k, 200k, 1M Voltwren tickets (long)
    .venv/bin/python bench/scale.py --quick              # 10k and 20k, under about two minutes
    .venv/bin/python bench/scale.py --sizes 10000,50000 --workers 2

Every measurement runs in a fresh child process under /usr/bin/time, so its peak memory (maximum resident set
size) is its own. The children, on the same generated tickets (the demo generator, Voltwren scenario):

- `baseline`: read the tickets and stop (the memory every other child starts from);
- `reference`: CountVectorizer(ngram_range=(1, 2), min_df=2) + ComplementNB fitted on subject + body;
- `fit`: our NaiveBayes.fit on the same texts with ModelSpec(complement, bigrams, min_count=2) (the bare fit);
- `history`: the engine's path in one process (tokenised once, counted by partition, tables merged);
- `train`: `triage train` on a workspace holding the tickets, model pinned to the same settings (it also
  measures on a time split with 5-fold out-of-fold calibration, chooses cutoffs and stores the version);
- `train-dask`: the same with `--engine dask` on a local cluster of `--workers` worker processes; the peak memory
  shown is the driver's, and the workers' peaks are reported beside it (read from the workers themselves);
- `route`: batch routing of the incoming tickets with the top-5 evidence terms per item against the reference's
  `transform` + `predict_proba`, both fitted in that child, repeated until a second has passed.

Ratios are printed against the reference measured in the same run. Nothing here asserts: targets print as
met / MISSED. A text plot of seconds against items closes the run.
"""

from __future__ import annotations

import argparse
import json
import os
import re
import shutil
import subprocess
import sys
import tempfile
import time
from collections.abc import Sequence
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

ROOT = Path(__file__).resolve().parent.parent
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

TOP_TERMS = 5
FULL_SIZES = (10_000, 50_000, 200_000, 1_000_000)
QUICK_SIZES = (10_000, 20_000)
JOBS = ("baseline", "reference", "fit", "history", "train", "train-dask", "route")


# ----- children ------------------------------------------------------------------------------------------------
def _texts(data: Path) -> tuple[list[str], list[str]]:
    import pandas as pd

    df = pd.read_parquet(data / "tickets.parquet", columns=["subject", "body", "queue"])
    texts = (df["subject"].fillna("").astype(str) + " " + df["body"].fillna("").astype(str)).tolist()
    return texts, df["queue"].astype(str).tolist()


def _spec() -> Any:
    from triage.core.model import ModelSpec

    return ModelSpec(text_model="complement", alpha_text=1.0, bigrams=True, min_count=2)


def _text_schema() -> Any:
    from triage.core.schema import FieldRole, FieldSpec, Schema

    return Schema((FieldSpec("text", FieldRole.TEXT),), id="id", label="queue")


def _worker_peaks(client: Any) -> list[float]:
    def peak() -> float:
        import resource

        return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024  # KiB on Linux

    return sorted(client.run(peak).values())


def child(job: str, data: Path, workers: int) -> dict[str, Any]:
    out: dict[str, Any] = {}
    if job in ("train", "train-dask"):
        from triage.app import Workspace

        with Workspace.open(data / "ws") as ws:
            if job == "train":
                t0 = time.perf_counter()
                ws.train()
                out["seconds"] = time.perf_counter() - t0
                return out
            from dask.distributed import Client, LocalCluster

            from triage.engine.cluster import DaskEngine

            with LocalCluster(n_workers=workers, threads_per_worker=1, processes=True,
                              dashboard_address=None) as cluster, Client(cluster) as client:
                t0 = time.perf_counter()  # the cluster start is not counted; `triage train --engine dask` pays it
                ws.train(engine=DaskEngine(client=client))
                out["seconds"] = time.perf_counter() - t0
                out["worker_peak_mb"] = _worker_peaks(client)
        return out
    texts, labels = _texts(data)
    items = [{"text": t} for t in texts]
    if job == "baseline":
        out["seconds"] = 0.0
    elif job == "reference":
        from sklearn.feature_extraction.text import CountVectorizer
        from sklearn.naive_bayes import ComplementNB

        t0 = time.perf_counter()
        vec = CountVectorizer(ngram_range=(1, 2), min_df=2)
        ComplementNB().fit(vec.fit_transform(texts), labels)
        out["seconds"] = time.perf_counter() - t0
    elif job == "fit":
        from triage.core.model import NaiveBayes

        t0 = time.perf_counter()
        NaiveBayes.fit(_text_schema(), items, labels, _spec())
        out["seconds"] = time.perf_counter() - t0
    elif job == "history":
        from triage.engine import InProcessEngine
        from triage.engine.history import History

        t0 = time.perf_counter()
        History(InProcessEngine(), _text_schema(), _spec(), items, labels).model(_spec())
        out["seconds"] = time.perf_counter() - t0
    elif job == "route":
        out.update(_route(data, texts, labels, items))
    return out


def _route(data: Path, texts: list[str], labels: list[str], items: list[dict[str, Any]]) -> dict[str, Any]:
    import numpy as np
    import pandas as pd
    from sklearn.feature_extraction.text import CountVectorizer
    from sklearn.naive_bayes import ComplementNB

    from triage.core.evidence import strongest_batch
    from triage.core.model import NaiveBayes

    inc = pd.read_parquet(data / "incoming.parquet", columns=["subject", "body"])
    in_texts = (inc["subject"].fillna("").astype(str) + " " + inc["body"].fillna("").astype(str)).tolist()
    in_items = [{"text": t} for t in in_texts]
    model = NaiveBayes.fit(_text_schema(), items, labels, _spec())
    vec = CountVectorizer(ngram_range=(1, 2), min_df=2)
    clf = ComplementNB().fit(vec.fit_transform(texts), labels)

    def ours() -> int:
        batch = model.encoder.transform(in_items, allow_missing=True, keep_unknown=True)
        jll = model.joint_log_likelihood(batch)
        order = np.argsort(-jll, axis=1, kind="stable")[:, :2]
        terms = strongest_batch(model, batch, order[:, 0], order[:, 1], TOP_TERMS)
        assert len(terms) == len(in_items) and all(len(t) <= TOP_TERMS for t in terms)
        return len(terms)

    def reference() -> int:
        return clf.predict_proba(vec.transform(in_texts)).shape[0]

    def rate(fn: Any) -> float:
        n, t0 = 0, time.perf_counter()
        while True:
            n += fn()
            if time.perf_counter() - t0 >= 1.0:
                return n / (time.perf_counter() - t0)

    return {"seconds": 0.0, "items": len(in_items), "ours_per_s": rate(ours), "reference_per_s": rate(reference)}


# ----- the parent ----------------------------------------------------------------------------------------------
def _prepare(n: int, root: Path) -> Path:
    """Tickets (history and incoming) as Parquet, and a workspace holding the history, model pinned."""
    from demo_corpus.generate import generate

    data = root / f"n{n}"
    data.mkdir(parents=True, exist_ok=True)
    labelled, incoming, _ = generate("voltwren", n, 7, incoming=min(max(n // 12, 1000), 20_000))
    labelled.to_parquet(data / "tickets.parquet", index=False)
    incoming.to_parquet(data / "incoming.parquet", index=False)
    config = (ROOT / "configs" / "voltwren.toml").read_text(encoding="utf-8")
    pins = {"text_model": '"complement"', "alpha_text": "1.0", "bigrams": "true", "min_count": "2"}
    for key, value in pins.items():
        config = re.sub(rf"(?m)^{key} = .*$", f"{key} = {value}", config, count=1)
    ws = data / "ws"
    ws.mkdir(exist_ok=True)
    (ws / "triage.toml").write_text(config, encoding="utf-8")
    subprocess.run([sys.executable, "-m", "triage.cli", "import", str(data / "tickets.parquet"), "-w", str(ws)],
                   check=True, stdout=subprocess.DEVNULL, cwd=ROOT)
    return data


def _run(job: str, data: Path, workers: int) -> dict[str, Any]:
    """One child under /usr/bin/time: its own figures, plus its peak resident memory in MB."""
    with tempfile.TemporaryDirectory() as tmp:
        rss_file = Path(tmp) / "rss"
        env = {**os.environ, "PYTHONPATH": str(ROOT)}
        cmd = ["/usr/bin/time", "-f", "%M", "-o", str(rss_file), sys.executable, __file__, "--child", job,
               "--data", str(data), "--workers", str(workers)]
        p = subprocess.run(cmd, capture_output=True, text=True, env=env, cwd=ROOT)
        if p.returncode != 0:
            return {"error": (p.stderr or p.stdout).strip().splitlines()[-1:] or ["failed"]}
        res = json.loads(p.stdout.strip().splitlines()[-1])
        res["peak_mb"] = int(rss_file.read_text().split()[-1]) / 1024
        return res


def _ratio(a: float | None, b: float | None) -> str:
    return f"{a / b:.2f}x" if a is not None and b else "-"


def _verdict(value: float | None, limit: float, higher_is_better: bool = False) -> str:
    if value is None:
        return "not measured"
    ok = value >= limit if higher_is_better else value <= limit
    return "met" if ok else "MISSED"


def plot(series: dict[str, list[tuple[int, float]]], width: int = 64, height: int = 16) -> str:
    """A log-log text plot of seconds against items (hand-written: a dozen lines, no plotting dependency)."""
    import math

    pts = [(x, y) for s in series.values() for x, y in s if y > 0]
    if not pts:
        return "(nothing to plot)"
    lx = [math.log10(x) for x, _ in pts]
    ly = [math.log10(y) for _, y in pts]
    x0, x1 = min(lx), max(lx) + 1e-9
    y0, y1 = min(ly), max(ly) + 1e-9
    grid = [[" "] * width for _ in range(height)]
    marks = {}
    for mark, (name, s) in zip("RFHTDX", series.items(), strict=False):
        marks[mark] = name
        for x, y in s:
            if y <= 0:
                continue
            c = round((math.log10(x) - x0) / (x1 - x0) * (width - 1))
            r = height - 1 - round((math.log10(y) - y0) / (y1 - y0) * (height - 1))
            grid[r][c] = mark if grid[r][c] in (" ", mark) else "*"
    lines = [f"{10 ** y1:9.1f}s |" + "".join(grid[0])]
    lines += ["           |" + "".join(row) for row in grid[1:-1]]
    lines += [f"{10 ** y0:9.2f}s |" + "".join(grid[-1]), "           +" + "-" * width,
              f"            {10 ** x0:,.0f} items" + " " * max(1, width - 30) + f"{10 ** x1:,.0f} (log-log)",
              "            " + "  ".join(f"{m} {n}" for m, n in marks.items()) + "  (* overlap)"]
    return "\n".join(lines)


def main(argv: Sequence[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--sizes", help="comma-separated item counts")
    ap.add_argument("--quick", action="store_true", help="10k and 20k items, under about two minutes")
    ap.add_argument("--workers", type=int, default=2, help="worker processes of the local Dask cluster")
    ap.add_argument("--jobs", default=",".join(JOBS), help="which measurements to run")
    ap.add_argument("--keep", help="keep the generated data in this folder")
    ap.add_argument("--child", choices=JOBS, help=argparse.SUPPRESS)
    ap.add_argument("--data", type=Path, help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    if args.child:
        print(json.dumps(child(args.child, args.data, args.workers)))
        return 0
    sizes = [int(s) for s in args.sizes.split(",")] if args.sizes else list(QUICK_SIZES if args.quick
                                                                               else FULL_SIZES)
    jobs = [j for j in args.jobs.split(",") if j]
    root = Path(args.keep) if args.keep else Path(tempfile.mkdtemp(prefix="triage-scale-"))
    stamp = datetime.now(UTC).strftime("%Y-%m-%d %H:%M UTC")
    cmd = "bench/scale.py " + " ".join(argv if argv is not None else sys.argv[1:])
    print(f"triage scale benchmark, {stamp}, {os.cpu_count()} cores; command: {cmd.strip()}")
    results: dict[int, dict[str, dict[str, Any]]] = {}
    try:
        for n in sizes:
            t0 = time.perf_counter()
            data = _prepare(n, root)
            print(f"\n== {n:,} tickets (generated and imported in {time.perf_counter() - t0:.0f} s)")
            res = results[n] = {}
            for job in jobs:
                res[job] = _run(job, data, args.workers)
                r = res[job]
                if "error" in r:
                    print(f"  {job:11s} failed: {r['error']}")
                    continue
                extra = ""
                if "worker_peak_mb" in r:
                    extra = "  workers' peaks " + ", ".join(f"{m:.0f} MB" for m in r["worker_peak_mb"])
                if job == "route":
                    extra = (f"  ours {r['ours_per_s']:,.0f} items/s with top-{TOP_TERMS} evidence, reference "
                             f"predict_proba {r['reference_per_s']:,.0f} items/s: "
                             f"{_ratio(r['ours_per_s'], r['reference_per_s'])}")
                print(f"  {job:11s} {r['seconds']:8.2f} s   peak {r['peak_mb']:7.0f} MB{extra}")
            _report(n, res)
    finally:
        if not args.keep:
            shutil.rmtree(root, ignore_errors=True)
    series = {j: [(n, results[n][j]["seconds"]) for n in sizes if "seconds" in results[n].get(j, {})]
              for j in ("reference", "fit", "history", "train", "train-dask")}
    print("\nseconds against items (R reference, F fit, H history, T train, D train on the cluster)\n")
    print(plot({k: v for k, v in series.items() if v}))
    return 0


def _report(n: int, res: dict[str, dict[str, Any]]) -> None:
    def get(job: str, key: str) -> float | None:
        v = res.get(job, {}).get(key)
        return float(v) if v is not None else None

    ref_s, base = get("reference", "seconds"), get("baseline", "peak_mb")
    ref_mem = get("reference", "peak_mb")
    added = {j: (get(j, "peak_mb") - base) if get(j, "peak_mb") is not None and base is not None else None
             for j in ("reference", "fit", "history")}
    fit_r = (get("fit", "seconds") or 0) / ref_s if ref_s and get("fit", "seconds") else None
    train_r = (get("train", "seconds") or 0) / ref_s if ref_s and get("train", "seconds") else None
    route_r = (get("route", "ours_per_s") / get("route", "reference_per_s")
               if get("route", "ours_per_s") and get("route", "reference_per_s") else None)
    mem_fit = added["fit"] / added["reference"] if added["fit"] and added["reference"] else None
    mem_train = get("train", "peak_mb") / ref_mem if get("train", "peak_mb") and ref_mem else None
    print(f"  ratios at {n:,} (against the reference measured above):")
    print(f"    bare fit time           {_ratio(get('fit', 'seconds'), ref_s):>7}  target <= 0.5x: "
          f"{_verdict(fit_r, 0.5)}")
    print(f"    history fit time        {_ratio(get('history', 'seconds'), ref_s):>7}")
    print(f"    train (pinned) time     {_ratio(get('train', 'seconds'), ref_s):>7}  target <= 1.0x: "
          f"{_verdict(train_r, 1.0)}")
    print(f"    train on cluster time   {_ratio(get('train-dask', 'seconds'), ref_s):>7}")
    print(f"    route with evidence     {_ratio(get('route', 'ours_per_s'), get('route', 'reference_per_s')):>7}"
          f"  target >= 1x: {_verdict(route_r, 1.0, higher_is_better=True)}")
    print(f"    fit memory (added)      {_ratio(added['fit'], added['reference']):>7}  "
          f"(peak above reading the data: ours {added['fit'] or 0:.0f} MB, reference {added['reference'] or 0:.0f}"
          f" MB; target <= 0.5x at 50k: {_verdict(mem_fit, 0.5) if n == 50_000 else 'n/a at this size'})")
    print(f"    train memory (process)  {_ratio(get('train', 'peak_mb'), ref_mem):>7}  (whole processes: train "
          f"{get('train', 'peak_mb') or 0:.0f} MB, reference {ref_mem or 0:.0f} MB; target <= 0.5x at 50k: "
          f"{_verdict(mem_train, 0.5) if n == 50_000 else 'n/a at this size'})")
    if n >= 1_000_000:
        print(f"    1M items within 2 GB: train {_verdict(get('train', 'peak_mb'), 2048)} "
              f"({get('train', 'peak_mb') or 0:.0f} MB)")


if __name__ == "__main__":
    raise SystemExit(main())
