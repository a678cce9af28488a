"""The installed package holds every module: a wheel built from pyproject.toml must not drop a subpackage.

An editable install finds every directory under triage/ by path, so a package left out of the explicit list in
pyproject.toml goes unnoticed in development and breaks only a regular `pip install .` (a wheel)."""

from __future__ import annotations

import tomllib
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent


def test_every_package_directory_is_listed_in_pyproject() -> None:
    config = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))
    listed = set(config["tool"]["setuptools"]["packages"])
    on_disk = {".".join(p.parent.relative_to(ROOT).parts) for p in (ROOT / "triage").rglob("__init__.py")}
    assert on_disk, "no package found under triage/"
    missing = sorted(on_disk - listed)
    assert not missing, f"packages under triage/ missing from pyproject.toml: {missing}"
