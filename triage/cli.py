"""The `triage` command: parses arguments, calls the workspace, prints with rich (or JSON with --json).

Every user error ends with exit code 2 and one clear line on stderr; a traceback only with --debug.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any

from rich import box
from rich.console import Console
from rich.markup import escape
from rich.progress import BarColumn, Progress, TextColumn, TimeElapsedColumn
from rich.table import Table

from triage import __version__
from triage.app import USER_ERRORS as APP_USER_ERRORS
from triage.app import Workspace, WorkspaceError, describe_reject, first_of_each_id

# the error types that exit 2 with one line on stderr; any other exception is a bug and shows its traceback
USER_ERRORS = (*APP_USER_ERRORS, FileNotFoundError, PermissionError, IsADirectoryError)

SAFETY_NOTE = ("Queues marked never_auto (such as a safety queue) are never auto-routed: a person reviews every item "
               "predicted there, every item that gives such a queue a real chance, and every item that mentions "
               "one of its watch words.")

out = Console(highlight=False)
err = Console(stderr=True, highlight=False)


def _emit_json(data: Any) -> None:
    sys.stdout.write(json.dumps(data, ensure_ascii=False, default=_jsonable) + "\n")


def _jsonable(v: Any) -> Any:
    if hasattr(v, "item"):
        return v.item()
    if hasattr(v, "__dict__"):
        return vars(v)
    return str(v)


def _progress_cb(enabled: bool) -> tuple[Callable[[str, float], None], Callable[[], None]]:
    """A rich progress bar on stderr fed by the workspace's (stage, fraction) callback."""
    if not enabled:
        return (lambda _s, _f: None), (lambda: None)
    bar = Progress(TextColumn("{task.description:<44}"), BarColumn(), TextColumn("{task.percentage:>3.0f}%"),
                   TimeElapsedColumn(), console=err, transient=True)
    task = bar.add_task("starting", total=1.0)
    bar.start()

    def update(stage: str, frac: float) -> None:
        bar.update(task, description=stage, completed=frac)

    return update, bar.stop


# ----- rendering ---------------------------------------------------------------------------------------------
def _pct(x: float | None) -> str:
    return "-" if x is None else f"{100 * x:.1f}%"


def render_scorecard(card: dict[str, Any], console: Console = out) -> None:
    """The confusion matrix and the per-queue table at the cutoffs."""
    queues = card["queues"]
    m = Table(title="Confusion matrix (rows: true queue, columns: suggested queue)", title_justify="left",
              box=box.SIMPLE_HEAD, pad_edge=False)
    m.add_column("true \\ suggested")
    for q in queues:
        m.add_column(q[:12], justify="right")
    for q, row in zip(queues, card["matrix"], strict=True):
        total = sum(row) or 1
        m.add_row(q, *[f"[bold]{v}[/]" if i == queues.index(q) else (f"{v}" if v / total < 0.05 else f"[yellow]{v}[/]")
                       for i, v in enumerate(row)])
    console.print(m)
    t = Table(title="Per queue, at the cutoffs (auto: share of its items auto-routed)", title_justify="left",
              box=box.SIMPLE_HEAD, pad_edge=False)
    width = max((len(q["queue"]) for q in card["per_queue"]), default=5)
    t.add_column("queue", no_wrap=True, min_width=min(width, 20))
    for col in ("target", "cutoff", "prec.", "recall", "F1", "n", "auto", "held"):
        t.add_column(col, justify="right", no_wrap=True, min_width=6 if col in ("auto", "held", "prec.", "recall", "target") else None)
    for q in card["per_queue"]:
        cutoff = "person" if q["never_auto"] else ("none" if q["cutoff"] is None else f"{q['cutoff']:.3f}")
        t.add_row(q["queue"], _pct(q["target"]), cutoff, _pct(q["precision"]) if q["routed"] else "-",
                  _pct(q["recall"]) if q["support"] else "-", f"{q['f1']:.3f}" if q["support"] else "-", str(q["support"]), _pct(q["coverage"]), _pct(q["held_share"]))
    console.print(t)
    console.print("cutoff: person = never auto-routed, a person sees every item; none = no cutoff meets the target "
                  "yet, so nothing is auto-routed there")
    untested = card.get("untested") or []
    if untested:
        console.print(f"No test items for {', '.join(untested)}: left out of macro-F1 (its F1 cannot be measured "
                      "on these items).", markup=False)
    console.print(
        f"items {card['n']}  accuracy (top queue) {_pct(card['accuracy'])}  macro-F1 {card['macro_f1']:.3f}  "
        f"auto-routed {_pct(card['coverage'])} at precision {_pct(card['auto_precision'])}  "
        f"held for review {_pct(card['held_share'])}"
    )


