"""Agreement of two placement rules key by key: the share of distinct keys they put on different units.

Two producers writing one topic keep per-key order only while they send every key to the same partition. A JVM
producer (murmur2) and a C-client producer on its default partitioner (CRC-32) do not: on keys that behave like
random ones they disagree on ``1 - Σ s_a(u) s_b(u)`` of the keys (``1 - 1/N`` for ``N`` even partitions), where
``s_a``, ``s_b`` are the units' shares under either rule.

The engine hands every placement's accumulators the same distinct keys at the same stream positions, but never
the keys themselves; so each placement records ``(stream position, unit)`` of its keys, and the conclusion joins
the two records on the position. The records are kept exactly up to ``capacity`` distinct keys; beyond that each
keeps a bottom-k sample: the ``capacity`` keys with the smallest 64-bit mix (splitmix64) of their position. The
choice depends on the positions only, so both rules keep the *same* keys, and the sample is a uniform sample of
the distinct keys (by position, whatever the keys' bytes).

References
----------
E. Cohen, H. Kaplan, "Summarizing data using bottom-k sketches", PODC 2007 (the sample and its merge).
G. L. Steele, D. Lea, C. H. Flood, "Fast splittable pseudorandom number generators", OOPSLA 2014 (splitmix64).
E. B. Wilson (1927), "Probable inference, the law of succession, and statistical inference", JASA 22 (the interval).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from hashaudit.errors import MergeError

AGREEMENT_KEYS = 1 << 20
"""Distinct keys whose units each placement records exactly (12 bytes each); a uniform sample beyond."""
_Z95 = 1.959963984540054  # the standard normal's 97.5 % quantile


def position_priorities(positions: np.ndarray) -> np.ndarray:
    """splitmix64's output function of every stream position: the order of the bottom-k sample.

    Parameters
    ----------
    positions : numpy.ndarray of int64
        Stream positions of keys.

    Returns
    -------
    numpy.ndarray of uint64
        A bijective 64-bit mix of each position.

    References
    ----------
    G. L. Steele, D. Lea, C. H. Flood, "Fast splittable pseudorandom number generators", OOPSLA 2014.
    """
    z = np.asarray(positions).astype(np.uint64) + np.uint64(0x9E3779B97F4A7C15)  # arrays wrap without warnings
    z = (z ^ (z >> np.uint64(30))) * np.uint64(0xBF58476D1CE4E5B9)
    z = (z ^ (z >> np.uint64(27))) * np.uint64(0x94D049BB133111EB)
    return z ^ (z >> np.uint64(31))


class UnitRecords:
    """Accumulator of one placement's ``(stream position, unit)`` per distinct key, for the agreement check.

    Parameters
    ----------
    name : str
        The placement's name (``kafka:partitions=12``).
    width : int
        Bits of its hash values.
    layout : ModLayout
        Its layout (values to units).
    capacity : int, default AGREEMENT_KEYS
        Keys recorded exactly; a bottom-k sample of this many beyond (see the module notes).
    """

    def __init__(self, name: str, width: int, layout: Any, capacity: int = AGREEMENT_KEYS) -> None:
        self.name = name
        self.width = int(width)
        self.layout = layout
        self.capacity = int(capacity)
        self.positions_ = np.zeros(0, dtype=np.int64)
        self.units_ = np.zeros(0, dtype=np.int32)
        self.keys_seen_ = 0
        self._bound = np.uint64(np.iinfo(np.uint64).max)  # priorities above it can no longer enter the sample

    def _settings(self) -> tuple:
        return (self.width, self.layout, self.capacity)

    def update(self, values: np.ndarray, positions: np.ndarray) -> UnitRecords:
        """Add the hash values of distinct keys with their stream positions."""
        positions = np.asarray(positions, dtype=np.int64)
        self.keys_seen_ += len(positions)
        units = self.layout.assign(values, self.width).astype(np.int32)
        if self.keys_seen_ > self.capacity:
            keep = position_priorities(positions) <= self._bound
            positions, units = positions[keep], units[keep]
        self.positions_ = np.concatenate([self.positions_, positions])
        self.units_ = np.concatenate([self.units_, units])
        if len(self.positions_) > 2 * self.capacity:  # amortised: compact only when twice over
            self._compact()
        return self

    def _compact(self) -> None:
        """Keep the ``capacity`` keys of smallest (priority, position); records sorted by position."""
        if len(self.positions_) > self.capacity:
            priorities = position_priorities(self.positions_)
            order = np.lexsort((self.positions_, priorities))[: self.capacity]
            self._bound = priorities[order[-1]]
            self.positions_, self.units_ = self.positions_[order], self.units_[order]
        order = np.argsort(self.positions_, kind="stable")
        self.positions_, self.units_ = self.positions_[order], self.units_[order]

    def merge(self, other: UnitRecords) -> UnitRecords:
        """Add another part of the stream (exact: the records of the union, or its bottom-k sample)."""
        if other._settings() != self._settings():
            raise MergeError(f"cannot merge the unit records of {other.name} into those of {self.name}")
        self.keys_seen_ += other.keys_seen_
        self.positions_ = np.concatenate([self.positions_, other.positions_])
        self.units_ = np.concatenate([self.units_, other.units_])
        self._bound = min(self._bound, other._bound)
        self._compact()
        return self

    def result(self) -> tuple[np.ndarray, np.ndarray]:
        """Positions (ascending) and units of the recorded keys."""
        self._compact()
        return self.positions_, self.units_

    @property
    def sampled(self) -> bool:
        """True when more distinct keys came than the records hold exactly."""
        return self.keys_seen_ > self.capacity

    def copy(self) -> UnitRecords:
        twin = UnitRecords(self.name, self.width, self.layout, self.capacity)
        twin.positions_, twin.units_ = self.positions_.copy(), self.units_.copy()
        twin.keys_seen_, twin._bound = self.keys_seen_, self._bound
        return twin

    def __eq__(self, other: object) -> bool:
        if not isinstance(other, UnitRecords) or other._settings() != self._settings():
            return False
        mine, theirs = self.result(), other.result()
        return (
            self.keys_seen_ == other.keys_seen_
            and np.array_equal(mine[0], theirs[0])
            and np.array_equal(mine[1], theirs[1])
        )

    __hash__ = None  # type: ignore[assignment]


@dataclass(frozen=True)
class Agreement:
    """How two placements place the same distinct keys.

    Attributes
    ----------
    keys : int
        Distinct keys both placements saw.
    compared : int
        Keys compared (all of them, or the bottom-k sample).
    differing : int
        Compared keys the two place on different units.
    share : float
        ``differing / compared``.
    interval : tuple of float
        The 95 % Wilson interval of the share over all keys when sampled; ``(share, share)`` when exact.
    independent_share : float
        ``1 - Σ s_a(u) s_b(u)``: the share two unrelated ideal hashes would disagree on under these rules.
    """

    keys: int
    compared: int
    differing: int
    share: float
    interval: tuple[float, float]
    independent_share: float

    @property
    def exact(self) -> bool:
        return self.compared == self.keys


def agreement(first: UnitRecords, second: UnitRecords) -> Agreement:
    """The share of distinct keys two placements put on different units, from their records.

    Parameters
    ----------
    first, second : UnitRecords
        The two placements' records of one audit (the same keys at the same stream positions).

    Returns
    -------
    Agreement

    References
    ----------
    E. B. Wilson (1927), JASA 22, 209-212 (the score interval of a binomial proportion).
    """
    pos_a, unit_a = first.result()
    pos_b, unit_b = second.result()
    if np.array_equal(pos_a, pos_b):
        same = unit_a == unit_b
    else:  # only if the two were fed different keys; compare those both recorded
        _, at_a, at_b = np.intersect1d(pos_a, pos_b, assume_unique=True, return_indices=True)
        same = unit_a[at_a] == unit_b[at_b]
    compared = len(same)
    differing = int(compared - np.count_nonzero(same))
    share = differing / compared if compared else 0.0
    keys = min(first.keys_seen_, second.keys_seen_)
    interval = (share, share) if compared >= keys else _wilson(differing, compared)
    shares_a = first.layout.shares(first.width)
    shares_b = second.layout.shares(second.width)
    units = min(len(shares_a), len(shares_b))
    independent = 1.0 - float(np.dot(shares_a[:units], shares_b[:units]))
    return Agreement(keys, compared, differing, share, interval, independent)


def _wilson(successes: int, trials: int) -> tuple[float, float]:
    """The 95 % Wilson score interval of a binomial proportion."""
    if trials == 0:
        return (0.0, 1.0)
    p, z2 = successes / trials, _Z95 * _Z95
    centre = (p + z2 / (2 * trials)) / (1 + z2 / trials)
    half = _Z95 * math.sqrt(p * (1 - p) / trials + z2 / (4 * trials * trials)) / (1 + z2 / trials)
    return (max(0.0, centre - half), min(1.0, centre + half))
