"""``HashState``: the accumulators of one hash function, made from the check registry, fed and merged alike by
every engine.

Each check group says which accumulators it needs, by kind (``tables``, ``bits``, ``first_values`` …), and what
they are fed:

- ``loads``: every occurrence's hash value with its weight (``add_load(values, weights)``), in the first read;
- ``values``: the hash values of the keys the checks count (distinct keys, or every occurrence with
  ``all_keys``): ``update(values)``;
- ``positions``: the low 64 bits of those values with their positions in the stream: ``update(low, positions)``.

Two groups asking for one kind share it. Merging is by kind: a kind only one side has is taken over (a Dask
partition that read no keys of some kind), a kind both have is merged accumulator by accumulator.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np

FEEDS = ("loads", "values", "positions")


@dataclass
class HashState:
    """The accumulators of one hash function, by kind.

    Attributes
    ----------
    spec : HashSpec or Placement
    parts : dict of str to list
        Accumulators by kind.
    feeds : dict of str to tuple of str
        What each kind is fed (see the module notes).
    groups : list of CheckGroup
        The running groups that audit this subject, in registry order.
    """

    spec: Any
    parts: dict[str, list[Any]] = field(default_factory=dict)
    feeds: dict[str, tuple[str, ...]] = field(default_factory=dict)
    groups: list[Any] = field(default_factory=list)

    @classmethod
    def build(cls, spec: Any, plan: Any, tables: list[tuple[str, int]], lanes: int = 1) -> HashState:
        """The accumulators every running group of ``plan`` that audits this kind of subject needs for ``spec``
        (a hash function, or a placement rule: ``spec.path == "placement"``)."""
        kind = "placements" if spec.path == "placement" else "hashes"
        state = cls(spec, groups=[g for g in plan.groups() if g.subjects == kind])
        for group in state.groups:
            if group.accumulators is None:
                continue
            for kind, (feeds, accumulators) in group.accumulators(spec, plan, tables, lanes).items():
                if kind not in state.parts:
                    state.parts[kind], state.feeds[kind] = list(accumulators), tuple(feeds)
        return state

    def get(self, kind: str) -> list[Any]:
        """The accumulators of one kind (empty when no running group asked for it)."""
        return self.parts.get(kind, [])

    def fed(self, feed: str) -> list[Any]:
        """Every accumulator fed ``feed``."""
        return [a for kind, feeds in self.feeds.items() if feed in feeds for a in self.parts[kind]]

    def wants(self, feed: str) -> bool:
        """True when some accumulator is fed ``feed``."""
        return any(feed in feeds and self.parts[kind] for kind, feeds in self.feeds.items())

    def add_loads(self, values: np.ndarray, weights: np.ndarray | None) -> None:
        """Feed every occurrence's value and weight."""
        for accumulator in self.fed("loads"):
            accumulator.add_load(values, weights)

    def add_values(self, values: np.ndarray, positions: np.ndarray | None = None) -> None:
        """Feed the values of the counted keys (and, where asked, their stream positions)."""
        for accumulator in self.fed("values"):
            accumulator.update(values)
        wanting = self.fed("positions")
        if wanting:
            low = values[:, 0] if values.ndim == 2 else values  # tables place 128-bit values by the low word
            for accumulator in wanting:
                accumulator.update(low, positions)

    def keep_only(self, feed: str) -> None:
        """Drop every kind that is not fed ``feed`` (a Dask read stage keeps the loads only)."""
        for kind in [k for k, feeds in self.feeds.items() if feed not in feeds]:
            del self.parts[kind], self.feeds[kind]

    def merge(self, other: HashState) -> None:
        """Add ``other``'s counts to these (see the module notes)."""
        for kind, accumulators in other.parts.items():
            mine = self.parts.get(kind)
            if not mine:
                self.parts[kind], self.feeds[kind] = accumulators, other.feeds[kind]
            elif accumulators:
                for accumulator, twin in zip(mine, accumulators, strict=True):
                    accumulator.merge(twin)

    def close(self) -> None:
        """Release what accumulators hold outside memory (spill files)."""
        for accumulators in self.parts.values():
            for accumulator in accumulators:
                if hasattr(accumulator, "close"):
                    accumulator.close()
