"""Placement rules of deployed systems, declared once each: the bytes a system hashes, the hash, and how the value
picks a unit (a partition, a slot's node), with how the system grows.

A rule turns into a *subject* of the audit: something shaped like a registered hash function (``name``,
``width``, ``hash_batch``) whose values are the system's own hash of each key, with a ``layout`` that maps those
values to the system's units exactly as the system does. The ``placement`` check group
(``hashaudit.checks.placement``) then counts distinct keys and load per unit, against an ideal hash placed by the
*same* rule, and the keys that move when the system grows.

Each rule names the outside reference its tests check it against bit for bit (``tests/placements``).
"""

from __future__ import annotations

import math
import re
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from hashaudit.settings import SettingError


@dataclass(frozen=True)
class Param:
    """One parameter of a placement rule (``partitions=12``)."""

    name: str
    help: str
    minimum: int = 1
    maximum: int = (1 << 31) - 1


@dataclass(frozen=True)
class PlacementRule:
    """A system's placement rule.

    Parameters
    ----------
    name : str
        The rule's name in ``--placement NAME:param=value``.
    models : str
        What it reproduces, in a line.
    reference : str
        The outside reference the tests check it against.
    params : tuple of Param
        Its parameters, all required.
    unit : str
        What the units are called (``partition``, ``node``).
    width : int
        Bits of the system's hash value.
    hash_batch : callable
        ``KeyBatch -> uint64 values``: the system's hash of every key (after its key transform).
    layout : callable
        ``params -> layout``: the mapping of hash values to units (see :class:`ModLayout` for the interface).
    """

    name: str
    models: str
    reference: str
    params: tuple[Param, ...]
    unit: str
    width: int
    hash_batch: Callable[[Any], np.ndarray]
    layout: Callable[[dict[str, int]], Any]


class ModLayout:
    """``value % units`` on a non-negative value: what the shard checks call the ``mod`` scheme."""

    scheme = "mod"
    weights: tuple[float, ...] = ()
    vnodes = 0

    def __init__(self, shards: int) -> None:
        self.shards = int(shards)

    def __eq__(self, other: object) -> bool:
        return type(other) is type(self) and other.__dict__ == self.__dict__

    def __hash__(self) -> int:
        return hash((type(self).__name__, tuple(sorted(self.__dict__.items()))))

    def resized(self, shards: int) -> ModLayout:
        """The same rule with ``shards`` units."""
        return type(self)(shards)

    def assign(self, values: np.ndarray, width: int) -> np.ndarray:
        """The unit of every value (int64)."""
        return (np.asarray(values, dtype=np.uint64) % np.uint64(self.shards)).astype(np.int64)

    def shares(self, width: int = 64) -> np.ndarray:
        """Each unit's share of uniformly random ``width``-bit values, exactly (residues of ``2^width`` values)."""
        whole, extra = divmod(1 << width, self.shards)
        counts = np.full(self.shards, float(whole))
        counts[:extra] += 1
        return counts / float(1 << width)

    def ideal_moved(self, shards: int, width: int = 64) -> float | None:
        """Share of uniformly random values that change unit when the rule has ``shards`` units (None: the shard
        checks' own formula for ``mod``)."""
        return None

    @property
    def label(self) -> str:
        return f"{self.shards} units"


class JavaAbsModLayout(ModLayout):
    """``Math.abs(h % n)`` with Java's ``%`` (the sign of the dividend) on the signed 32-bit value ``h``."""

    scheme = "abs-mod"

    def assign(self, values: np.ndarray, width: int) -> np.ndarray:
        signed = np.asarray(values, dtype=np.uint64).astype(np.uint32).view(np.int32).astype(np.int64)
        return np.abs(np.fmod(signed, self.shards))

    def shares(self, width: int = 32) -> np.ndarray:
        """Exact shares over all 2^32 signed values: ``h % n`` and ``-(h % n)`` fold onto one unit."""
        n, half = self.shards, 1 << 31
        k = np.arange(n, dtype=np.float64)
        positive = np.floor((half - 1 - k) / n) + 1  # h in [0, 2^31) with h % n == k
        negative = np.where(k > 0, np.floor((half - k) / n) + 1, 0.0)  # h in [-2^31, 0) with h % n == -k
        negative[0] = np.floor(half / n)  # negative multiples of n
        return (positive + negative) / float(1 << 32)

    def ideal_moved(self, shards: int, width: int = 32) -> float | None:
        """Estimated on 2^20 seeded random values (no closed form for the folded remainders)."""
        values = np.random.default_rng([self.shards, shards, 0xAB5]).integers(0, 1 << 32, 1 << 20, dtype=np.uint64)
        return float(np.mean(self.assign(values, 32) != type(self)(shards).assign(values, 32)))


