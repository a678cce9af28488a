"""How much the store grows per correction: a model version's own row against the whole config it reads back.

Run:  python bench/store_growth.py [--corrections 200] [--rows 1500]

Builds the demo workspace (Voltwren tickets) in a temporary folder, trains it, makes `--corrections`
corrections, and prints, measured in the same run:
  bytes of triage.db (and -wal) grown per correction
  the mean stored config of a correction version (config_json) and the config it reads back (the calibration,
  routing policy, split and settings it shares with its parent), and their ratio: what copying would cost.
"""

from __future__ import annotations

import argparse
import json
import sys
import tempfile
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(REPO))

from tests.helpers import build_demo_workspace  # noqa: E402
from triage.app import Workspace  # noqa: E402


def _size(root: Path) -> int:
    return sum(p.stat().st_size for p in root.glob("triage.db*"))


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--corrections", type=int, default=200)
    ap.add_argument("--rows", type=int, default=1500)
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        root = build_demo_workspace(Path(tmp) / "ws", rows=args.rows)
        with Workspace.open(root) as ws:
            ws.store._conn.execute("PRAGMA wal_checkpoint(TRUNCATE)")
            before = _size(root)
            items = ws.store.labelled_items()
            queues = list(ws.model.queues)
            for i in range(args.corrections):
                rec = items[i % len(items)]
                others = [q for q in queues if q != ws.store.get_item(rec.item_id).label]  # its own is refused
                ws.correct(rec.item_id, others[i % len(others)], "bench")
            ws.store._conn.execute("PRAGMA wal_checkpoint(TRUNCATE)")
            after = _size(root)
            rows = ws.store._all("SELECT version, length(config_json) FROM model_versions WHERE kind = 'correction'")
            whole = [len(json.dumps(ws.store.get_model_version(v).config, sort_keys=True, separators=(",", ":")))
                     for v, _ in rows]
    stored = sum(n for _, n in rows) / len(rows)
    read_back = sum(whole) / len(whole)
    print(f"corrections: {args.corrections}")
    print(f"store growth per correction: {(after - before) / args.corrections:,.0f} bytes")
    print(f"config stored per correction version: {stored:,.0f} bytes; read back: {read_back:,.0f} bytes; "
          f"copying would store {read_back / stored:.1f}x as much")


if __name__ == "__main__":
    main()