def render_decisions(decisions: Sequence[dict[str, Any]], console: Console = out, limit: int = 40) -> None:
    t = Table(title=f"Decisions ({len(decisions)} items; first {min(limit, len(decisions))} shown)",
              title_justify="left", box=box.SIMPLE_HEAD, pad_edge=False)
    for col, width in (("id", 9), ("decision", 14), ("conf.", 5), ("runner-up", 10)):
        t.add_column(col, overflow="ellipsis", no_wrap=True, min_width=width)
    t.add_column("strongest evidence", ratio=1)
    for d in decisions[:limit]:
        decision = f"held ({d['suggested']}?)" if d["held"] else d["queue"]
        if d.get("flag") == "never_auto":
            decision = f"[b red]person: {d['suggested']}[/]"
        elif d.get("flag") == "watch":
            decision = f"[b red]held: check {escape(', '.join(d['watch']))}[/]"
        top = ", ".join(f"{e['feature']} {e['weight']:+.1f}" for e in d["evidence"][:2])
        t.add_row(d["id"], decision, f"{d['confidence']:.2f}", d["runner_up"] or "-", top)
    console.print(t)


def render_explanation(x: dict[str, Any], console: Console = out) -> None:
    state = "held for review" if x["held"] else f"routed to {x['queue']}"
    console.print(f"[b]{x['id']}[/]: {state}. Top queue [b]{x['suggested']}[/] ({_pct(x['confidence'])}), "
                  f"runner-up [b]{x['runner_up']}[/] ({_pct(x['runner_up_confidence'])}). {x['reason']}.")
    if x.get("label"):
        console.print(f"Its current label: {x['label']}.")
    if x.get("stored_note"):
        console.print(f"Note: {x['stored_note']}.", markup=False)
    console.print(f"The evidence below adds up to the log-odds gap {x['log_odds_gap']:.3f} between the two queues "
                  f"(sum of all {x['n_terms']} terms: {x['terms_total']:.3f}); confidences are calibrated with "
                  f"temperature {x['temperature']:.2f}.")
    for title, key in ((f"For {x['suggested']}", "for"), (f"For {x['runner_up']}", "against")):
        t = Table(title=title, title_justify="left")
        t.add_column("evidence")
        t.add_column("weight", justify="right")
        t.add_column("")
        for e in x[key]:
            bar = "█" * min(30, int(round(abs(e["weight"]) * 4)))
            name = e["feature"] + (f" ×{e['count']:g}" if e["kind"] == "token" and e["count"] != 1 else "")
            t.add_row(name, f"{e['weight']:+.3f}", f"[{'green' if e['weight'] > 0 else 'red'}]{bar}[/]")
        console.print(t)
    if x["unseen_words"]:
        console.print("Words the model has never seen (no evidence either way): " + ", ".join(x["unseen_words"][:20]))


def render_models(versions: Sequence[Any], console: Console = out) -> None:
    t = Table(title="Model versions (* active)", title_justify="left", box=box.SIMPLE_HEAD, pad_edge=False)
    for col in ("", "ver.", "kind", "created", "text model", "acc.", "auto"):
        t.add_column(col, no_wrap=True)
    t.add_column("note", ratio=1, min_width=18, overflow="fold")
    for v in versions:
        card = v.scorecard or {}
        spec = v.config.get("spec", {})
        model = f"{spec.get('text_model', '?')} {spec.get('alpha_text', '?'):g}" if isinstance(
            spec.get("alpha_text"), int | float) else str(spec.get("text_model", "?"))
        t.add_row("*" if v.active else "", str(v.version), v.kind, v.created_at[5:16].replace("T", " "), model, _pct(card.get("accuracy")),
                  _pct(card.get("coverage")), v.note)
    console.print(t)


# ----- commands ----------------------------------------------------------------------------------------------
def _ws(args: argparse.Namespace, *, read_only: bool = False) -> Workspace:
    """The workspace; commands that only look open it read-only, so they work on a read-only copy."""
    return Workspace.open(args.workspace, read_only=read_only)


def cmd_init(args: argparse.Namespace) -> int:
    from triage.app import infer_config

    config, reasons = infer_config(args.source, label=args.label)
    path = Workspace.create(args.workspace, config, comments=reasons, overwrite=args.force)
    if args.json:
        _emit_json({"config": str(path), "reasons": reasons})
        return 0
    out.print(f"Wrote [b]{path}[/]. What was inferred, and why:")
    for name, why in reasons.items():
        out.print(f"  {name}: {why}")
    out.print(f"Review the roles, then: triage import {args.source} -w {args.workspace} && triage train "
              f"-w {args.workspace}")
    return 0


def _report_import(rep: Any, as_json: bool) -> None:
    r = rep.result
    data = {"file": r.path, "rows_read": r.rows_read, "added": rep.added, "unchanged": rep.unchanged,
            "rejected": len(r.rejects), "rejects_file": str(r.rejects_path) if r.rejects_path else None,
            "conflicts": [vars(c) for c in rep.conflicts], "warnings": r.warnings}
    if as_json:
        _emit_json(data)
        return
    out.print(f"{r.path}: {r.rows_read} rows read, {rep.added} new items, {rep.unchanged} already stored, "
              f"{len(r.rejects)} rejected, {len(rep.conflicts)} conflicts (stored labels kept).")
    for w in r.warnings[:25]:
        err.print(f"warning: {w}", markup=False, soft_wrap=True)
    for c in rep.conflicts[:10]:
        err.print(f"conflict: item {c.item_id}: stored {c.kind} {c.stored!r}, file says {c.incoming!r}; kept stored",
                  markup=False, soft_wrap=True)
    if r.rejects_path:
        out.print(f"Rejected rows, with row numbers and reasons: {r.rejects_path}", markup=False, soft_wrap=True)