class SlotMapLayout(ModLayout):
    """Hash slots (``value % slots``) owned by nodes through a slot map: at first in equal contiguous ranges;
    a node added takes an equal share of slots from the top of every node's range, as a cluster rebalance does."""

    scheme = "slots"

    def __init__(self, shards: int, slots: int = 16384, owners: tuple[int, ...] | None = None) -> None:
        super().__init__(shards)
        self.slots = int(slots)
        if owners is None:
            starts = [math.ceil(k * slots / shards) for k in range(shards + 1)]
            owners = tuple(int(k) for k in np.repeat(np.arange(shards), np.diff(starts)))
        self.owners = owners

    def resized(self, shards: int) -> SlotMapLayout:
        owners = np.asarray(self.owners, dtype=np.int64)
        slots = np.arange(self.slots)
        for new in range(self.shards, shards):  # each node added takes 1/(new + 1) of every node's slots
            order = np.lexsort((slots, owners))  # slots grouped by owner, ascending
            counts = np.bincount(owners, minlength=new)
            give = counts // (new + 1)
            ends = np.cumsum(counts)
            first = np.repeat(ends - give, give)  # the top ``give`` slots of each owner's group
            within = np.arange(int(give.sum())) - np.repeat(np.cumsum(give) - give, give)
            owners[order[first + within]] = new
        return SlotMapLayout(shards, self.slots, tuple(owners.tolist()))

    def assign(self, values: np.ndarray, width: int) -> np.ndarray:
        slots = (np.asarray(values, dtype=np.uint64) % np.uint64(self.slots)).astype(np.int64)
        return np.asarray(self.owners, dtype=np.int64)[slots]

    def shares(self, width: int = 16) -> np.ndarray:
        """Each node's share of slots: a uniform hash fills every slot alike (``2^width`` divisible by the slots)."""
        return np.bincount(np.asarray(self.owners), minlength=self.shards) / self.slots

    def ideal_moved(self, shards: int, width: int = 16) -> float | None:
        """The share of slots that change owner."""
        return float(np.mean(np.asarray(self.owners) != np.asarray(self.resized(shards).owners)))

    @property
    def label(self) -> str:
        return f"{self.slots} slots on {self.shards} nodes"


def _kafka_values(batch: Any) -> np.ndarray:
    from hashaudit.placements.kafka import murmur2

    return (murmur2(batch).astype(np.int64) & 0x7FFFFFFF).astype(np.uint64)  # toPositive: the sign bit cleared


def _jvm_values(batch: Any) -> np.ndarray:
    from hashaudit.placements.jvm import string_hashcode

    return string_hashcode(batch).view(np.uint32).astype(np.uint64)


def _redis_values(batch: Any) -> np.ndarray:
    from hashaudit.placements.redis_cluster import crc16

    return crc16(batch).astype(np.uint64)


RULES: dict[str, PlacementRule] = {
    rule.name: rule
    for rule in (
        PlacementRule(
            "kafka",
            "the message broker's JVM producer: murmur2 of the key bytes, sign bit cleared, modulo the partitions",
            "kafka-python's murmur2 and DefaultPartitioner",
            (Param("partitions", "partitions of the topic"),),
            "partition",
            31,
            _kafka_values,
            lambda p: ModLayout(p["partitions"]),
        ),
        PlacementRule(
            "jvm-hashcode-mod",
            "abs(String.hashCode() % n) over the key's UTF-16 code units, a common JVM partition selector",
            "published String.hashCode values and the documented formula",
            (Param("n", "partitions, shards or workers chosen among"),),
            "partition",
            32,
            _jvm_values,
            lambda p: JavaAbsModLayout(p["n"]),
        ),
        PlacementRule(
            "redis-cluster",
            "CRC16 (XMODEM) of the key's hash tag {…} or whole key, modulo 16,384 slots, slots owned by nodes",
            "redis-py's key_slot",
            (Param("nodes", "nodes sharing the 16,384 slots in equal ranges", maximum=1000),),
            "node",
            16,
            _redis_values,
            lambda p: SlotMapLayout(p["nodes"]),
        ),
    )
}


@dataclass(frozen=True)
class Placement:
    """A rule with its parameters: one subject of an audit (shaped like a registered hash function)."""

    rule: str
    params: tuple[tuple[str, int], ...]
    seeded: bool = field(default=False, init=False)
    path: str = field(default="placement", init=False)
    integer_keys: bool = field(default=False, init=False)

    @property
    def name(self) -> str:
        """``kafka:partitions=12``: how it was asked for, and its name in the reports."""
        return self.rule + ":" + ",".join(f"{k}={v}" for k, v in self.params)

    @property
    def width(self) -> int:
        return RULES[self.rule].width

    @property
    def layout(self) -> Any:
        return RULES[self.rule].layout(dict(self.params))

    @property
    def unit(self) -> str:
        return RULES[self.rule].unit

    def hash_batch(self, batch: Any, seed: int = 0) -> np.ndarray:
        """The system's hash of every key (the seed is not the system's: ignored)."""
        return RULES[self.rule].hash_batch(batch)


def parse_placement(text: str) -> Placement:
    """``NAME:param=value,...`` into a :class:`Placement`; ``SettingError`` naming ``placements`` otherwise."""
    match = re.fullmatch(r"\s*([a-z0-9-]+)\s*(?::(.*))?", text)
    if match is None or match[1] not in RULES:
        raise SettingError("placements", f"takes NAME:param=value with NAME one of {', '.join(RULES)}, not {text!r}")
    rule = RULES[match[1]]
    given: dict[str, int] = {}
    for part in (match[2] or "").split(","):
        if not part.strip():
            continue
        key, _, value = part.partition("=")
        key = key.strip()
        known = {p.name: p for p in rule.params}
        if key not in known or not re.fullmatch(r"\s*\d+\s*", value):
            names = ", ".join(f"{p.name}=N" for p in rule.params)
            raise SettingError("placements", f"{rule.name} takes {names}, not {part.strip()!r}")
        number = int(value)
        if not known[key].minimum <= number <= known[key].maximum:
            raise SettingError(
                "placements", f"{rule.name}: {key} must be between {known[key].minimum} and {known[key].maximum:,}"
            )
        given[key] = number
    missing = [p.name for p in rule.params if p.name not in given]
    if missing:
        raise SettingError("placements", f"{rule.name} needs {', '.join(f'{m}=N' for m in missing)}")
    return Placement(rule.name, tuple((p.name, given[p.name]) for p in rule.params))
