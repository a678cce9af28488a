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


# ----- the contract between the layers, checked on the source (AST) -------------------------------------------
# Rule set from the design notes (shared/DESIGN.md, "Layers and rooms"): front ends import only the application
# layer, the config and the item record; the application layer never imports a front end; the store never
# imports the application layer; the core imports nothing above itself.
PACKAGE = Path(triage.core.__file__).parents[1]
FRONT_END_PACKAGES = ("triage.cli", "triage.service", "triage.tui")
FRONT_END_MAY_IMPORT = ("triage.app", "triage.config", "triage.records", *FRONT_END_PACKAGES)
FRONT_END_LIBRARIES = {"rich", "textual", "starlette", "uvicorn", "anyio", "prometheus_client"}
UI_LIBRARIES = {"rich", "textual", "starlette", "uvicorn"}


def module_name(path: Path) -> str:
    rel = path.relative_to(PACKAGE.parent).with_suffix("")
    parts = list(rel.parts)
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


def sources(*names: str) -> list[Path]:
    """The .py files of the named modules or packages under triage/."""
    out: list[Path] = []
    for name in names:
        base = PACKAGE.parent.joinpath(*name.split("."))
        out += sorted(base.rglob("*.py")) if base.is_dir() else [base.with_suffix(".py")]
    return [p for p in out if p.exists()]


def imports(tree: ast.AST) -> list[tuple[str, list[str]]]:
    """(module, imported names) for every absolute import in a module's source."""
    out = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            out += [(a.name, []) for a in node.names]
        elif isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
            out.append((node.module, [a.name for a in node.names]))
    return out


def within(name: str, prefixes: tuple[str, ...] | set[str]) -> bool:
    return any(name == p or name.startswith(p + ".") for p in prefixes)


def front_end_violations(source: str, where: str) -> list[str]:
    """What a front end's source does against the contract: imports outside the allowed layers and libraries,
    numpy, a private name of the application layer (imported, or read off the workspace or an app module), the
    workspace's store (`ws.store`, `self.ws.store`, `state.workspace.store`: the workspace's methods say what a
    front end may ask of it)."""
    tree = ast.parse(source)
    bad: list[str] = []
    app_names: set[str] = {"ws", "workspace"}
    for module, names in imports(tree):
        top = module.split(".")[0]
        if top == "triage":
            if module == "triage" and names == ["__version__"]:
                continue
            if not within(module, FRONT_END_MAY_IMPORT):
                bad.append(f"{where}: imports {module}")
            elif within(module, ("triage.app",)):
                bad += [f"{where}: imports the private {module}.{n}" for n in names if n.startswith("_")]
                app_names.update(names)
        elif top not in sys.stdlib_module_names and top not in FRONT_END_LIBRARIES:
            bad.append(f"{where}: imports {module}")
    for node in ast.walk(tree):
        if isinstance(node, ast.Attribute) and node.attr.startswith("_") and not node.attr.startswith("__"):
            owner = node.value
            name = owner.attr if isinstance(owner, ast.Attribute) else owner.id if isinstance(owner, ast.Name) else ""
            if name in app_names:
                bad.append(f"{where}:{node.lineno}: reads the private {name}.{node.attr}")
        elif isinstance(node, ast.Attribute) and node.attr == "store":
            owner = node.value
            name = owner.attr if isinstance(owner, ast.Attribute) else owner.id if isinstance(owner, ast.Name) else ""
            if name in app_names:
                bad.append(f"{where}:{node.lineno}: reaches the store through {name}.store")
    return bad


def layer_violations(paths: list[Path], forbidden: tuple[str, ...] | set[str]) -> list[str]:
    bad = []
    for path in paths:
        for module, _names in imports(ast.parse(path.read_text(encoding="utf-8"))):
            if within(module, forbidden):
                bad.append(f"{module_name(path)}: imports {module}")
    return bad


def test_front_ends_import_only_the_application_layer() -> None:
    paths = sources(*FRONT_END_PACKAGES)
    assert {"triage.cli", "triage.tui.app"} <= {module_name(p) for p in paths}
    bad = [v for p in paths for v in front_end_violations(p.read_text(encoding="utf-8"), module_name(p))]
    assert bad == []


def test_the_application_layer_imports_no_front_end() -> None:
    paths = sources("triage.app")
    assert "triage.app.workspace" in {module_name(p) for p in paths}
    assert layer_violations(paths, {*FRONT_END_PACKAGES, *UI_LIBRARIES}) == []


def test_the_store_imports_no_application_layer_and_no_front_end() -> None:
    paths = sources("triage.store")
    assert "triage.store.db" in {module_name(p) for p in paths}
    assert layer_violations(paths, {"triage.app", "triage.workspace", *FRONT_END_PACKAGES, *UI_LIBRARIES}) == []


def test_the_core_imports_no_store_no_application_layer_and_no_front_end() -> None:
    forbidden = {"triage.store", "triage.app", "triage.workspace", "triage.ingest", "triage.config",
                 *FRONT_END_PACKAGES, *UI_LIBRARIES, "sqlite3"}
    assert layer_violations(sources("triage.core"), forbidden) == []


def test_the_contract_checks_can_fail() -> None:
    """The detectors themselves: each rule is broken once in a made-up source and must be seen."""
    broken = textwrap.dedent("""
        import numpy as np
        from triage.store import Store
        from triage.app.active import _AlreadyApplied
        from triage.app import Workspace
        def f(ws: Workspace) -> None:
            ws._active.model
            ws.store.queue_counts()
        class View:
            def g(self) -> None:
                self.ws.store.get_item("a")
                self.app.state.workspace.store.path
    """)
    found = front_end_violations(broken, "made-up")
    assert any("imports numpy" in v for v in found)
    assert any("imports triage.store" in v for v in found)
    assert any("private triage.app.active._AlreadyApplied" in v for v in found)
    assert any("private ws._active" in v for v in found)
    assert sorted(int(v.split(":")[1]) for v in found if "reaches the store" in v) == [8, 11, 12]
    fine = ("from triage.app import Workspace\nimport rich\nfrom triage import __version__\n"
            "def f(ws: Workspace, shop: object) -> None:\n    ws.item('a'); shop.store\n")
    assert front_end_violations(fine, "made-up") == []
    # a layer check sees a forbidden import in a real file: the CLI imports the application layer
    assert layer_violations(sources("triage.cli"), {"triage.app"}) != []