def cmd_import(args: argparse.Namespace) -> int:
    with _ws(args) as ws:
        rep = ws.import_file(args.file, progress=not args.json)
        _report_import(rep, args.json)
    if not rep.result.records:
        # every row was rejected: a script must not carry on as if the file had been imported
        err.print(f"triage import: error: {rep.result.path}: nothing imported, all {rep.result.rows_read} rows "
                  "rejected", markup=False, soft_wrap=True)
        return 2
    return 0


def _train(ws: Workspace, as_json: bool, args: argparse.Namespace | None = None) -> Any:
    update, stop = _progress_cb(not as_json and err.is_terminal)
    try:
        rep = ws.train(progress=update, **_engine_options(args))
    finally:
        stop()
    return rep


def _add_engine_options(sp: argparse.ArgumentParser) -> None:
    sp.add_argument("--engine", choices=["local", "dask"], default="local",
                    help="where to count or decide: local (this process, default) or dask (a cluster)")
    sp.add_argument("--scheduler", metavar="ADDRESS",
                    help="a running Dask scheduler, e.g. tcp://10.0.0.5:8786 (default: a local cluster)")
    sp.add_argument("--workers", type=int, help="worker processes of the local cluster (default: one per core)")


def _engine_options(args: argparse.Namespace | None) -> dict[str, Any]:
    if args is None or getattr(args, "engine", "local") == "local" and not getattr(args, "scheduler", None):
        return {}
    return {"engine": args.engine, "scheduler": args.scheduler, "workers": args.workers}


def cmd_train(args: argparse.Namespace) -> int:
    with _ws(args) as ws:
        rep = _train(ws, args.json, args)
        meas = rep.measurement
        data = {"version": rep.version.version, "items": rep.n_items, "seconds": round(rep.seconds, 2),
                "spec": meas.spec.to_dict(), "selection": rep.selection, "cutoffs": meas.cutoffs,
                "calibration": {k: v for k, v in meas.calibration.items() if k != "reliability"},
                "scorecard": meas.scorecard.to_dict(), "warnings": rep.warnings}
        if args.json:
            _emit_json(data)
            return 0
        for w in rep.warnings:
            err.print(f"warning: {w}", markup=False, soft_wrap=True)
        s = meas.spec
        out.print(f"Trained model version [b]{rep.version.version}[/] on {rep.n_items} items in {rep.seconds:.1f} s: "
                  f"{s.text_model} text (alpha {s.alpha_text}), fields alpha {s.alpha_fields}.")
        if rep.selection:
            out.print(f"Chosen by 3-fold cross-validation among {len(rep.selection)} settings (macro-F1).")
        c = meas.calibration
        hold = c.get("holdout") or c
        out.print(f"Calibration: temperature {c['temperature']:.2f}"
                  f"{', then isotonic' if (c.get('isotonic') or {}).get('used') else ''}; on the newest items the "
                  f"expected calibration error is {hold['ece_before']:.3f} raw, {hold['ece_after']:.3f} calibrated.")
        sc = meas.scorecard
        which = "newest" if meas.split.get("kind") == "time" else "randomly chosen (no arrival times)"
        out.print(f"On the {which} {meas.split['test_items']} items (not used to fit): accuracy {_pct(sc.accuracy)}, "
                  f"auto-routed {_pct(sc.coverage)} at precision {_pct(sc.auto_precision)}. `triage evaluate` "
                  "shows the full scorecard.")
        layer = c.get("score_layer") or {}
        out.print("Score layer: " + ("on (fitted on out-of-fold scores)." if layer.get("used")
                                     else f"off: {layer.get('why', 'not fitted')}."), markup=False)
        closed = [q for q, info in meas.cutoffs.items() if info.get("cutoff") is None and not info.get("never_auto")]
        if closed:
            why = meas.cutoffs[closed[0]].get("why", "")
            out.print(f"{len(closed)} queue(s) auto-route nothing yet ({', '.join(closed[:6])}"
                      f"{', ...' if len(closed) > 6 else ''}). {closed[0]}: {why}", markup=False, soft_wrap=True)
    return 0


