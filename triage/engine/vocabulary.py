"""The vocabulary, category levels and number bins of a training set, counted by partition and merged.

What the encoder's fit reads from the items is mergeable: how often each token occurs (pruning by `min_count`
and `max_vocab` looks only at these totals), which values each category field takes (a union), and the values
of each number field (the bins are quantiles of all of them, so the values themselves travel: 8 bytes per item
and number field). Merged in any order, the statistics give the very encoder `Encoder.fit` gives on all items
at once; tests/test_engine.py checks that manifest for manifest.
"""

from __future__ import annotations

from collections import Counter
from dataclasses import dataclass, field

import numpy as np

# the encoder's own bin edges: one definition of the quantile rule
from triage.core.encode import Encoder, _quantile_edges
from triage.core.schema import FieldRole


@dataclass
class VocabularyCounts:
    """Token occurrences, category values and number values of some items."""

    occurrences: Counter[str] = field(default_factory=Counter)
    levels: dict[str, set[str]] = field(default_factory=dict)
    numbers: dict[str, list[np.ndarray]] = field(default_factory=dict)

    def merge(self, other: VocabularyCounts) -> VocabularyCounts:
        self.occurrences.update(other.occurrences)
        for name, levels in other.levels.items():
            self.levels.setdefault(name, set()).update(levels)
        for name, chunks in other.numbers.items():
            self.numbers.setdefault(name, []).extend(chunks)
        return self

    def encoder(self, template: Encoder) -> Encoder:
        """The fitted encoder: the same pruning, term order, levels and bins as `Encoder.fit` on all items."""
        kept = [(t, c) for t, c in self.occurrences.items() if c >= template.min_count]
        if template.max_vocab is not None and len(kept) > template.max_vocab:
            kept.sort(key=lambda tc: (-tc[1], tc[0]))
            kept = kept[: template.max_vocab]
        manifest = template.to_manifest()  # the template's settings, whatever the manifest holds
        manifest["pruned"] = len(kept) < len(self.occurrences)
        manifest["terms"] = sorted(t for t, _ in kept)
        manifest["levels"] = {}
        manifest["edges"] = {}
        for f in template.schema.value_fields:
            if f.role is FieldRole.CATEGORY:
                manifest["levels"][f.name] = sorted(self.levels.get(f.name, set()))
            else:
                chunks = self.numbers.get(f.name, [])
                xs = np.concatenate(chunks) if chunks else np.empty(0, dtype=np.float64)
                manifest["edges"][f.name] = _quantile_edges(xs, f.bins).tolist()
        return Encoder.from_manifest(template.schema, manifest)
