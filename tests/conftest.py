"""Fixtures shared across test modules: built once per session, copied by the tests that change them."""

from __future__ import annotations

from pathlib import Path

import pytest

from tests.helpers import build_demo_workspace
from tests.service_support import base_dir, items, trained_ids  # noqa: F401  (the service's live-server fixtures)


@pytest.fixture(scope="session")
def demo_1200(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """The first 1,200 demo tickets imported and trained (pinned settings). Read it, or copy it to change it."""
    return build_demo_workspace(tmp_path_factory.mktemp("demo-1200") / "ws", rows=1200)
