"""Commands that fit and measure: train, evaluate, tune, lift, independence."""

from __future__ import annotations

import argparse
from typing import Any

from rich import box
from rich.table import Table

from triage.app import Workspace
from triage.cli.output import (
    AVG_F1,
    MACRO_F1,
    NATS,
    SAFETY_NOTE,
    count,
    emit_json,
    err,
    open_workspace,
    out,
    pct,
    plain,
    progress_bar,
)
from triage.cli.render import render_calibration, render_scorecard, split_line


def train_with_progress(ws: Workspace, as_json: bool, args: argparse.Namespace | None = None) -> Any:
    update, stop = progress_bar(not as_json and err.is_terminal)
    try:
        rep = ws.train(progress=update, **engine_options(args))
    finally:
        stop()
    return rep


def add_engine_options(sp: argparse.ArgumentParser) -> None:
    sp.add_argument("--engine", choices=["local", "dask"], default="local",
                    help="where to count or decide: local (this process, default) or dask (a cluster)")
    sp.add_argument("--scheduler", metavar="ADDRESS",
                    help="a running Dask scheduler, e.g. tcp://10.0.0.5:8786 (default: a local cluster)")
    sp.add_argument("--workers", type=int, help="worker processes of the local cluster (default: one per core)")


def engine_options(args: argparse.Namespace | None) -> dict[str, Any]:
    if args is None or getattr(args, "engine", "local") == "local" and not getattr(args, "scheduler", None):
        return {}
    return {"engine": args.engine, "scheduler": args.scheduler, "workers": args.workers}


def cmd_train(args: argparse.Namespace) -> int:
    with open_workspace(args) as ws:
        rep = train_with_progress(ws, args.json, args)
        meas = rep.measurement
        data = {"version": rep.version.version, "items": rep.n_items, "seconds": round(rep.seconds, 2),
                "spec": meas.spec.to_dict(), "selection": rep.selection, "cutoffs": meas.cutoffs,
                "calibration": {k: v for k, v in meas.calibration.items() if k != "reliability"},
                "scorecard": meas.scorecard.to_dict(), "warnings": rep.warnings}
        if args.json:
            emit_json(data)
            return 0
        for w in rep.warnings:
            err.print(f"warning: {w}", markup=False, soft_wrap=True)
        s = meas.spec
        out.print(f"Trained model version [b]{rep.version.version}[/] on {count(rep.n_items)} items in "
                  f"{rep.seconds:.1f} s: {s.text_model} text (alpha {s.alpha_text}"
                  f"{', with word pairs' if s.bigrams else ''}), fields alpha {s.alpha_fields}.")
        if rep.selection:
            out.print(f"Chosen by 3-fold cross-validation among {len(rep.selection)} settings (the most auto-routed "
                      f"at the targets; within the noise of that, the best {MACRO_F1}).", markup=False)
        c = meas.calibration
        hold = c.get("holdout") or c
        out.print(f"Calibration: temperature {c['temperature']:.2f}"
                  f"{', then isotonic' if (c.get('isotonic') or {}).get('used') else ''}; on the newest items the "
                  f"expected calibration error is {hold['ece_before']:.3f} raw, {hold['ece_after']:.3f} calibrated.")
        sc = meas.scorecard
        which = "newest" if meas.split.get("kind") == "time" else "randomly chosen (no arrival times)"
        out.print(f"On the {which} {count(meas.split['test_items'])} items (not used to fit): accuracy {pct(sc.accuracy)}, "
                  f"auto-routed {pct(sc.coverage)} at precision {pct(sc.auto_precision)}. `triage evaluate` "
                  "shows the full scorecard.")
        layer = c.get("score_layer") or {}
        out.print("Score layer: " + ("on (fitted on out-of-fold scores)." if layer.get("used")
                                     else f"off: {layer.get('why', 'not fitted')}.")
                  + (f" Note: {layer['note']}." if layer.get("note") else ""), markup=False, soft_wrap=True)
        closed = [q for q, info in meas.cutoffs.items() if info.get("cutoff") is None and not info.get("never_auto")]
        if closed:
            why = meas.cutoffs[closed[0]].get("why", "")
            out.print(f"{len(closed)} queue(s) auto-route nothing yet ({', '.join(closed[:6])}"
                      f"{', ...' if len(closed) > 6 else ''}). {closed[0]}: {why}", markup=False, soft_wrap=True)
    return 0


