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
    """One parameter of a placement rule (``partitions=12``): required unless it has a ``default``; a ``listed``
    parameter takes whole numbers joined by ``:`` (``weights=3:1:1``) and may be left out; a parameter with
    ``choices`` takes one of those words (``partitioner=murmur2_random``)."""

    name: str
    help: str
    minimum: int = 1
    maximum: int = (1 << 31) - 1
    default: int | str | None = None
    listed: bool = False
    choices: tuple[str, ...] = ()

    @property
    def form(self) -> str:
        """How the parameter is written: ``partitions=N``, ``weights=N:N:…``, ``partitioner=a|b``."""
        if self.choices:
            return f"{self.name}={'|'.join(self.choices)}"
        return f"{self.name}=N:N:…" if self.listed else f"{self.name}=N"


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
        Its parameters (required unless they have a default or are listed).
    unit : str
        What the units are called (``partition``, ``node``).
    width : int
        Bits of the system's hash value.
    hash_batch : callable
        ``KeyBatch -> uint64 values``: the system's hash of every key (after its key transform).
    layout : callable
        ``params -> layout``: the mapping of hash values to units (see :class:`ModLayout` for the interface).
    check : callable, optional
        ``params -> message or None``: what the parameters must satisfy together (None: they are fine).
    variant : callable, optional
        ``params -> (width, hash_batch)``: the hash and its width when a parameter chooses them
        (``partitioner=``); ``width`` and ``hash_batch`` are then those of the default choice.
    """

    name: str
    models: str
    reference: str
    params: tuple[Param, ...]
    unit: str
    width: int
    hash_batch: Callable[[Any], np.ndarray]
    layout: Callable[[dict[str, Any]], Any]
    check: Callable[[dict[str, Any]], str | None] | None = None
    variant: Callable[[dict[str, Any]], tuple[int, Callable[[Any], np.ndarray]]] | None = None


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


class RingLayout(ModLayout):
    """Points on a circle of ``2^bits`` positions, each owned by a unit: a value goes to the unit of the first
    point at or after its position, wrapping round past the largest (Karger et al. 1997). A subclass says where the
    points are (``_points``), how a hash value becomes a position (``_positions``) and how the system grows."""

    scheme = "ring"
    bits = 64

    def _identity(self) -> tuple:
        return (self.shards,)

    def __eq__(self, other: object) -> bool:
        return type(other) is type(self) and other._identity() == self._identity()  # type: ignore[attr-defined]

    def __hash__(self) -> int:
        return hash((type(self).__name__, self._identity()))

    def __getstate__(self) -> dict:
        return {k: v for k, v in self.__dict__.items() if k != "_ring"}  # the ring is rebuilt where needed

    def resized(self, shards: int) -> RingLayout:
        raise NotImplementedError

    def _points(self) -> tuple[np.ndarray, np.ndarray]:
        """Distinct positions (uint64, ascending, below ``2^bits``) and the unit owning each (int64)."""
        raise NotImplementedError

    def _positions(self, values: np.ndarray) -> np.ndarray:
        """Hash values as positions on the circle (uint64)."""
        return np.asarray(values, dtype=np.uint64)

    @property
    def ring(self) -> tuple[np.ndarray, np.ndarray]:
        """The points and their owners, built once."""
        if "_ring" not in self.__dict__:
            self.__dict__["_ring"] = self._points()
        return self.__dict__["_ring"]

    def _owner_at(self, positions: np.ndarray) -> np.ndarray:
        points, owners = self.ring
        at = np.searchsorted(points, positions, side="left")
        at[at == len(points)] = 0
        return owners[at]

    def assign(self, values: np.ndarray, width: int) -> np.ndarray:
        return self._owner_at(self._positions(values))

    def _arcs(self, cuts: np.ndarray) -> np.ndarray:
        """Length of the arc ending at each cut (from the cut before it; the first from the last, round the circle)."""
        wrap = 2.0**self.bits - float(cuts[-1] - cuts[0])
        return np.concatenate(([wrap], np.diff(cuts).astype(np.float64)))

    def shares(self, width: int = 64) -> np.ndarray:
        """Each unit's share of the circle: the arcs ending at its points, exactly up to float rounding."""
        points, owners = self.ring
        return np.bincount(owners, weights=self._arcs(points), minlength=self.shards) / 2.0**self.bits

    def ideal_moved(self, shards: int, width: int = 64) -> float | None:
        """Share of the circle whose owner differs with ``shards`` units: between consecutive points of either ring
        both owners are constant, so the arcs between the union of the points decide it exactly."""
        other = self.resized(shards)
        cuts = np.union1d(self.ring[0], other.ring[0])
        moved = self._owner_at(cuts) != other._owner_at(cuts)
        return float(self._arcs(cuts)[moved].sum() / 2.0**self.bits)


