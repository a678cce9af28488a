"""Commands a person changes the model with: correct, undo, models (rollback), cutoff, overview."""

from __future__ import annotations

import argparse

from triage.app import Workspace, WorkspaceError
from triage.app.corrections import reviewer
from triage.cli.output import emit_json, open_workspace, out, pct
from triage.cli.render import render_models, render_overview


def who(args: argparse.Namespace, ws: Workspace) -> str:
    """The name a change is recorded under: --by, else the configured reviewer, else "operator"."""
    return args.by or reviewer(ws) or "operator"


def cmd_correct(args: argparse.Namespace) -> int:
    with open_workspace(args) as ws:
        rep = ws.correct(args.id, args.queue, by=who(args, ws), new_queue=args.new_queue)
        data = {"correction": vars(rep.correction), "model_version": rep.version.version, "before": rep.before,
                "after": rep.after, "decision": rep.decision}
        if args.json:
            emit_json(data)
        else:
            d = rep.decision or {}
            out.print(f"Correction {rep.correction.id}: {args.id} {rep.before or '(unlabelled)'} -> {rep.after}, "
                      f"learned; model version {rep.version.version} is active. The item now scores "
                      f"{d.get('suggested') or '-'} ({pct(d.get('confidence'))}).")
    return 0


def cmd_undo(args: argparse.Namespace) -> int:
    with open_workspace(args) as ws:
        rep = ws.undo(by=who(args, ws))
        if args.json:
            emit_json({"correction": vars(rep.correction), "model_version": rep.version.version})
        else:
            out.print(f"Undid the correction of {rep.correction.item_id}: back to {rep.after or '(unlabelled)'}; "
                      f"model version {rep.version.version} is active.")
    return 0


def cmd_models(args: argparse.Namespace) -> int:
    with open_workspace(args, read_only=args.action == "list") as ws:
        if args.action == "activate":
            if args.version is None:
                raise WorkspaceError("say which version: triage models activate VERSION")
            mv = ws.activate(args.version)
            if args.json:
                emit_json({"active": mv.version})
            else:
                out.print(f"Model version {mv.version} is now active.")
            return 0
        versions = ws.models()
        if args.json:
            emit_json([vars(v) for v in versions])
        else:
            render_models(versions)
    return 0


def cmd_cutoff(args: argparse.Namespace) -> int:
    try:
        value = None if args.value.lower() in ("none", "off") else float(args.value)
    except ValueError:
        raise WorkspaceError(f"cutoff {args.value!r}: give a number between 0 and 1, or none") from None
    with open_workspace(args) as ws:
        mv = ws.set_cutoffs({args.queue: value}, by=who(args, ws))
    if args.json:
        emit_json({"version": mv.version, "queue": args.queue, "cutoff": value})
    else:
        what = "auto-routes nothing" if value is None else f"auto-routes at confidence >= {value:.3f}"
        out.print(f"{args.queue} now {what}; model version {mv.version} is active (`triage models activate "
                  f"{mv.parent}` undoes it). `triage evaluate` shows what the cutoffs do.")
    return 0


def cmd_overview(args: argparse.Namespace) -> int:
    with open_workspace(args, read_only=True) as ws:
        data = ws.overview()
    if args.json:
        emit_json(data)
    else:
        render_overview(data)
    return 0
