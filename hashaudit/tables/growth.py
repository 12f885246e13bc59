"""Tables that grow: replaying insertion with rehashing, and the orders in which keys reach a table.

``replay_growth`` inserts values one by one into a table that starts small and, when the next key would take it
past its maximum load factor, moves every key into a larger one (read out of the old table slot by slot, as
implementations do). It records each worst moment — the table just before a resize, at its fullest — and the
final table: slots, bytes, lookup costs, resizes, keys moved and probes spent.

``order_replay`` inserts the same values in several orders into such a growing table and counts the total probes
(insertions and rehashes). Under linear probing, the order matters a great deal when keys arrive grouped by home
slot of a table using the same hash: copying one table into another walks the source in slot order, and while the
target is smaller than the source, successive sweeps of the source's slots land on top of each other in the
target's first slots and build runs whose cost grows quadratically. Keys sorted by hash value do the same when
the table places keys by their top bits (``high``, ``range``); under ``mask`` that order is as good as random. A
random order is the reference. Such replays can cost billions of probes, so a replay may stop at a probe limit.

Sizes: a factor of 2 from a power-of-two start keeps powers of two (home slots by ``mask``, or the audit's own
scheme); any other factor rounds each size up to a prime and places keys by ``mod``.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field

import numpy as np

from hashaudit.errors import UsageError
from hashaudit.settings import SettingError
from hashaudit.tables.schemes import bucket_index, is_power_of_two
from hashaudit.tables.simulate import ProbeCell, double_steps, insert_keys, measure, new_table
from hashaudit.tables.sizes import is_prime, prime_above

CHUNK = 4096  # keys inserted between two looks at the probe limit
SLOT_BYTES = 16  # a hash-table slot holding a pointer to the entry and its stored hash: common practice
ORDERS = ("source", "random", "iteration_2x", "iteration_1x", "iteration_half", "sorted_by_hash")


@dataclass(frozen=True)
class GrowthPolicy:
    """How a table grows: start size, growth factor, and the load factor that triggers a resize."""

    start: int = 16
    factor: float = 2.0
    max_load: float = 0.75

    def __post_init__(self) -> None:
        if not 1.0 < self.factor <= 16.0:
            raise UsageError(f"growth factor must be above 1 and at most 16, not {self.factor}")
        if not 0.0 < self.max_load < 1.0:
            raise UsageError(f"maximum load factor must be between 0 and 1 (exclusive), not {self.max_load}")
        if not 2 <= self.start <= 1 << 30:
            raise UsageError(f"start size must be between 2 and 2^30 slots, not {self.start}")

    @property
    def label(self) -> str:
        return f"{self.factor:g}@{self.max_load:g}"

    @property
    def powers_of_two(self) -> bool:
        return self.factor == 2.0 and is_power_of_two(self.start)

    def first_size(self) -> int:
        return self.start if self.powers_of_two else prime_above(self.start)

    def next_size(self, slots: int) -> int:
        if self.powers_of_two:
            return 2 * slots
        return prime_above(max(slots + 1, math.ceil(slots * self.factor)))


def parse_growth(text: str, start: int = 16) -> GrowthPolicy:
    """``FACTOR@LOAD`` (e.g. ``2@0.75``, ``1.5@0.875``) into a policy."""
    match = re.fullmatch(r"\s*([0-9.]+)\s*@\s*([0-9.]+)\s*", text)
    if not match:
        raise SettingError("growth", f"takes FACTOR@LOAD such as 2@0.75 or 1.5@0.875, not {text!r}")
    try:
        return GrowthPolicy(start, float(match.group(1)), float(match.group(2)))
    except ValueError:
        raise SettingError("growth", f"takes FACTOR@LOAD such as 2@0.75 or 1.5@0.875, not {text!r}") from None


def _scheme_for(slots: int, scheme: str) -> str:
    if scheme in ("mask", "high") and not is_power_of_two(slots):
        return "mod"
    return scheme


@dataclass(frozen=True)
class GrowthResult:
    """A replay of insertion with rehashing.

    Attributes
    ----------
    kind : str
    policy : str
        ``FACTOR@LOAD``.
    keys, slots, bytes : int
        Keys inserted; slots of the final table and its size at ``SLOT_BYTES`` bytes per slot.
    resizes, keys_moved : int
        Rehashes, and keys moved by them (each rehash moves every key).
    insert_probes, rehash_probes : int
        Probes spent inserting the keys, and moving them at rehashes.
    insert_worst : int
        The costliest single insertion (rehash moves included).
    stopped : bool
        True when the replay stopped at its probe limit before inserting every key (the probes are then a lower
        bound of the full replay's).
    moments : list of ProbeCell
        Lookup costs at each worst moment (just before a resize) and in the final table, last.
    """

    kind: str
    policy: str
    keys: int
    slots: int
    bytes: int
    resizes: int
    keys_moved: int
    insert_probes: int
    rehash_probes: int
    insert_worst: int
    moments: list[ProbeCell] = field(default_factory=list)
    stopped: bool = False

    def to_dict(self) -> dict:
        """JSON-able form (moments without their region means)."""
        return {
            "kind": self.kind,
            "policy": self.policy,
            "keys": self.keys,
            "slots": self.slots,
            "bytes": self.bytes,
            "resizes": self.resizes,
            "keys_moved": self.keys_moved,
            "insert_probes": self.insert_probes,
            "rehash_probes": self.rehash_probes,
            "insert_worst": self.insert_worst,
            "moments": [
                {k: v for k, v in m.to_dict().items() if k not in ("kind", "insert_probes", "insert_worst")}
                for m in self.moments
            ],
        }


def _homes(values: np.ndarray, width: int, slots: int, scheme: str, kind: str) -> tuple[np.ndarray, np.ndarray]:
    homes = bucket_index(values, _scheme_for(slots, scheme), slots, width).astype(np.int64)
    steps = double_steps(values, width, slots) if kind == "double" else np.zeros(0, dtype=np.int64)
    return homes, steps


def _fits(kind: str, slots: int) -> bool:
    if kind == "quadratic":
        return is_power_of_two(slots)
    if kind == "double":
        return is_power_of_two(slots) or is_prime(slots)
    return True


def _slot_order(kind: str, table: np.ndarray, homes: np.ndarray, present: np.ndarray) -> np.ndarray:
    """The keys of a table in the order an iteration over its slots meets them."""
    if kind == "chaining":  # bucket by bucket, each list in insertion order
        return present[np.argsort(homes[present], kind="stable")]
    return table[table >= 0]


def replay_growth(
    values: np.ndarray,
    width: int,
    kind: str,
    policy: GrowthPolicy,
    scheme: str = "mask",
    order: np.ndarray | None = None,
    measure_moments: bool = True,
    probe_limit: int | None = None,
) -> GrowthResult:
    """Insert ``values`` (in ``order``, default their own) into a table growing by ``policy``.

    Parameters
    ----------
    values : numpy.ndarray of uint64
        Hash values of distinct keys.
    width : int
    kind : str
        ``chaining``, ``linear``, ``quadratic`` (needs powers of two), ``double`` or ``robin-hood``.
    policy : GrowthPolicy
    scheme : str
        Home slots of power-of-two tables (``mask``, ``high``, ``range``, ``mod``); other sizes use ``mod``.
    order : numpy.ndarray of int, optional
        A permutation of the values' indices: the order of insertion.
    measure_moments : bool
        Measure lookups at each worst moment (False: only count the work, for order replays).
    probe_limit : int, optional
        Stop once insertions and rehashes have spent more probes than this (``stopped`` is then True).
    """
    if kind == "quadratic" and not policy.powers_of_two:
        raise UsageError("quadratic probing needs power-of-two sizes: use a growth factor of 2 from a power of two")
    values = np.ascontiguousarray(values, dtype=np.uint64)
    n = len(values)
    order = np.arange(n, dtype=np.int64) if order is None else np.ascontiguousarray(order, dtype=np.int64)
    slots = policy.first_size()
    while kind != "chaining" and not _fits(kind, slots):
        slots += 1
    table = new_table(kind, slots)
    homes, steps = _homes(values, width, slots, scheme, kind)
    cost = np.zeros(n, dtype=np.int64)
    moments: list[ProbeCell] = []
    inserted = resizes = moved = insert_probes = rehash_probes = worst = 0
    while inserted < n:
        room = int(policy.max_load * slots) - inserted
        if room <= 0:
            present = order[:inserted]
            if measure_moments:
                moments.append(measure(kind, inserted / slots, homes, table, cost, present))
            walk = _slot_order(kind, table, homes, present)
            slots = policy.next_size(slots)
            table = new_table(kind, slots)
            homes, steps = _homes(values, width, slots, scheme, kind)
            spent, high = insert_keys(kind, homes, steps, walk, 0, len(walk), table, cost)
            rehash_probes += spent
            worst = max(worst, high)
            resizes += 1
            moved += len(walk)
            continue
        stop = min(n, inserted + room, inserted + CHUNK if probe_limit is not None else n)
        spent, high = insert_keys(kind, homes, steps, order, inserted, stop, table, cost)
        insert_probes += spent
        worst = max(worst, high)
        inserted = stop
        if probe_limit is not None and insert_probes + rehash_probes > probe_limit:
            return GrowthResult(
                kind, policy.label, inserted, slots, slots * SLOT_BYTES, resizes, moved, insert_probes,
                rehash_probes, worst, moments, stopped=True,
            )  # fmt: skip
    if measure_moments:
        moments.append(measure(kind, inserted / slots, homes, table, cost, order[:inserted]))
    return GrowthResult(
        kind,
        policy.label,
        n,
        slots,
        slots * SLOT_BYTES,
        resizes,
        moved,
        insert_probes,
        rehash_probes,
        worst,
        moments,
    )


def insertion_orders(values: np.ndarray, width: int, final_slots: int, scheme: str, seed: int) -> dict[str, np.ndarray]:
    """The orders ``order_replay`` compares: the source order, a random one, the slot order of a same-hash table
    of twice, as many and half as many slots as the grown table (keys by home slot there, ties in source order),
    and keys sorted by hash value."""
    n = len(values)
    rng = np.random.default_rng([seed, n, 0x0D3E])
    orders = {"source": np.arange(n, dtype=np.int64), "random": rng.permutation(n).astype(np.int64)}
    for name, size in (
        ("iteration_2x", 2 * final_slots),
        ("iteration_1x", final_slots),
        ("iteration_half", max(2, final_slots // 2)),
    ):
        homes = bucket_index(values, _scheme_for(size, scheme), size, width)
        orders[name] = np.argsort(homes, kind="stable").astype(np.int64)
    orders["sorted_by_hash"] = np.argsort(values, kind="stable").astype(np.int64)
    return orders