class CassandraRingLayout(RingLayout):
    """The token ring of ``Murmur3Partitioner``: ``num_tokens`` seeded random tokens per node, a token to the node
    of the first ring token at or after it; a node added draws its own tokens and every other token stays."""

    def __init__(self, shards: int, num_tokens: int = 16, seed: int = 0) -> None:
        super().__init__(shards)
        self.num_tokens = int(num_tokens)
        self.seed = int(seed)
        self.vnodes = self.num_tokens

    def _identity(self) -> tuple:
        return (self.shards, self.num_tokens, self.seed)

    def resized(self, shards: int) -> CassandraRingLayout:
        return CassandraRingLayout(shards, self.num_tokens, self.seed)

    def _points(self) -> tuple[np.ndarray, np.ndarray]:
        from hashaudit.placements.cassandra import random_tokens

        tokens, owners = random_tokens(self.shards, self.num_tokens, self.seed)
        return self._positions(tokens.view(np.uint64)), owners

    def _positions(self, values: np.ndarray) -> np.ndarray:
        # a signed token's order is that of its bits with the sign bit flipped
        return np.asarray(values, dtype=np.uint64) ^ np.uint64(1 << 63)

    @property
    def label(self) -> str:
        return f"{self.shards} nodes × {self.num_tokens} tokens"


class KetamaLayout(RingLayout):
    """The ketama ring of servers ``server1`` .. ``serverN``: 40 MD5 labels per server of average weight, four 32-bit
    points each; a server added is named after the last and weighs the mean weight, rounded (at least 1)."""

    bits = 32

    def __init__(self, shards: int, weights: tuple[int, ...] = ()) -> None:
        super().__init__(shards)
        self.server_weights = tuple(int(w) for w in weights)
        from hashaudit.placements.ketama import LABELS_PER_SERVER, POINTS_PER_LABEL, labels_per_server

        labels = labels_per_server(self.server_weights) if self.server_weights else [LABELS_PER_SERVER] * self.shards
        self.vnodes = max(1, round(POINTS_PER_LABEL * sum(labels) / self.shards))

    def _identity(self) -> tuple:
        return (self.shards, self.server_weights)

    def resized(self, shards: int) -> KetamaLayout:
        if not self.server_weights:
            return KetamaLayout(shards)
        added = max(1, round(sum(self.server_weights) / len(self.server_weights)))
        return KetamaLayout(shards, (self.server_weights + (added,) * shards)[:shards])

    def _points(self) -> tuple[np.ndarray, np.ndarray]:
        from hashaudit.placements.ketama import continuum, server_names

        points, owners = continuum(server_names(self.shards), self.server_weights or None)
        return points.astype(np.uint64), owners

    @property
    def label(self) -> str:
        weighted = " (weighted)" if self.server_weights else ""
        return f"{self.shards} servers, {self.vnodes} points each{weighted}"


def _kafka_values(batch: Any) -> np.ndarray:
    from hashaudit.placements.kafka import murmur2

    return (murmur2(batch).astype(np.int64) & 0x7FFFFFFF).astype(np.uint64)  # toPositive: the sign bit cleared


def _librdkafka_variant(params: dict[str, Any]) -> tuple[int, Callable[[Any], np.ndarray]]:
    from hashaudit.placements.librdkafka import partitioner_hash

    partitioner = str(params.get("partitioner", "consistent_random"))
    width = {"consistent_random": 32, "murmur2_random": 31, "fnv1a_random": 32}[partitioner]
    if partitioner == "fnv1a_random":  # the raw signed FNV-1a: JavaAbsModLayout folds it as abs() then % does

        def values(batch: Any) -> np.ndarray:
            from hashaudit.placements.librdkafka import fnv1a_signed

            return fnv1a_signed(batch).view(np.uint32).astype(np.uint64)

        return width, values
    return width, lambda batch: partitioner_hash(batch, partitioner)