def cmd_evaluate(args: argparse.Namespace) -> int:
    with _ws(args, read_only=True) as ws:
        update, stop = _progress_cb(not args.json and err.is_terminal)
        try:
            meas = ws.evaluate(progress=update, split=args.split, folds=args.folds)
        finally:
            stop()
        card = meas.scorecard.to_dict()
        for w in meas.notes:
            err.print(f"warning: {w}", markup=False, soft_wrap=True)
        if args.json:
            _emit_json({"split": meas.split, "scorecard": card, "warnings": meas.notes, "cutoffs": meas.cutoffs,
                        "active_cutoffs": meas.active_cutoffs,
                        "scorecard_at_active_cutoffs": meas.at_active.to_dict() if meas.at_active else None,
                        "calibration": meas.calibration, "precision_coverage": meas.precision_coverage(50)})
            return 0
        sp = meas.split
        if sp["kind"] == "kfold":
            out.print(f"Stratified {sp['folds']}-fold: every one of the {sp['test_items']} labelled items decided by "
                      "a model, calibration and cutoffs fitted without it (cutoff column: median over folds).")
        else:
            out.print(_split_line(sp))
        render_scorecard(card)
        if meas.at_active is not None:
            a = meas.at_active
            hand = ", ".join(f"{q} {'none' if c is None else f'{c:.3f}'}" for q, c in sorted(meas.active_cutoffs.items()))
            out.print(f"The active version routes with other cutoffs (set by hand, or solved when it was trained on "
                      f"other labels): {hand}; at those the same items are auto-routed "
                      f"{_pct(a.coverage)} at precision {_pct(a.auto_precision)}.")
        render_calibration(meas.calibration)
        out.print(SAFETY_NOTE)
    return 0


def _split_line(sp: dict[str, Any]) -> str:
    """How the scorecard's items were chosen, in words; never "None to None" when times are missing."""
    kind = sp.get("kind")
    if kind == "random":
        return (f"No arrival times: trained on a random {sp['train_items']} items, scored on the other "
                f"{sp['test_items']} (stratified by queue, seed {sp.get('seed', 0)}).")
    base = f"Trained on the {sp['train_items']} oldest items, scored on the {sp['test_items']} newest"
    if sp.get("test_from") and sp.get("test_to"):
        return f"{base} ({sp['test_from']} to {sp['test_to']})."
    return f"{base} (by id order: these items have no arrival times)."


def render_calibration(c: dict[str, Any], console: Console = out) -> None:
    """The reliability table of the routing confidences and the calibration error at each step."""
    iso = c.get("isotonic") or {}
    where = c.get("measured_on", "out-of-fold scores of the training items, which calibration was fitted on")
    t = Table(title="Reliability of the routing confidence", caption=f"on {where}", title_justify="left")
    for col in ("confidence", "items", "mean confidence", "accuracy"):
        t.add_column(col, justify="right")
    for b in c.get("reliability", []):
        t.add_row(f"{b['lo']:.1f}-{b['hi']:.1f}", str(b["n"]), f"{b['mean_confidence']:.3f}", f"{b['accuracy']:.3f}")
    console.print(t)
    steps = f"raw {c['ece_before']:.3f}, after temperature {c['ece_temperature']:.3f}"
    steps += f", after isotonic {c['ece_after']:.3f}" if iso.get("used") else ""
    console.print(f"Calibration: temperature {c['temperature']:.2f}; expected calibration error {steps}.")
    if not iso.get("used"):
        console.print(f"Isotonic calibration not used: {iso.get('why', 'not fitted')}.", markup=False)
    hold = c.get("holdout")
    if hold:
        steps = f"raw {hold['ece_before']:.3f}, after temperature {hold['ece_temperature']:.3f}"
        steps += f", after isotonic {hold['ece_after']:.3f}" if iso.get("used") else ""
        console.print(f"On the scored items (not used for calibration): {steps}.")


def _error_record(source: str, r: Any, id_field: str) -> dict[str, Any]:
    """The output line of an input row that got no decision: which row, which field, why."""
    raw = r.raw if isinstance(r.raw, dict) else {}
    item_id = raw.get(id_field)
    return {"error": describe_reject(source, r), "row": r.row, "line": r.line, "field": r.field,
            "id": None if item_id in (None, "") else str(item_id)}


def _clash_record(source: str, item_id: str) -> dict[str, Any]:
    return {"error": f"{source}: item {item_id!r} not routed: already stored with other field values (a reopened "
            "or changed item; give it a new id)", "row": None, "line": None, "field": "id", "id": item_id}


