"""Commands that make or open a workspace: init, import, demo, ui, serve."""

from __future__ import annotations

import argparse
import os
import sys
from pathlib import Path
from typing import Any

from triage.app import Workspace, WorkspaceError
from triage.cli.output import SAFETY_NOTE, count, emit_json, err, open_workspace, out, pct, progress_bar
from triage.cli.render import render_decisions, render_scorecard


def cmd_init(args: argparse.Namespace) -> int:
    from triage.app import infer_config

    config, reasons = infer_config(args.source, label=args.label)
    path = Workspace.create(args.workspace, config, comments=reasons, overwrite=args.force)
    if args.json:
        emit_json({"config": str(path), "reasons": reasons})
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
        emit_json(data)
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
    with open_workspace(args) as ws:
        rep = ws.import_file(args.file, progress=not args.json)
        _report_import(rep, args.json)
    if not rep.result.records:
        # every row was rejected: a script must not carry on as if the file had been imported
        err.print(f"triage import: error: {rep.result.path}: nothing imported, all {rep.result.rows_read} rows "
                  "rejected", markup=False, soft_wrap=True)
        return 2
    return 0


def cmd_demo(args: argparse.Namespace) -> int:
    from triage.app.demo import build_demo

    update, stop = progress_bar(not args.json and err.is_terminal)
    try:
        result = build_demo(Path(args.dir), scenario=args.scenario, progress=update, force=args.force)
    finally:
        stop()
    if args.json:
        emit_json(result)
        return 0
    out.print(f"Demo workspace [b]{result['workspace']}[/] ({result['scenario']}): imported {count(result['imported'])} "
              f"items, trained model version {result['version']}.")
    render_scorecard(result["scorecard"])
    render_decisions(result["decisions"], limit=15)
    b = result["batch"]
    out.print(f"Incoming run: {count(b['routed'])} of {count(b['n'])} auto-routed, {count(b['held'])} held for review; unseen-word "
              f"share {pct(b['unseen_word_share'])}, queue-mix PSI {b['queue_mix_psi']:.3f}"
              f"{' (drift flagged)' if b['drift_flag'] else ''}.")
    if "accuracy_on_incoming" in result:
        out.print(f"Against the incoming items' true queues: {pct(result['accuracy_on_incoming'])} of top queues "
                  f"right, {pct(result['auto_precision_on_incoming'])} of auto-routed items right.")
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

    from triage.service import serve

    token = args.token or os.environ.get("TRIAGE_TOKEN") or None  # the environment keeps it out of `ps`
    serve(args.workspace, host=args.host, port=args.port, token=token, allowed_hosts=args.allow_host)
    return 0