def _librdkafka_values(batch: Any) -> np.ndarray:
    from hashaudit.placements.librdkafka import partitioner_hash

    return partitioner_hash(batch, "consistent_random")


def _librdkafka_layout(params: dict[str, Any]) -> ModLayout:
    # abs(h) % n == abs(h % n) for a truncating %: fnv1a_random places as Math.abs(h % n) does
    if params.get("partitioner") == "fnv1a_random":
        return JavaAbsModLayout(params["partitions"])
    return ModLayout(params["partitions"])


def _jvm_values(batch: Any) -> np.ndarray:
    from hashaudit.placements.jvm import string_hashcode

    return string_hashcode(batch).view(np.uint32).astype(np.uint64)


def _redis_values(batch: Any) -> np.ndarray:
    from hashaudit.placements.redis_cluster import crc16

    return crc16(batch).astype(np.uint64)


def _cassandra_values(batch: Any) -> np.ndarray:
    from hashaudit.placements.cassandra import partition_token

    return partition_token(batch).view(np.uint64)  # the signed token's bits


def _ketama_values(batch: Any) -> np.ndarray:
    from hashaudit.placements.ketama import key_hash

    return key_hash(batch).astype(np.uint64)


def _postgres_values(batch: Any) -> np.ndarray:
    from hashaudit.placements.postgres import partition_hash

    return partition_hash(batch)


def _hashmap_values(batch: Any) -> np.ndarray:
    from hashaudit.placements.jvm import hashmap_spread

    return hashmap_spread(batch).astype(np.uint64)


def _hashmap_layout(params: dict[str, Any]) -> Any:
    from hashaudit.placements.java_hashmap import HashMapLayout, table_size_after

    return HashMapLayout(table_size_after(params["entries"], params["capacity"]))


# the placement checks keep a few arrays of a count per bucket (they list them only up to 1,024 units)
HASHMAP_MOST_BUCKETS = 1 << 22


def _hashmap_check(params: dict[str, Any]) -> str | None:
    from hashaudit.placements.java_hashmap import table_size_after

    size = table_size_after(params["entries"], params["capacity"])
    if size > HASHMAP_MOST_BUCKETS:
        return (
            f"a map of {params['entries']:,} entries from capacity {params['capacity']:,} has a table of {size:,} "
            f"buckets; the placement checks take tables of up to {HASHMAP_MOST_BUCKETS:,} buckets (up to "
            f"{HASHMAP_MOST_BUCKETS * 3 // 4:,} entries)"
        )
    return None


def _python_dict_variant(params: dict[str, Any]) -> tuple[int, Callable[[Any], np.ndarray]]:
    from hashaudit.placements.python_dict import str_hash

    seed = int(params.get("seed", 0))
    return 64, lambda batch: str_hash(batch, seed).view(np.uint64)


def _python_dict_values(batch: Any) -> np.ndarray:
    from hashaudit.placements.python_dict import str_hash

    return str_hash(batch, 0).view(np.uint64)


def _python_dict_layout(params: dict[str, Any]) -> Any:
    from hashaudit.placements.python_dict import DictLayout, table_size_after

    return DictLayout(table_size_after(params["entries"]))


def _python_dict_check(params: dict[str, Any]) -> str | None:
    from hashaudit.placements.python_dict import table_size_after, usable_fraction

    size = table_size_after(params["entries"])
    if size > HASHMAP_MOST_BUCKETS:
        return (
            f"a dict of {params['entries']:,} entries has a table of {size:,} slots; the placement checks take "
            f"tables of up to {HASHMAP_MOST_BUCKETS:,} slots (up to {usable_fraction(HASHMAP_MOST_BUCKETS):,} entries)"
        )
    return None