def cmd_route(args: argparse.Namespace) -> int:
    """Every input row gets a line: a decision, or an error record saying why not (exit code 1 then)."""
    with _ws(args) as ws:
        if args.follow:
            return _follow(ws, args)
        id_field = ws.config.schema.id
        for w in ws.safety_warnings():
            err.print(f"warning: {w}", markup=False, soft_wrap=True)
        if args.file == "-":
            from triage.app import read_jsonl_stream

            records, rejects, line_of = [], [], []
            counted = _Counted(sys.stdin)
            for r in read_jsonl_stream(counted, ws.config.schema, max_text_chars=ws.config.max_text_chars):
                if hasattr(r, "item_id"):
                    records.append(r)
                    line_of.append(counted.n)  # the stream is lazy: the line just read is this item's
                else:
                    rejects.append(r)
            records, dupes = first_of_each_id(records, line_of, id_field)
            errors = [_error_record("<stdin>", rj, id_field) for rj in [*rejects, *dupes]]
            clash = ws.stored_with_other_fields(records)
            errors += [_clash_record("<stdin>", item_id) for item_id in sorted(clash)]
            decisions, batch = ws.route_records([r for r in records if r.item_id not in clash], source="<stdin>")
        else:
            decisions, result, batch = ws.route_file(args.file, **_engine_options(args))
            if getattr(args, "engine", "local") != "local":
                err.print(f"decisions also written to {ws.root / 'runs' / f'run-{batch}.parquet'}", markup=False,
                          soft_wrap=True)
            src = Path(args.file).name
            errors = [_error_record(src, rj, id_field) for rj in result.rejects]
            for w in result.warnings[:25]:
                err.print(f"warning: {w}", markup=False, soft_wrap=True)
        if args.json or not sys.stdout.isatty():
            for d in decisions:
                sys.stdout.write(json.dumps(d, ensure_ascii=False) + "\n")
            for e in errors:
                sys.stdout.write(json.dumps(e, ensure_ascii=False) + "\n")
        else:
            render_decisions(decisions)
            for e in errors:
                err.print(f"not routed: {e['error']}", markup=False, soft_wrap=True)
            n_held = sum(d["held"] for d in decisions)
            out.print(f"Run {batch}: {len(decisions) - n_held} auto-routed, {n_held} held for review"
                      f"{f', {len(errors)} not routed (see above)' if errors else ''}. `triage explain ID` shows why.")
    return 1 if errors else 0


class _Counted:
    """Lines of a stream, counted as they are read."""

    def __init__(self, lines: Any) -> None:
        self.lines = iter(lines)
        self.n = 0

    def __iter__(self) -> _Counted:
        return self

    def __next__(self) -> str:
        line = next(self.lines)
        self.n += 1
        return line


def _follow(ws: Workspace, args: argparse.Namespace) -> int:
    """Decide each JSON line as soon as it arrives; a bad line gets an error record on stderr, the stream goes on."""
    from triage.app import read_jsonl_stream

    stream = sys.stdin if args.file == "-" else open(args.file, encoding="utf-8")  # noqa: SIM115
    try:
        for r in read_jsonl_stream(stream, ws.config.schema, max_text_chars=ws.config.max_text_chars):
            if not hasattr(r, "item_id"):
                sys.stderr.write(json.dumps({"error": r.reason, "line": r.row, "field": r.field}) + "\n")
                sys.stderr.flush()
                continue
            ws.refresh_if_changed()
            if ws.stored_with_other_fields([r]):
                sys.stderr.write(json.dumps({"error": "already stored with other field values; give a changed "
                                             "item a new id", "line": getattr(r, "row", None), "id": r.item_id,
                                             "field": "id"}) + "\n")
                sys.stderr.flush()
                continue
            decisions, _ = ws.route_records([r], source="<follow>")
            sys.stdout.write(json.dumps(decisions[0], ensure_ascii=False) + "\n")
            sys.stdout.flush()
    finally:
        if stream is not sys.stdin:
            stream.close()
    return 0


def cmd_explain(args: argparse.Namespace) -> int:
    with _ws(args, read_only=True) as ws:
        x = ws.explain(args.id, n=args.top)
        if args.json:
            _emit_json(x)
        else:
            render_explanation(x)
    return 0


def cmd_correct(args: argparse.Namespace) -> int:
    with _ws(args) as ws:
        rep = ws.correct(args.id, args.queue, by=args.by, new_queue=args.new_queue)
        data = {"correction": vars(rep.correction), "model_version": rep.version.version, "before": rep.before,
                "after": rep.after, "decision": rep.decision}
        if args.json:
            _emit_json(data)
        else:
            d = rep.decision or {}
            out.print(f"Correction {rep.correction.id}: {args.id} {rep.before or '(unlabelled)'} -> {rep.after}, "
                      f"learned; model version {rep.version.version} is active. The item now scores "
                      f"{d.get('suggested')} ({_pct(d.get('confidence'))}).")
    return 0


def cmd_undo(args: argparse.Namespace) -> int:
    with _ws(args) as ws:
        rep = ws.undo(by=args.by)
        if args.json:
            _emit_json({"correction": vars(rep.correction), "model_version": rep.version.version})
        else:
            out.print(f"Undid the correction of {rep.correction.item_id}: back to {rep.after or '(unlabelled)'}; "
                      f"model version {rep.version.version} is active.")
    return 0


def cmd_models(args: argparse.Namespace) -> int:
    with _ws(args, read_only=args.action == "list") as ws:
        if args.action == "activate":
            if args.version is None:
                raise WorkspaceError("say which version: triage models activate VERSION")
            mv = ws.activate(args.version)
            if args.json:
                _emit_json({"active": mv.version})
            else:
                out.print(f"Model version {mv.version} is now active.")
            return 0
        versions = ws.models()
        if args.json:
            _emit_json([vars(v) for v in versions])
        else:
            render_models(versions)
    return 0