def cmd_evaluate(args: argparse.Namespace) -> int:
    with open_workspace(args, read_only=True) as ws:
        update, stop = progress_bar(not args.json and err.is_terminal)
        try:
            meas = ws.evaluate(progress=update, split=args.split, folds=args.folds)
        finally:
            stop()
        card = meas.scorecard.to_dict()
        for w in meas.notes:
            err.print(f"warning: {w}", markup=False, soft_wrap=True)
        if args.json:
            emit_json({"split": meas.split, "scorecard": card, "warnings": meas.notes, "cutoffs": meas.cutoffs,
                        "active_cutoffs": meas.active_cutoffs,
                        "scorecard_at_active_cutoffs": meas.at_active.to_dict() if meas.at_active else None,
                        "calibration": meas.calibration, "precision_coverage": meas.precision_coverage(50)})
            return 0
        sp = meas.split
        if sp["kind"] == "kfold":
            out.print(f"Stratified {sp['folds']}-fold: every one of the {count(sp['test_items'])} labelled items decided by "
                      "a model, calibration and cutoffs fitted without it (cutoff column: median over folds).")
        else:
            out.print(split_line(sp))
        render_scorecard(card)
        if meas.at_active is not None:
            a = meas.at_active
            hand = ", ".join(f"{q} {'none' if c is None else f'{c:.3f}'}" for q, c in sorted(meas.active_cutoffs.items()))
            out.print(f"The active version routes with other cutoffs (set by hand, or solved when it was trained on "
                      f"other labels): {hand}; at those the same items are auto-routed "
                      f"{pct(a.coverage)} at precision {pct(a.auto_precision)}.")
        render_calibration(meas.calibration)
        out.print(SAFETY_NOTE)
    return 0


def cmd_tune(args: argparse.Namespace) -> int:
    from triage.app import tuning

    with open_workspace(args) as ws:
        update, stop = progress_bar(not args.json and err.is_terminal)
        try:
            rows = tuning.run_grid(ws, folds=args.folds, progress=update)
        finally:
            stop()
        changes = tuning.adopt(ws, rows[0]) if args.adopt else []
        if args.json:
            emit_json({"settings": [r.to_dict() for r in rows], "adopted": rows[0].to_dict() if args.adopt else None,
                        "changes": [{"key": k, "old": a, "new": b} for k, a, b in changes]})
            return 0
        t = Table(title=f"{len(rows)} settings, {args.folds}-fold cross-validation, best first: auto-routed at the "
                  f"targets, then {MACRO_F1}, then log loss (lower is better)", title_justify="left",
                  box=box.SIMPLE_HEAD, show_edge=False, padding=(0, 0))
        # every setting that differs between rows gets a column; the ones all rows share are said once below
        settings = {"text model": lambda r: r.text_model, "alpha": lambda r: f"{r.alpha_text:g}",
                    "bigrams": lambda r: "yes" if r.bigrams else "no", "fields": lambda r: "yes" if r.fields else "no",
                    "transforms": lambda r: "yes" if r.transforms else "no",
                    "weights": lambda r: ", ".join(f"{n} {w:g}" for n, w in r.text_weights.items())}
        differ = [name for name, get in settings.items() if len({get(r) for r in rows}) > 1]
        for col in (*differ, "accuracy", AVG_F1.replace(" ", "\n"), "log\nloss", "auto-\nrouted"):
            t.add_column("trans-\nforms" if col == "transforms" else col,
                         justify="left" if col in ("text model", "weights") else "right",
                         no_wrap=col != "weights", min_width=8 if col == "weights" else None)
        for r in rows[: args.top]:
            t.add_row(*(settings[c](r) for c in differ),
                      pct(r.accuracy), f"{r.macro_f1:.3f}", f"{r.log_loss:.3f}", pct(r.coverage))
        out.print(t)
        same = [f"{name} {get(rows[0])}" for name, get in settings.items() if name not in differ]
        if same:
            out.print("Every row: " + ", ".join(same) + ".", markup=False)
        if args.adopt:
            out.print("Saved in triage.toml:" if changes else "triage.toml already holds these settings.")
        for key, old, new in changes:
            out.print(f"  {key}: was {plain(old)}, now {plain(new)}", markup=False)
        best = rows[0]
        verb = ("`triage train` now trains with them." if args.adopt
                else "Save these settings in triage.toml with `triage tune --adopt`.")
        out.print(f"Recommended: {best.text_model}, alpha {best.alpha_text:g}, bigrams "
                  f"{'on' if best.bigrams else 'off'}. {verb}")
    return 0


