"""Commands that decide items: route (a file, stdin, or --follow) and explain."""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path
from typing import Any

from triage.app import Workspace, describe_reject, first_of_each_id
from triage.cli.output import emit_json, err, open_workspace, out
from triage.cli.render import render_decisions, render_explanation
from triage.cli.training import engine_options


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
    with open_workspace(args) as ws:
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
            decisions, result, batch = ws.route_file(args.file, **engine_options(args))
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
    with open_workspace(args, read_only=True) as ws:
        x = ws.explain(args.id, n=args.top)
        if args.json:
            emit_json(x)
        else:
            render_explanation(x)
    return 0