def _ketama_check(params: dict[str, Any]) -> str | None:
    from hashaudit.placements.ketama import labels_per_server

    weights = params.get("weights")
    if weights is None:
        return None
    if len(weights) != params["servers"]:
        return f"weights lists {len(weights)} numbers for {params['servers']} servers"
    if min(labels_per_server(weights)) < 1:
        return "every weight must be at least the total over 40 times the servers (a server needs one point label)"
    return None


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
            "librdkafka",
            "the C client's partitioners: consistent_random (default) crc32(key) % partitions, murmur2_random "
            "(murmur2(key) & 0x7fffffff) % partitions, fnv1a_random abs(int32 fnv1a(key)) % partitions; an empty "
            "key, random under consistent_random in the client, goes to partition 0",
            "confluent-kafka's Producer on librdkafka's built-in mock cluster (the partition of each delivery)",
            (
                Param("partitions", "partitions of the topic"),
                Param(
                    "partitioner",
                    "the producer's partitioner: consistent_random (default), murmur2_random or fnv1a_random",
                    default="consistent_random",
                    choices=("consistent_random", "murmur2_random", "fnv1a_random"),
                ),
            ),
            "partition",
            32,
            _librdkafka_values,
            _librdkafka_layout,
            variant=_librdkafka_variant,
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
        PlacementRule(
            "cassandra",
            "Murmur3Partitioner: MurmurHash3 x64_128 h1 of the key bytes (signed tail bytes) as the token, "
            "num_tokens seeded random tokens per node",
            "cassandra-driver's Murmur3Token and TokenMap",
            (
                Param("nodes", "nodes of the ring", maximum=1000),
                Param("num_tokens", "tokens per node (default 16)", maximum=1536, default=16),
                Param("seed", "seed of the nodes' random tokens (default 0)", minimum=0, default=0),
            ),
            "node",
            64,
            _cassandra_values,
            lambda p: CassandraRingLayout(p["nodes"], p["num_tokens"], p["seed"]),
        ),
        PlacementRule(
            "ketama",
            "the memcached clients' ketama ring: MD5 of the key to the next of 160 MD5 points per server "
            "(servers server1..N; weights=w1:w2:… scales them)",
            "uhashring's ketama ring",
            (
                Param("servers", "servers of the ring, named server1 .. serverN", maximum=1000),
                Param(
                    "weights", "optional whole-number weight of each server, joined by ':' (weights=3:1:1)", listed=True
                ),
            ),
            "server",
            32,
            _ketama_values,
            lambda p: KetamaLayout(p["servers"], p.get("weights", ())),
            _ketama_check,
        ),
        PlacementRule(
            "postgres-hash",
            "PostgreSQL hash partitioning by one text key: hashtextextended (lookup3 of the key bytes) with the "
            "partitioning seed, hash_combine64, modulo the modulus; keys that cannot be text hashed as their bytes, "
            "as a bytea key",
            "a PostgreSQL server: each key's partition (tableoid) in a table PARTITION BY HASH, and hashtextextended",
            (Param("modulus", "the partitions' modulus (one partition per remainder)"),),
            "partition",
            64,
            _postgres_values,
            lambda p: ModLayout(p["modulus"]),
        ),
        PlacementRule(
            "java-hashmap",
            "java.util.HashMap of string keys: String.hashCode over UTF-16 units, spread h ^ (h >>> 16), bucket "
            "(n - 1) & hash in the table new HashMap<>(capacity) has after the puts of entries keys (doubling when "
            "the size exceeds 0.75 n); bins turning into trees change lookups, not buckets, and are not modelled",
            "published String.hashCode values and a plain-Python model of HashMap's spread and resize rule",
            (
                Param("capacity", "initial capacity given to new HashMap<>(capacity) (default 16)", 0, default=16),
                Param("entries", "distinct keys put into the map: its table grows by the resize rule to hold them"),
            ),
            "bucket",
            32,
            _hashmap_values,
            _hashmap_layout,
            _hashmap_check,
        ),
        PlacementRule(
            "python-dict",
            "CPython's dict of string keys: hash() of the key as a str (SipHash-1-3 over its 1-, 2- or 4-byte "
            "code points, keyed by the PYTHONHASHSEED secret; keys that are not UTF-8 as bytes), home slot hash & "
            "(n - 1) in the index table a dict has after entries insertions (8 slots, doubling past 2n/3 entries)",
            "CPython itself: hash() of every key in an interpreter started with PYTHONHASHSEED set, and the index "
            "table of a dict the keys are inserted into",
            (
                Param("entries", "distinct keys inserted into the dict: its table grows to hold them"),
                Param(
                    "seed",
                    "the interpreter's PYTHONHASHSEED (default 0)",
                    minimum=0,
                    maximum=(1 << 32) - 1,
                    default=0,
                ),
            ),
            "slot",
            64,
            _python_dict_values,
            _python_dict_layout,
            _python_dict_check,
            _python_dict_variant,
        ),
    )
}


