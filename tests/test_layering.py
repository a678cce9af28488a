"""The layers stay apart: the core is pure, and nothing below the front ends loads a front end."""

from __future__ import annotations

import ast
import json
import pkgutil
import subprocess
import sys
import textwrap
from pathlib import Path

import triage.core

CORE_DIR = Path(triage.core.__file__).parent
CORE_MODULES = sorted(f"triage.core.{m.name}" for m in pkgutil.iter_modules([str(CORE_DIR)]))
FRONT_ENDS = ("textual", "triage.tui", "triage.cli", "triage.service", "starlette", "uvicorn")


def loaded_after_import(modules: list[str]) -> set[str]:
    """The names in sys.modules of a fresh interpreter after importing `modules`."""
    code = textwrap.dedent(f"""
        import importlib, json, sys
        for name in {modules!r}:
            importlib.import_module(name)
        print(json.dumps(sorted(sys.modules)))
    """)
    p = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert p.returncode == 0, p.stderr
    return set(json.loads(p.stdout))


def front_ends_in(names: set[str]) -> list[str]:
    return sorted(n for n in names if any(n == f or n.startswith(f + ".") for f in FRONT_ENDS))


def test_the_core_modules_are_found() -> None:
    assert {"triage.core.model", "triage.core.encode", "triage.core.metrics", "triage.core.routing"} <= set(
        CORE_MODULES)


def test_lower_layers_load_no_front_end() -> None:
    names = loaded_after_import([*CORE_MODULES, "triage.store", "triage.ingest", "triage.app"])
    assert "triage.app.workspace" in names and "triage.store.db" in names
    assert front_ends_in(names) == []


def test_the_core_loads_no_sqlite_and_no_store() -> None:
    names = loaded_after_import(CORE_MODULES)
    assert "triage.core.model" in names
    assert "sqlite3" not in names and "_sqlite3" not in names
    assert not [n for n in names if n.startswith(("triage.store", "triage.app", "triage.workspace", "triage.ingest"))]
    assert front_ends_in(names) == []


def test_the_core_source_imports_no_sqlite_and_nothing_above_it() -> None:
    bad = []
    for path in sorted(CORE_DIR.glob("*.py")):
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.Import):
                names = [a.name for a in node.names]
            elif isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
                names = [node.module]
            else:
                continue
            for n in names:
                if n.split(".")[0] == "sqlite3" or (n.startswith("triage.") and not n.startswith("triage.core")):
                    bad.append(f"{path.name}: {n}")
    assert bad == []


def test_the_check_sees_a_front_end_when_one_is_loaded() -> None:
    """The detector itself: importing the command line does show up as a front end."""
    assert "triage.cli" in front_ends_in(loaded_after_import(["triage.cli"]))