def cmd_lift(args: argparse.Namespace) -> int:
    from triage.app import tuning

    with open_workspace(args) as ws:
        data = tuning.lift_for(ws, args.queue)
    if args.json:
        emit_json(data)
        return 0
    t = Table(title=f"Lift for {data['queue']} by decile of its score ({count(data['items'])} newest items, "
              f"{count(data['positives'])} in the queue)", title_justify="left")
    for col in ("decile", "items", "in queue", "rate", "lift", "cumulative gain"):
        t.add_column(col, justify="right")
    for d in data["deciles"]:
        t.add_row(str(d["bin"]), count(d["n"]), count(d["positives"]), pct(d["rate"]), f"{d['lift']:.2f}",
                  pct(d["cumulative_gain"]))
    out.print(t)
    out.print(f"The top 10% by score holds {pct(data['captured_top_10'])} of the queue; the top 20% holds "
              f"{pct(data['captured_top_20'])}.")
    return 0


def cmd_independence(args: argparse.Namespace) -> int:
    from triage.app import tuning

    with open_workspace(args) as ws:
        if args.try_merge:
            res = tuning.try_merge(ws, *args.try_merge)
        else:
            rows = tuning.independence(ws)
    if args.try_merge:
        if args.json:
            emit_json(res)
            return 0
        t = Table(title=f"{res['a']} and {res['b']}: apart vs merged into {res['field']} ({res['levels']} levels), "
                  f"{res['folds']}-fold cross-validation", title_justify="left")
        for col in ("fields", "accuracy", MACRO_F1, "log loss (lower is better)"):
            t.add_column(col, justify="left" if col == "fields" else "right")
        for key in ("apart", "merged"):
            r = res[key]
            t.add_row(key, pct(r["accuracy"]), f"{r['macro_f1']:.4f}", f"{r['log_loss']:.4f}")
        out.print(t)
        out.print(f"Merging helps (lower log loss, {AVG_F1} no worse): add the joint field to the export."
                  if res["merge_helps"] else "Merging does not help on these items: keep the fields apart.")
        return 0
    if args.json:
        emit_json(rows)
        return 0
    t = Table(title="Dependence between predictors given the queue (conditional mutual information)",
              title_justify="left")
    for col in ("a", "b", "CMI (nats)", "flag"):
        t.add_column(col, justify="right" if col.startswith("CMI") else "left")
    for r in rows[:20]:
        t.add_row(r["a"], r["b"], f"{r['cmi_nats']:.4f}", "double-counts evidence" if r["flagged"] else "")
    out.print(t)
    n = sum(r["flagged"] for r in rows)
    out.print(f"CMI is in {NATS}. {n} flagged pair(s) (CMI above {tuning.CMI_FLAG} nats). A flagged pair of fields "
              "could be merged into one joint field in the export.", markup=False)
    for r in rows:
        if r["flagged"] and not r["a"].startswith("word ") and not r["b"].startswith("word "):
            out.print(f"  check the merge: triage independence --try-merge {r['a']} {r['b']}", markup=False)
    return 0
