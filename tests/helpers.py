"""Shared test helpers: a small trained workspace built from the bundled demo tickets."""

from __future__ import annotations

import shutil
from pathlib import Path

import pandas as pd

from triage.app import Workspace

ROOT = Path(__file__).resolve().parents[1]


def pinned_voltwren_config() -> str:
    """The demo config with the text model pinned (multinomial, alpha 1), so training skips the setting search."""
    cfg = (ROOT / "configs" / "voltwren.toml").read_text(encoding="utf-8")
    return cfg.replace('text_model = "auto"', 'text_model = "multinomial"').replace('alpha_text = "auto"',
                                                                                   "alpha_text = 1.0")


def build_demo_workspace(root: Path, rows: int = 1200) -> Path:
    """Import the first `rows` demo tickets into a new workspace at `root` and train it."""
    root.mkdir(parents=True, exist_ok=True)
    (root / "triage.toml").write_text(pinned_voltwren_config(), encoding="utf-8")
    pd.read_csv(ROOT / "demo_corpus" / "voltwren_tickets.csv").head(rows).to_csv(root / "t.csv", index=False)
    with Workspace.open(root) as ws:
        ws.import_file(root / "t.csv")
        ws.train()
    return root


def copy_workspace(src: Path, tmp_path: Path) -> Path:
    dest = tmp_path / "ws"
    shutil.copytree(src, dest)
    return dest
