"""Field roles and the schema of an item: which columns are text, category or number."""

from __future__ import annotations

from dataclasses import dataclass
from enum import StrEnum


class FieldRole(StrEnum):
    """What a column is for. id, label and time are named in the schema itself, not as fields."""

    TEXT = "text"
    CATEGORY = "category"
    NUMBER = "number"
    ID = "id"
    LABEL = "label"


# What a text field is cut into: its words (and bigrams when on), the character 3-5-grams inside each word
# (for short, code-like text: package names, product codes, e-mail domains), or both. Every piece is a count.
PIECES = ("words", "grams", "words+grams")


@dataclass(frozen=True)
class FieldSpec:
    """One predictor field. `weight` scales a text field's token counts; `bins` is for number fields;
    `pieces` (text fields) is one of PIECES; `thousands` is a number field's thousands separator ("1,200"), read
    only when the file is imported."""

    name: str
    role: FieldRole
    weight: float = 1.0
    bins: int = 5
    thousands: str | None = None
    pieces: str = "words"

    def __post_init__(self) -> None:
        if self.pieces not in PIECES:
            raise ValueError(f"field {self.name!r}: pieces {self.pieces!r} is not one of {', '.join(PIECES)}")


@dataclass(frozen=True)
class Schema:
    """The columns of an item and their roles."""

    fields: tuple[FieldSpec, ...]
    id: str
    label: str
    time: str | None = None

    @property
    def text_fields(self) -> tuple[FieldSpec, ...]:
        return tuple(f for f in self.fields if f.role is FieldRole.TEXT)

    @property
    def value_fields(self) -> tuple[FieldSpec, ...]:
        """Category and number fields: each becomes one categorical table."""
        return tuple(f for f in self.fields if f.role in (FieldRole.CATEGORY, FieldRole.NUMBER))

    def field(self, name: str) -> FieldSpec:
        for f in self.fields:
            if f.name == name:
                return f
        raise KeyError(name)
