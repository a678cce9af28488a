"""Messages the views send up to the app ("attributes down, messages up"). Each is a small dataclass."""

from __future__ import annotations

from dataclasses import dataclass

from textual.message import Message


@dataclass
class ModelChanged(Message):
    """The active model version changed (a training run finished, or a version was activated)."""

    version: int | None
    why: str


@dataclass
class LabelsChanged(Message):
    """A correction or an undo was learned; `version` is the new active model version."""

    item_id: str
    queue: str | None
    version: int
    undo: bool = False


@dataclass
class ReviewCount(Message):
    """The work order was built: `to_review` held items wait for a person, `safety` of them safety-related."""

    to_review: int
    safety: int
