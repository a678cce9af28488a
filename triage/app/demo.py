"""The demo: a workspace built from one of the invented scenarios, trained, measured and routing new items.

The scenario files ship inside the package (`triage.demo_corpus`, the repository's demo_corpus/ folder) with
their example configs (`triage.example_configs`, the repository's configs/ folder).
"""

from __future__ import annotations

import shutil
from importlib import resources
from pathlib import Path
from typing import Any

import pandas as pd

from triage.app.errors import BadInput, Conflict
from triage.app.measuring import Progress
from triage.app.workspace import CONFIG_NAME, Workspace

SCENARIO_FILES = {
    "voltwren": ("voltwren.toml", "voltwren_tickets.csv", "voltwren_incoming.csv", "voltwren_incoming_truth.csv"),
    "haulmere": ("haulmere.toml", "haulmere_leads.jsonl", "haulmere_incoming.jsonl", "haulmere_incoming_truth.jsonl"),
}


def _data(name: str) -> Path:
    return Path(str(resources.files("triage.demo_corpus").joinpath(name)))


def _config(name: str) -> Path:
    return Path(str(resources.files("triage.example_configs").joinpath(name)))


def _truth(path: Path) -> pd.DataFrame:
    return pd.read_csv(path, dtype=str) if path.suffix == ".csv" else pd.read_json(path, lines=True, dtype=str)


def build_demo(root: Path, scenario: str = "voltwren", *, progress: Progress | None = None,
               force: bool = False) -> dict[str, Any]:
    """Create the workspace, import the history, train, route the incoming items; returns what happened."""
    if scenario not in SCENARIO_FILES:
        raise BadInput(f"unknown scenario {scenario!r}; choose one of {', '.join(SCENARIO_FILES)}")
    say = progress or (lambda _s, _f: None)
    cfg_name, history, incoming, truth = SCENARIO_FILES[scenario]
    root = Path(root)
    if root.exists() and any(root.iterdir()):
        if not force:
            raise Conflict(f"{root} exists and is not empty; pass --force to rebuild it, or name another folder")
        if not (root / CONFIG_NAME).exists():
            raise Conflict(f"{root} is not a triage workspace; refusing to delete it")
        shutil.rmtree(root)
    root.mkdir(parents=True, exist_ok=True)
    shutil.copyfile(_config(cfg_name), root / CONFIG_NAME)
    # the source files are copied in so the rejects file (if any) lands beside them, inside the workspace
    data_dir = root / "data"
    data_dir.mkdir()
    for name in (history, incoming, truth):
        shutil.copyfile(_data(name), data_dir / name)
    with Workspace.open(root) as ws:
        say("importing the history", 0.02)
        rep = ws.import_file(data_dir / history)
        report = ws.train(progress=lambda s, f: say(s, 0.05 + 0.85 * f))
        say("routing the incoming items", 0.92)
        decisions, _, batch_id = ws.route_file(data_dir / incoming)
        batch = ws.store.latest_batch()
    result: dict[str, Any] = {
        "workspace": str(root), "scenario": scenario, "imported": rep.added, "version": report.version.version,
        "scorecard": report.measurement.scorecard.to_dict(), "decisions": decisions, "batch_id": batch_id,
        "batch": batch.summary if batch else {},
    }
    t = _truth(data_dir / truth)
    true = dict(zip(t.iloc[:, 0], t["queue"], strict=True))
    scored = [d for d in decisions if d["id"] in true]
    if scored:
        result["accuracy_on_incoming"] = sum(d["suggested"] == true[d["id"]] for d in scored) / len(scored)
        routed = [d for d in scored if not d["held"]]
        result["auto_precision_on_incoming"] = (sum(d["queue"] == true[d["id"]] for d in routed) / len(routed)
                                                if routed else 0.0)
    say("done", 1.0)
    return result