def cmd_cutoff(args: argparse.Namespace) -> int:
    try:
        value = None if args.value.lower() in ("none", "off") else float(args.value)
    except ValueError:
        raise WorkspaceError(f"cutoff {args.value!r}: give a number between 0 and 1, or none") from None
    with _ws(args) as ws:
        mv = ws.set_cutoffs({args.queue: value}, by=args.by)
    if args.json:
        _emit_json({"version": mv.version, "queue": args.queue, "cutoff": value})
    else:
        what = "auto-routes nothing" if value is None else f"auto-routes at confidence >= {value:.3f}"
        out.print(f"{args.queue} now {what}; model version {mv.version} is active (`triage models activate "
                  f"{mv.parent}` undoes it). `triage evaluate` shows what the cutoffs do.")
    return 0


def cmd_overview(args: argparse.Namespace) -> int:
    with _ws(args, read_only=True) as ws:
        data = ws.overview()
    if args.json:
        _emit_json(data)
    else:
        out.print_json(json.dumps(data))
    return 0


def cmd_tune(args: argparse.Namespace) -> int:
    from triage.app import tuning

    with _ws(args) as ws:
        update, stop = _progress_cb(not args.json and err.is_terminal)
        try:
            rows = tuning.run_grid(ws, folds=args.folds, progress=update)
        finally:
            stop()
        changes = tuning.adopt(ws, rows[0]) if args.adopt else []
        if args.json:
            _emit_json({"settings": [r.to_dict() for r in rows], "adopted": rows[0].to_dict() if args.adopt else None,
                        "changes": [{"key": k, "old": a, "new": b} for k, a, b in changes]})
            return 0
        t = Table(title=f"{len(rows)} settings, {args.folds}-fold cross-validation, best first (auto-routed at "
                  "target, then macro-F1, then log loss)", title_justify="left")
        # every setting that differs between rows gets a column; the ones all rows share are said once below
        settings = {"text model": lambda r: r.text_model, "alpha": lambda r: f"{r.alpha_text:g}",
                    "bigrams": lambda r: "yes" if r.bigrams else "no", "fields": lambda r: "yes" if r.fields else "no",
                    "transforms": lambda r: "yes" if r.transforms else "no",
                    "weights": lambda r: " ".join(f"{n}={w:g}" for n, w in r.text_weights.items())}
        differ = [name for name, get in settings.items() if len({get(r) for r in rows}) > 1]
        for col in (*differ, "accuracy", "macro-F1", "log loss", "auto-routed at target"):
            t.add_column(col, justify="left" if col == "text model" else "right")
        for r in rows[: args.top]:
            t.add_row(*(settings[c](r) for c in differ),
                      _pct(r.accuracy), f"{r.macro_f1:.3f}", f"{r.log_loss:.3f}", _pct(r.coverage))
        out.print(t)
        same = [f"{name} {get(rows[0])}" for name, get in settings.items() if name not in differ]
        if same:
            out.print("Every row: " + ", ".join(same) + ".", markup=False)
        for key, old, new in changes:
            out.print(f"  {key}: {old!r} -> {new!r}", markup=False)
        best = rows[0]
        verb = "Adopted into triage.toml; run `triage train`." if args.adopt else "Adopt it with `triage tune --adopt`."
        out.print(f"Recommended: {best.text_model}, alpha {best.alpha_text:g}, bigrams "
                  f"{'on' if best.bigrams else 'off'}. {verb}")
    return 0


def cmd_lift(args: argparse.Namespace) -> int:
    from triage.app import tuning

    with _ws(args) as ws:
        data = tuning.lift_for(ws, args.queue)
    if args.json:
        _emit_json(data)
        return 0
    t = Table(title=f"Lift for {data['queue']} by decile of its score ({data['items']} newest items, "
              f"{data['positives']} in the queue)", title_justify="left")
    for col in ("decile", "items", "in queue", "rate", "lift", "cumulative gain"):
        t.add_column(col, justify="right")
    for d in data["deciles"]:
        t.add_row(str(d["bin"]), str(d["n"]), str(d["positives"]), _pct(d["rate"]), f"{d['lift']:.2f}",
                  _pct(d["cumulative_gain"]))
    out.print(t)
    out.print(f"The top 10% by score holds {_pct(data['captured_top_10'])} of the queue; the top 20% holds "
              f"{_pct(data['captured_top_20'])}.")
    return 0


def cmd_independence(args: argparse.Namespace) -> int:
    from triage.app import tuning

    with _ws(args) as ws:
        if args.try_merge:
            res = tuning.try_merge(ws, *args.try_merge)
        else:
            rows = tuning.independence(ws)
    if args.try_merge:
        if args.json:
            _emit_json(res)
            return 0
        t = Table(title=f"{res['a']} and {res['b']}: apart vs merged into {res['field']} ({res['levels']} levels), "
                  f"{res['folds']}-fold cross-validation", title_justify="left")
        for col in ("fields", "accuracy", "macro-F1", "log loss"):
            t.add_column(col, justify="left" if col == "fields" else "right")
        for key in ("apart", "merged"):
            r = res[key]
            t.add_row(key, _pct(r["accuracy"]), f"{r['macro_f1']:.4f}", f"{r['log_loss']:.4f}")
        out.print(t)
        out.print("Merging helps (lower log loss, macro-F1 no worse): add the joint field to the export."
                  if res["merge_helps"] else "Merging does not help on these items: keep the fields apart.")
        return 0
    if args.json:
        _emit_json(rows)
        return 0
    t = Table(title="Dependence between predictors given the queue (conditional mutual information)",
              title_justify="left")
    for col in ("a", "b", "CMI (nats)", "flag"):
        t.add_column(col)
    for r in rows[:20]:
        t.add_row(r["a"], r["b"], f"{r['cmi_nats']:.4f}", "double-counts evidence" if r["flagged"] else "")
    out.print(t)
    n = sum(r["flagged"] for r in rows)
    out.print(f"{n} flagged pair(s) (CMI > {tuning.CMI_FLAG} nats). A flagged pair of fields could be merged into "
              "one joint field in the export.")
    for r in rows:
        if r["flagged"] and not r["a"].startswith("word ") and not r["b"].startswith("word "):
            out.print(f"  check the merge: triage independence --try-merge {r['a']} {r['b']}", markup=False)
    return 0


