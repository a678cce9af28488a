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


@dataclass(frozen=True)
class FieldSpec:
    """One predictor field. `weight` scales a text field's token counts; `bins` is for number fields;
    `thousands` is a number field's thousands separator ("1,200"), read only when the file is imported."""

    name: str
    role: FieldRole
    weight: float = 1.0
    bins: int = 5
    thousands: str | None = None


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
