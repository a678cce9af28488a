"""The argument parser (every command with its help) and `main`, which maps user errors to exit 2."""

from __future__ import annotations

import argparse
import os
import sys
from collections.abc import Callable, Sequence
from typing import Any

from triage import __version__
from triage.cli.changes import cmd_correct, cmd_cutoff, cmd_models, cmd_overview, cmd_undo
from triage.cli.output import USER_ERRORS, err
from triage.cli.routing import cmd_explain, cmd_route
from triage.cli.setup import cmd_demo, cmd_import, cmd_init, cmd_serve, cmd_ui
from triage.cli.training import (
    add_engine_options,
    cmd_evaluate,
    cmd_independence,
    cmd_lift,
    cmd_train,
    cmd_tune,
)


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
    add_engine_options(add("train", cmd_train, "train a new model version on every labelled item and activate it"))
    sp = add("evaluate", cmd_evaluate, "score the active settings on the newest items: confusion matrix, per-queue "
             "precision/recall at the cutoffs, the share auto-routed, reliability of the confidences")
    sp.add_argument("--split", choices=["time", "kfold"], default="time",
                    help="time: score the newest 20%% of items (default); kfold: every item by stratified k-fold")
    sp.add_argument("--folds", type=int, default=5, help="folds for --split kfold (default 5)")
    sp = add("route", cmd_route, "decide a queue (or hold for review) for each item; JSON Lines on stdout")
    sp.add_argument("file", help="a CSV/JSONL/Parquet file, or - for JSON Lines on stdin")
    sp.add_argument("--follow", action="store_true", help="decide each JSON line as soon as it arrives")
    add_engine_options(sp)
    sp = add("explain", cmd_explain, "show the evidence for and against one item's decision")
    sp.add_argument("id", help="the item id")
    sp.add_argument("--top", type=int, default=10, help="terms to show on each side (default 10)")
    sp = add("correct", cmd_correct, "move an item to the right queue: journaled, then learned at once")
    sp.add_argument("id", help="the item id")
    sp.add_argument("queue", help="the right queue")
    sp.add_argument("--new-queue", action="store_true",
                    help="QUEUE is a new queue: create it (without this, a queue not yet known is refused)")
    sp.add_argument("--by", help="who made the correction (default: [desk] reviewer in triage.toml, else "
                    "TRIAGE_REVIEWER, else operator)")
    sp = add("undo", cmd_undo, "undo the newest correction, whoever made it (journaled and learned like any "
             "correction)")
    sp.add_argument("--by", help="who undoes it, recorded in the journal (default as for correct)")
    sp = add("models", cmd_models, "list model versions, or activate one (rollback)")
    sp.add_argument("action", nargs="?", choices=["list", "activate"], default="list", help="list or activate")
    sp.add_argument("version", nargs="?", type=int, help="the version to activate")
    sp = add("cutoff", cmd_cutoff, "set one queue's cutoff by hand (a new model version; the solver's stays in the "
             "parent)")
    sp.add_argument("queue", help="the queue")
    sp.add_argument("value", help="a confidence between 0 and 1, or none to auto-route nothing")
    sp.add_argument("--by", help="who set it (default as for correct)")
    add("overview", cmd_overview, "items, queues, the active model and the latest routing run, in one view")
    sp = add("tune", cmd_tune, "compare model settings by cross-validation, side by side; --adopt saves the best")
    sp.add_argument("--folds", type=int, default=5, help="cross-validation folds (default 5)")
    sp.add_argument("--top", type=int, default=15, help="rows to show (default 15)")
    sp.add_argument("--adopt", action="store_true", help="save the best settings in triage.toml")
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