def cmd_demo(args: argparse.Namespace) -> int:
    from triage.app.demo import build_demo

    update, stop = _progress_cb(not args.json and err.is_terminal)
    try:
        result = build_demo(Path(args.dir), scenario=args.scenario, progress=update, force=args.force)
    finally:
        stop()
    if args.json:
        _emit_json(result)
        return 0
    out.print(f"Demo workspace [b]{result['workspace']}[/] ({result['scenario']}): imported {result['imported']} "
              f"items, trained model version {result['version']}.")
    render_scorecard(result["scorecard"])
    render_decisions(result["decisions"], limit=15)
    b = result["batch"]
    out.print(f"Incoming run: {b['routed']} of {b['n']} auto-routed, {b['held']} held for review; unseen-word "
              f"share {_pct(b['unseen_word_share'])}, queue-mix PSI {b['queue_mix_psi']:.3f}"
              f"{' (drift flagged)' if b['drift_flag'] else ''}.")
    if "accuracy_on_incoming" in result:
        out.print(f"Against the incoming items' true queues: {_pct(result['accuracy_on_incoming'])} of top queues "
                  f"right, {_pct(result['auto_precision_on_incoming'])} of auto-routed items right.")
    out.print(SAFETY_NOTE)
    out.print(f"Next: triage explain {result['decisions'][0]['id']} -w {result['workspace']}   |   "
              f"triage ui -w {result['workspace']}")
    if args.ui and sys.stdout.isatty():
        return _open_ui(Path(result["workspace"]))
    return 0


def _open_ui(path: Path) -> int:
    try:
        from triage.tui.app import run_app
    except ImportError as exc:  # the terminal UI is optional at run time
        raise WorkspaceError(f"the terminal UI is not available ({exc})") from None
    run_app(path)
    return 0


def cmd_ui(args: argparse.Namespace) -> int:
    Workspace.open(args.workspace).close()  # fail with a clear message before the screen opens
    return _open_ui(Path(args.workspace))


def cmd_serve(args: argparse.Namespace) -> int:
    import os

    from triage.service import serve

    token = args.token or os.environ.get("TRIAGE_TOKEN") or None  # the environment keeps it out of `ps`
    serve(args.workspace, host=args.host, port=args.port, token=token, allowed_hosts=args.allow_host)
    return 0


# ----- parser ------------------------------------------------------------------------------------------------
def _common_options(suppress: bool) -> argparse.ArgumentParser:
    """The options every command takes, written once. The copy given to the subcommands leaves an option
    it did not see unset (SUPPRESS), so `triage -w OTHER cutoff ...` keeps OTHER: with real defaults there,
    argparse would overwrite a value given before the subcommand with the subcommand's default."""
    def default(value: Any) -> Any:
        return argparse.SUPPRESS if suppress else value

    common = argparse.ArgumentParser(add_help=False)
    common.add_argument("-w", "--workspace", default=default("."),
                        help="workspace folder (default: the current folder)")
    common.add_argument("--json", action="store_true", default=default(False), help="print JSON instead of tables")
    common.add_argument("--debug", action="store_true", default=default(False), help="show a traceback on errors")
    return common