@dataclass(frozen=True)
class Placement:
    """A rule with its parameters: one subject of an audit (shaped like a registered hash function)."""

    rule: str
    params: tuple[tuple[str, int | str | tuple[int, ...]], ...]
    seeded: bool = field(default=False, init=False)
    path: str = field(default="placement", init=False)
    integer_keys: bool = field(default=False, init=False)

    @property
    def name(self) -> str:
        """``kafka:partitions=12``: how it was asked for, and its name in the reports."""
        return self.rule + ":" + ",".join(f"{k}={_written(v)}" for k, v in self.params)

    @property
    def width(self) -> int:
        rule = RULES[self.rule]
        return rule.variant(dict(self.params))[0] if rule.variant is not None else rule.width

    @property
    def layout(self) -> Any:
        return RULES[self.rule].layout(dict(self.params))

    @property
    def unit(self) -> str:
        return RULES[self.rule].unit

    def hash_batch(self, batch: Any, seed: int = 0) -> np.ndarray:
        """The system's hash of every key (the seed is not the system's: ignored)."""
        rule = RULES[self.rule]
        if rule.variant is not None:
            return rule.variant(dict(self.params))[1](batch)
        return rule.hash_batch(batch)


def _written(value: int | str | tuple[int, ...]) -> str:
    return ":".join(map(str, value)) if isinstance(value, tuple) else str(value)


def parse_placement(text: str) -> Placement:
    """``NAME:param=value,...`` into a :class:`Placement`; ``SettingError`` naming ``placements`` otherwise.

    Parameters left out take their defaults (listed in the name, which says the whole rule); a listed parameter
    (``weights=3:1:1``) left out stays out."""
    match = re.fullmatch(r"\s*([a-z0-9-]+)\s*(?::(.*))?", text)
    if match is None or match[1] not in RULES:
        raise SettingError("placements", f"takes NAME:param=value with NAME one of {', '.join(RULES)}, not {text!r}")
    rule = RULES[match[1]]
    known = {p.name: p for p in rule.params}
    given: dict[str, int | str | tuple[int, ...]] = {}
    for part in (match[2] or "").split(","):
        if not part.strip():
            continue
        key, _, value = part.partition("=")
        key = key.strip()
        if key in known and known[key].choices:
            if value.strip() not in known[key].choices:
                raise SettingError(
                    "placements", f"{rule.name}: {key} must be one of {', '.join(known[key].choices)}, not {value!r}"
                )
            given[key] = value.strip()
            continue
        form = r"\s*\d+(\s*:\s*\d+)*\s*" if key in known and known[key].listed else r"\s*\d+\s*"
        if key not in known or not re.fullmatch(form, value):
            names = ", ".join(p.form for p in rule.params)
            raise SettingError("placements", f"{rule.name} takes {names}, not {part.strip()!r}")
        numbers = [int(v) for v in value.split(":")]
        if not all(known[key].minimum <= number <= known[key].maximum for number in numbers):
            raise SettingError(
                "placements", f"{rule.name}: {key} must be between {known[key].minimum} and {known[key].maximum:,}"
            )
        given[key] = tuple(numbers) if known[key].listed else numbers[0]
    missing = [p.form for p in rule.params if p.name not in given and p.default is None and not p.listed]
    if missing:
        raise SettingError("placements", f"{rule.name} needs {', '.join(missing)}")
    for p in rule.params:
        if p.name not in given and p.default is not None:
            given[p.name] = p.default
    params = tuple((p.name, given[p.name]) for p in rule.params if p.name in given)
    problem = rule.check(dict(params)) if rule.check is not None else None
    if problem:
        raise SettingError("placements", f"{rule.name}: {problem}")
    return Placement(rule.name, params)