def build_parser() -> argparse.ArgumentParser:
    common = _common_options(suppress=True)
    p = argparse.ArgumentParser(prog="triage", description="Route tickets and leads into queues, explain every "
                                "decision, measure honestly, learn from corrections.",
                                parents=[_common_options(suppress=False)])
    p.add_argument("--version", action="version", version=f"triage {__version__}")
    sub = p.add_subparsers(dest="command", metavar="COMMAND")

    def add(name: str, fn: Callable[[argparse.Namespace], int], help_text: str) -> argparse.ArgumentParser:
        sp = sub.add_parser(name, parents=[common], help=help_text, description=help_text)
        sp.set_defaults(fn=fn)
        return sp

    sp = add("init", cmd_init, "infer field roles from an export and write triage.toml for review")
    sp.add_argument("--from", dest="source", required=True, help="a CSV, JSONL or Parquet export")
    sp.add_argument("--label", help="the column holding the queue (guessed when omitted)")
    sp.add_argument("--force", action="store_true", help="replace an existing triage.toml")
    sp = add("import", cmd_import, "import labelled items from a CSV, JSONL or Parquet file")
    sp.add_argument("file", help="the file to import; rejected rows go to FILE.rejects.csv beside it")
    _add_engine_options(add("train", cmd_train, "train a new model version on every labelled item and activate it"))
    sp = add("evaluate", cmd_evaluate, "score the active settings on the newest items: confusion matrix, per-queue "
             "precision/recall at the cutoffs, coverage, reliability of the confidences")
    sp.add_argument("--split", choices=["time", "kfold"], default="time",
                    help="time: score the newest 20%% of items (default); kfold: every item by stratified k-fold")
    sp.add_argument("--folds", type=int, default=5, help="folds for --split kfold (default 5)")
    sp = add("route", cmd_route, "decide a queue (or hold for review) for each item; JSON Lines on stdout")
    sp.add_argument("file", help="a CSV/JSONL/Parquet file, or - for JSON Lines on stdin")
    sp.add_argument("--follow", action="store_true", help="decide each JSON line as soon as it arrives")
    _add_engine_options(sp)
    sp = add("explain", cmd_explain, "show the evidence for and against one item's decision")
    sp.add_argument("id", help="the item id")
    sp.add_argument("--top", type=int, default=10, help="terms to show on each side (default 10)")
    sp = add("correct", cmd_correct, "move an item to the right queue: journaled, then learned at once")
    sp.add_argument("id", help="the item id")
    sp.add_argument("queue", help="the right queue")
    sp.add_argument("--new-queue", action="store_true",
                    help="QUEUE is a new queue: create it (without this, a queue not yet known is refused)")
    sp.add_argument("--by", default="operator", help="who made the correction")
    sp = add("undo", cmd_undo, "undo the newest correction, whoever made it (journaled and learned like any "
             "correction)")
    sp.add_argument("--by", default="operator", help="who undoes it (recorded in the journal)")
    sp = add("models", cmd_models, "list model versions, or activate one (rollback)")
    sp.add_argument("action", nargs="?", choices=["list", "activate"], default="list", help="list or activate")
    sp.add_argument("version", nargs="?", type=int, help="the version to activate")
    sp = add("cutoff", cmd_cutoff, "set one queue's cutoff by hand (a new model version; the solver's stays in the "
             "parent)")
    sp.add_argument("queue", help="the queue")
    sp.add_argument("value", help="a confidence between 0 and 1, or none to auto-route nothing")
    sp.add_argument("--by", default="operator", help="who set it")
    add("overview", cmd_overview, "items, queues, the active model and the latest routing run, in one view")
    sp = add("tune", cmd_tune, "compare model settings by cross-validation, side by side; --adopt the best")
    sp.add_argument("--folds", type=int, default=5, help="cross-validation folds (default 5)")
    sp.add_argument("--top", type=int, default=15, help="rows to show (default 15)")
    sp.add_argument("--adopt", action="store_true", help="write the best setting into triage.toml")
    sp = add("lift", cmd_lift, "lift and cumulative gains by decile of one queue's score (ranking leads)")
    sp.add_argument("queue", help="the queue to rank for, e.g. enterprise")
    sp = add("independence", cmd_independence, "check which predictors double-count evidence given the queue")
    sp.add_argument("--try-merge", nargs=2, metavar=("A", "B"),
                    help="cross-validate with fields A and B apart and merged into one joint field A×B")
    sp = add("demo", cmd_demo, "build a demo workspace from an invented scenario, train, evaluate and route")
    sp.add_argument("dir", nargs="?", default="triage-demo", help="folder for the demo workspace")
    sp.add_argument("--scenario", choices=["voltwren", "haulmere"], default="voltwren",
                    help="voltwren: home-energy support tickets; haulmere: dispatch-software leads")
    sp.add_argument("--force", action="store_true", help="rebuild the folder if it exists")
    sp.add_argument("--no-ui", dest="ui", action="store_false", help="do not open the terminal UI at the end")
    add("ui", cmd_ui, "open the terminal UI on a workspace")
    sp = add("serve", cmd_serve, "serve routing over HTTP (loopback by default)")
    sp.add_argument("--host", default="127.0.0.1", help="address to bind (a token is required off loopback)")
    sp.add_argument("--port", type=int, default=8477, help="port (default 8477)")
    sp.add_argument("--token", help="bearer token that clients must send (better: set TRIAGE_TOKEN)")
    sp.add_argument("--allow-host", action="append", default=[], metavar="NAME",
                    help="a Host name to answer besides the loopback names and --host (repeatable), e.g. the "
                         "name a proxy forwards")
    return p


def main(argv: Sequence[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "fn", None):
        parser.print_help()
        return 2
    try:
        return int(args.fn(args) or 0)
    except USER_ERRORS as exc:
        if args.debug:
            raise
        err.print(f"triage {args.command}: error: {exc}", markup=False, highlight=False, soft_wrap=True)
        return 2
    except KeyboardInterrupt:
        err.print("interrupted")
        return 130
    except BrokenPipeError:
        # the reader went away (`triage route FILE | head`): stop quietly, as Unix tools do
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return 1


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
