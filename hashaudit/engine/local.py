"""The local engine: one pass over the key batches, every requested hash computed once per batch, every
(scheme, table size) of that hash fed from the same ``uint64`` array."""

from __future__ import annotations

import importlib
import itertools
import math
import os
import platform
import sys
import threading
import time
from collections.abc import Callable, Iterable, Sequence
from concurrent.futures import ThreadPoolExecutor
from dataclasses import asdict, dataclass, field

import numpy as np

from hashaudit.engine.checks import CHECK_GROUPS, DEFAULT_GROUPS
from hashaudit.engine.prefetch import prefetch
from hashaudit.errors import UsageError
from hashaudit.hashes.registry import DEFAULT_HASHES, REGISTRY, HashRegistry, HashSpec
from hashaudit.keys.batch import KeyBatch
from hashaudit.stats.avalanche import DEFAULT_MAX_BYTES, DEFAULT_SAMPLE_SIZE, KeySample
from hashaudit.stats.bits import BitCounts
from hashaudit.stats.buckets import BucketCounts, BucketCountsResult
from hashaudit.stats.collisions import FullCollisions
from hashaudit.stats.distinct import BYTES_PER_DISTINCT, DEFAULT_MEMORY_BYTES, DistinctBudgetError, DistinctKeys
from hashaudit.stats.heavy import HeavyCounts, HeavyKeys
from hashaudit.stats.outcome import Effect, FitTest
from hashaudit.stats.shards import BucketLoads, ShardCounts, balance_tests, movement_tests
from hashaudit.tables.growth import GrowthPolicy, insertion_orders, replay_growth
from hashaudit.tables.prefix import FirstValues
from hashaudit.tables.schemes import SCHEMES, check_scheme, is_power_of_two
from hashaudit.tables.shards import DEFAULT_VNODES, MAX_SHARDS, ShardLayout
from hashaudit.tables.simulate import DEFAULT_LOADS, TABLE_KINDS, kind_fits, simulate
from hashaudit.tables.sizes import auto_sizes
from hashaudit.verdict.attribution import load_findings
from hashaudit.verdict.findings import Finding, Thresholds, judge, worst_verdict
from hashaudit.verdict.result import AuditResult, HashAudit, TableSummary

HOTTEST_SHOWN = 5
LANE_COPY_BYTES = 256 << 20  # largest table memory a hashing thread may copy for itself


@dataclass(frozen=True)
class AuditPlan:
    """What to audit.

    Parameters
    ----------
    hashes : tuple of str
        Registry names (or ``module:function``).
    buckets : tuple of int
        Table sizes; empty = derived from the key count (see ``hashaudit.tables.sizes.auto_sizes``).
    schemes : tuple of str
        Bucketing schemes; empty = ``mask`` for power-of-two sizes and ``mod`` otherwise.
    seed : int
        Seed for seeded hash functions and simulated nulls.
    thresholds : Thresholds
    distinct : bool
        Count each distinct key once (the hash is not to blame for repeats); False counts every occurrence.
    distinct_memory : int
        Memory budget in bytes of the distinct-key fingerprint table.
    checks : tuple of str
        Check groups to run (``hashaudit.engine.checks.CHECK_GROUPS``).
    avalanche_keys : int
        Size of the key sample the avalanche checks flip bits of.
    avalanche_bytes : int
        Leading bytes of each sampled key whose bits are flipped.
    collision_memory : int
        Bytes of hash values the full-width collision count keeps in memory per hash before spilling to disk.
    spill_dir : str or None
        Folder for spilled hash values (default: the system's temporary folder).
    table_kinds : tuple of str
        Simulated table organisations for ``probe_cost`` (``hashaudit.tables.simulate.TABLE_KINDS``).
    loads : tuple of float
        Load factors at which simulated lookups are measured.
    table_slots : int or None
        Slots of the simulated tables; None = the largest power of two the first distinct keys fill to the
        highest load, at most ``AUTO_TABLE_SLOTS``.
    growth : tuple of GrowthPolicy
        Growth policies replayed by ``growth_cost``; the first also by ``order_hazard``.
    tag_bits : (int, int or None) or None
        Tag bits kept beside each slot and the position of the lowest (None: the top bits), for ``tag_bits``.
        None: seven top bits when the ``tags`` group is asked for alone; left out of a longer list such as
        ``all`` (a layout is a property of the user's table).
    shards : tuple of int
        Shard counts N for the ``shards`` checks (balance, movement, hot keys).
    shard_schemes : tuple of str
        ``mod``, ``jump``, ``rendezvous``, ``ring`` (``hashaudit.tables.shards``).
    vnodes : int
        Virtual nodes per shard on a ring.
    shard_weights : tuple of float
        Capacity weights, one per shard (rendezvous and ring), for every N given.
    """

    hashes: tuple[str, ...] = DEFAULT_HASHES
    buckets: tuple[int, ...] = ()
    schemes: tuple[str, ...] = ()
    seed: int = 0
    thresholds: Thresholds = field(default_factory=Thresholds)
    distinct: bool = True
    distinct_memory: int = DEFAULT_MEMORY_BYTES
    checks: tuple[str, ...] = DEFAULT_GROUPS
    avalanche_keys: int = DEFAULT_SAMPLE_SIZE
    avalanche_bytes: int = DEFAULT_MAX_BYTES
    collision_memory: int = 1 << 30
    spill_dir: str | None = None
    table_kinds: tuple[str, ...] = TABLE_KINDS
    loads: tuple[float, ...] = DEFAULT_LOADS
    table_slots: int | None = None
    growth: tuple[GrowthPolicy, ...] = (GrowthPolicy(),)
    tag_bits: tuple[int, int | None] | None = None
    shards: tuple[int, ...] = ()
    shard_schemes: tuple[str, ...] = ("mod",)
    vnodes: int = DEFAULT_VNODES
    shard_weights: tuple[float, ...] = ()

    def __post_init__(self) -> None:
        if not self.hashes:
            raise UsageError("no hash function to audit")
        object.__setattr__(self, "hashes", tuple(dict.fromkeys(self.hashes)))
        object.__setattr__(self, "buckets", tuple(dict.fromkeys(self.buckets)))
        object.__setattr__(self, "schemes", tuple(dict.fromkeys(self.schemes)))
        for group in self.checks:
            if group not in CHECK_GROUPS:
                raise UsageError(f"unknown check group {group!r}; choose from {', '.join(CHECK_GROUPS)}")
        if not self.checks:
            raise UsageError("no check to run")
        if self.avalanche_keys < 1:
            raise UsageError(f"--avalanche-keys must be at least 1, not {self.avalanche_keys}")
        if not 1 <= self.avalanche_bytes <= 4096:
            raise UsageError(f"--avalanche-bytes must be between 1 and 4096, not {self.avalanche_bytes}")
        if self.distinct and self.distinct_memory < 4 << 20:
            raise UsageError(f"--distinct-memory must be at least 4 MiB, not {self.distinct_memory:,} bytes")
        if self.collision_memory < 0:
            raise UsageError(f"--collision-memory must not be negative, not {self.collision_memory}")
        if self.spill_dir is not None and not os.path.isdir(self.spill_dir):
            raise UsageError(f"--spill-dir {self.spill_dir!r} is not an existing folder")
        object.__setattr__(self, "table_kinds", tuple(dict.fromkeys(self.table_kinds)))
        object.__setattr__(self, "loads", tuple(sorted(set(self.loads))))
        for kind in self.table_kinds:
            kind_fits(kind, 1 << 10)  # raises on an unknown kind
        if not self.table_kinds:
            raise UsageError("no --table-kind to simulate")
        if not self.growth:
            raise UsageError("no --growth policy to replay")
        object.__setattr__(self, "shards", tuple(dict.fromkeys(self.shards)))
        object.__setattr__(self, "shard_schemes", tuple(dict.fromkeys(self.shard_schemes)))
        if "tags" in self.checks and self.tag_bits is None:
            if self.checks == ("tags",):
                object.__setattr__(self, "tag_bits", (7, None))
            else:
                object.__setattr__(self, "checks", tuple(g for g in self.checks if g != "tags"))
        if "shards" in self.checks and not self.shards:
            if self.checks == ("shards",):
                raise UsageError("the shard checks need --shards N")
            object.__setattr__(self, "checks", tuple(g for g in self.checks if g != "shards"))  # e.g. from "all"
        for n in self.shards:
            if not 1 <= n <= MAX_SHARDS:
                raise UsageError(f"--shards must be between 1 and {MAX_SHARDS:,}, not {n:,}")
            for scheme in self.shard_schemes:
                ShardLayout(scheme, n, self.shard_weights, self.vnodes)  # raises on a bad combination
        if not self.loads or not all(0 < x < 1 for x in self.loads):
            raise UsageError(
                f"--load takes load factors between 0 and 1 (exclusive), not {', '.join(map(str, self.loads))}"
            )
        if self.table_slots is not None and not MIN_TABLE_SLOTS <= self.table_slots <= MAX_TABLE_SLOTS:
            raise UsageError(
                f"--table-slots must be between {MIN_TABLE_SLOTS:,} and 2^{MAX_TABLE_SLOTS.bit_length() - 1}, "
                f"not {self.table_slots:,}"
            )
        for scheme in self.schemes:
            if scheme not in SCHEMES:
                raise UsageError(f"unknown scheme {scheme!r}; choose one of {', '.join(SCHEMES)}")
        for m in self.buckets:
            check_scheme("mod", m)
            usable = [s for s in self.schemes if s not in ("mask", "high") or is_power_of_two(m)]
            if self.schemes and not usable:
                check_scheme(self.schemes[0], m)  # raises the one-line explanation
        if not 0 <= self.seed < 1 << 128:
            raise UsageError(f"--seed must be between 0 and 2^128 - 1, not {self.seed}")

    def tables(self, keys: int | None) -> list[tuple[str, int]]:
        """The (scheme, m) pairs to count; ``keys`` is needed when sizes are automatic."""
        if "buckets" not in self.checks:
            return []
        if self.buckets:
            # a power-of-two-only scheme skips sizes another requested scheme can use (checked in __post_init__)
            sizes, primes = list(self.buckets), list[int]()
        else:
            if keys is None:
                raise UsageError("table sizes are derived from the key count; give --buckets when it is unknown")
            sizes, primes = auto_sizes(keys)
        pairs: list[tuple[str, int]] = []
        for m in sizes + primes:
            if self.schemes:
                for scheme in self.schemes:
                    if scheme in ("mask", "high") and not is_power_of_two(m):
                        continue  # automatic prime sizes only go to mod and range
                    pairs.append((scheme, m))
            else:
                pairs.append(("mask" if is_power_of_two(m) else "mod", m))
        return list(dict.fromkeys(pairs))

    def simulated_keys(self) -> int:
        """How many of the first distinct keys' values the simulations keep (0 when they do not run)."""
        if not {"tables", "growth", "tags"} & set(self.checks):
            return 0
        return int(max(self.loads) * (self.table_slots or AUTO_TABLE_SLOTS))

    def simulated_slots(self, keys: int) -> int | None:
        """Slots of the simulated tables given the keys kept, or None when too few keys fill the smallest table."""
        if self.table_slots is not None:
            return self.table_slots if int(max(self.loads) * self.table_slots) <= keys else None
        slots = AUTO_TABLE_SLOTS
        while slots >= MIN_TABLE_SLOTS and int(max(self.loads) * slots) > keys:
            slots //= 2
        return slots if slots >= MIN_TABLE_SLOTS else None

    def needs_key_count(self) -> bool:
        """True when table sizes depend on the number of keys."""
        return not self.buckets and "buckets" in self.checks


@dataclass
class _HashState:
    spec: HashSpec
    tables: list[BucketCounts]
    bits: BitCounts | None = None
    collisions: FullCollisions | None = None
    first_values: FirstValues | None = None
    shards: list[ShardCounts] = field(default_factory=list)
    bucket_loads: list[BucketLoads] = field(default_factory=list)

    def streams(self) -> list[BucketCounts | BitCounts | FullCollisions]:
        """Every accumulator fed with this hash's values."""
        extras = [a for a in (self.bits, self.collisions) if a is not None]
        return [*self.tables, *extras]


def _new_state(spec: HashSpec, plan: AuditPlan, pairs: list[tuple[str, int]], lanes: int) -> _HashState:
    tables = [BucketCounts(spec.name, plan.seed, scheme, m, spec.width) for scheme, m in pairs]
    bits = BitCounts(spec.name, plan.seed, spec.width) if "bits" in plan.checks else None
    collisions = None
    if "collisions" in plan.checks:
        budget = plan.collision_memory // lanes  # each lane keeps its share in memory, then spills to disk
        collisions = FullCollisions(spec.name, plan.seed, spec.width, budget, plan.spill_dir)
    first_values = FirstValues(plan.simulated_keys()) if plan.simulated_keys() else None
    shards = [
        ShardCounts(spec.name, spec.width, ShardLayout(scheme, n, plan.shard_weights, plan.vnodes))
        for n in plan.shards
        for scheme in plan.shard_schemes
    ]
    loads = [BucketLoads(scheme, m, spec.width) for scheme, m in pairs] if "shards" in plan.checks else []
    return _HashState(spec, tables, bits, collisions, first_values, shards if "shards" in plan.checks else [], loads)


def audit_batches(
    batches: Iterable[KeyBatch],
    plan: AuditPlan,
    *,
    keys: int | None = None,
    sources: Sequence[dict] = (),
    registry: HashRegistry = REGISTRY,
    progress: Callable[[int], None] | None = None,
    read_ahead: bool = True,
    threads: int = 0,
    key_estimate: Callable[[KeyBatch], int | None] | None = None,
    reopen: Callable[[], Iterable[KeyBatch]] | None = None,
) -> AuditResult:
    """Audit a stream of key batches.

    Parameters
    ----------
    batches : iterable of KeyBatch
    plan : AuditPlan
    keys : int, optional
        Number of keys, required when the plan derives table sizes from it.
    sources : sequence of dict
        Source descriptions for the report.
    registry : HashRegistry
    progress : callable, optional
        Called with the number of keys of each batch once it is counted.
    read_ahead : bool
        Produce the next batches on a background thread while hashing (see ``hashaudit.engine.prefetch``).
    threads : int
        Hashing lanes; 0 = one per core. Results are identical for any number.
    key_estimate : callable, optional
        Given the first batch, an estimate of the number of keys in the whole input (sizes the distinct-key set
        once instead of growing it); ``keys`` serves when it is given.
    reopen : callable, optional
        Returns the same batches again from the start. With it, an input with more distinct keys than
        ``plan.distinct_memory`` holds is read in several passes, one per part of the fingerprint space;
        without it, that is a ``UsageError``.
    """
    started = time.perf_counter()
    # The statistics need scipy, which takes a while to import: load it while the keys stream through.
    threading.Thread(target=_import_quietly, args=("hashaudit.stats.fit",), daemon=True).start()
    specs = [registry.get(name) for name in plan.hashes]
    pairs = plan.tables(keys)
    lanes = _lane_count(threads, len(specs))
    count_bytes = 8 * sum(m for _, m in pairs)  # one int64 per bucket per table, for one hash
    _check_memory(count_bytes * len(specs), pairs)
    if "tags" in plan.checks:  # a layout whose tag overlaps the position bits is a usage error: say so before reading
        from hashaudit.stats.tags import check_tag_layout

        for spec in specs:
            for scheme, m in pairs or [("mask", AUTO_TABLE_SLOTS)]:
                check_tag_layout(spec.width, scheme, m, *(plan.tag_bits or (7, None)))
    # With several hashes, each lane owns some of them; with one, lanes split each batch and own a copy of
    # the tables, merged at the end (merging counts is exact, so the result is bit-identical to one lane).
    # Copies are only made while they are small.
    if len(specs) < lanes and count_bytes > LANE_COPY_BYTES:
        lanes = max(1, len(specs))
    split_keys = len(specs) < lanes

    def fresh_states() -> list[list[_HashState]]:
        return [
            [
                _new_state(spec, plan, pairs, lanes if split_keys else 1)
                for i, spec in enumerate(specs)
                if split_keys or i % lanes == lane
            ]
            for lane in range(lanes)
        ]

    lane_states = fresh_states()
    hash_seconds = {spec.name: 0.0 for spec in specs}

    def work(lane: int, batch: KeyBatch, first: np.ndarray | None, offset: int) -> None:
        for state in lane_states[lane]:
            t0 = time.perf_counter()
            values = state.spec.hash_batch(batch, plan.seed if state.spec.seeded else 0)
            if loading[0]:  # every occurrence, once (in the first pass over the input)
                for shard_counts in state.shards:
                    shard_counts.add_load(values, batch.weights)
                for bucket_load in state.bucket_loads:
                    bucket_load.add_load(values, batch.weights)
            if first is not None:
                values = values[first]
            for shard_counts in state.shards:
                shard_counts.update(values)
            for accumulator in state.streams():
                accumulator.update(values)
            if state.first_values is not None:
                where = np.flatnonzero(first) if first is not None else np.arange(len(batch))
                low = values[:, 0] if values.ndim == 2 else values  # tables place 128-bit values by the low word
                state.first_values.update(low, offset + where)
            hash_seconds[state.spec.name] += time.perf_counter() - t0

    loading = [True]
    heavy = HeavyKeys() if "shards" in plan.checks else None
    counting: list[HeavyCounts | None] = [None]  # the heavy keys' exact counts, taken in a second read
    extra_reads = 0
    wants_sample = any(group in plan.checks for group in ("avalanche", "neighbours", "seeds"))
    sample = KeySample(plan.avalanche_keys, plan.seed) if wants_sample else None
    pool = ThreadPoolExecutor(max_workers=lanes - 1, thread_name_prefix="hashaudit-hash") if lanes > 1 else None
    estimated: list[int | None] = [keys]

    def one_pass(stream: Iterable[KeyBatch], distinct: DistinctKeys | None, sampling: bool) -> int:
        """Feed every batch of ``stream`` to the accumulators (only first occurrences when ``distinct`` is given,
        and among them only the keys of its part); returns the number of keys read."""
        read = 0
        loading[0] = sampling
        for batch in prefetch(stream) if read_ahead else stream:
            n = len(batch)
            if n == 0:
                continue
            if read == 0 and estimated[0] is None and key_estimate is not None:
                estimated[0] = key_estimate(batch)
            if distinct is not None and read == 0 and estimated[0]:
                distinct.reserve(estimated[0] // distinct.parts)
            # the key sample needs only the batch: it fills on a worker while this thread drops the repeats
            # (a bottom-k sample, so repeated keys count once by construction)
            filling = sample if sampling else None
            sampled = pool.submit(filling.update, batch) if filling is not None and pool is not None else None
            if filling is not None and pool is None:
                filling.update(batch)
            if heavy is not None and sampling:
                heavy.update(batch, batch.weights)
            if counting[0] is not None:
                counting[0].update(batch, batch.weights)
            first = distinct.update(batch) if distinct is not None else None
            if first is not None and first.all():
                first = None  # nothing to drop: skip the copy
            if pool is None:
                work(0, batch, first, read)
            else:
                if split_keys:
                    bounds = [n * lane // lanes for lane in range(lanes + 1)]
                    parts = [batch.slice(bounds[i], bounds[i + 1]) for i in range(lanes)]
                    masks = [None if first is None else first[bounds[i] : bounds[i + 1]] for i in range(lanes)]
                else:
                    bounds = [0] * (lanes + 1)
                    parts, masks = [batch] * lanes, [first] * lanes
                futures = [
                    pool.submit(work, lane, parts[lane], masks[lane], read + bounds[lane]) for lane in range(1, lanes)
                ]
                work(0, parts[0], masks[0], read)
                for future in futures:
                    future.result()
            if sampled is not None:
                sampled.result()
            read += n
            if progress is not None and sampling:
                progress(n)
        return read

    # With more distinct keys than --distinct-memory holds, the input is read once per part of the fingerprint
    # space (when it can be read again): each pass keeps a part's fingerprints only, and every accumulator adds
    # up over the passes, so the result is the same as in one pass.
    parts = 1
    stream: Iterable[KeyBatch] = batches
    if plan.distinct and reopen is not None and (keys is not None or key_estimate is not None):
        # an input that plainly cannot fit is split from the start, rather than after a wasted partial read
        iterator = iter(batches)
        head = next(iterator, None)
        if head is not None:
            estimated[0] = keys if keys is not None else key_estimate(head) if key_estimate else None
            stream = itertools.chain([head], iterator)
            if estimated[0]:
                parts = _parts_for(estimated[0], plan.distinct_memory)
    try:
        while True:
            distinct_total = 0
            try:
                occurrences = 0
                counting[0] = None
                for part in range(parts):
                    distinct = DistinctKeys(plan.distinct_memory, part, parts) if plan.distinct else None
                    if part == 1 and heavy is not None and not heavy.exact and heavy.prune():
                        counting[0] = HeavyCounts(heavy)  # the second read settles the heavy keys' counts too
                    read = one_pass(stream if part == 0 else reopen(), distinct, sampling=part == 0)  # type: ignore[misc]
                    occurrences = occurrences or read
                    distinct_total += distinct.distinct_ if distinct is not None else 0
                    del distinct
                break
            except DistinctBudgetError as full:
                if reopen is None:
                    raise UsageError(
                        f"{full} (an input that can be read again, such as a file, would be read in several passes)"
                    ) from None
                parts *= _more_parts(full, estimated[0], plan.distinct_memory)
                if parts > MAX_PARTS:
                    raise UsageError(f"{full}; even {MAX_PARTS} passes over the input would not do") from None
                for lane in lane_states:
                    for state in lane:
                        if state.collisions is not None:
                            state.collisions.close()
                lane_states[:] = fresh_states()
                hash_seconds = dict.fromkeys(hash_seconds, 0.0)
                if sample is not None:
                    sample = KeySample(plan.avalanche_keys, plan.seed)
                if heavy is not None:
                    heavy = HeavyKeys()
                stream = reopen()
    finally:
        if pool is not None:
            pool.shutdown(wait=True)
    if occurrences == 0:
        raise UsageError("no keys to audit")
    if heavy is not None and not heavy.exact:
        if counting[0] is None and not heavy.prune():
            counting[0] = HeavyCounts(heavy)  # no kept key can be above the floor: nothing to read again for
        again = reopen or ((lambda: batches) if isinstance(batches, list | tuple) else None)
        if counting[0] is None and again is not None:
            counted = counting[0] = HeavyCounts(heavy)
            for batch in prefetch(again()) if read_ahead else again():
                counted.update(batch, batch.weights)
            extra_reads = 1
        if counting[0] is not None:
            heavy.settle(counting[0])
    total = distinct_total if plan.distinct else occurrences
    if split_keys:
        states = _merge_lanes(lane_states)
    else:
        order = [spec.name for spec in specs]
        states = sorted((st for lane in lane_states for st in lane), key=lambda st: order.index(st.spec.name))
    settings_parts = parts + extra_reads
    return _conclude(states, plan, total, occurrences, sources, started, hash_seconds, sample, settings_parts, heavy)


MAX_PARTS = 1 << 12
AUTO_TABLE_SLOTS = 1 << 18
MIN_TABLE_SLOTS = 1 << 12  # 16 regions of 256 slots: smaller tables give too few independent batch means
MAX_TABLE_SLOTS = 1 << 30


def _table_tests(state: _HashState, plan: AuditPlan) -> list[tuple[str, str | None, int | None, int, FitTest]]:
    """``probe_cost`` of every table kind, on the values of the first distinct keys."""
    from hashaudit.stats.probes import growth_tests, ideal_cells, ideal_replay, probe_tests

    assert state.first_values is not None
    values = state.first_values.values()
    slots = plan.simulated_slots(len(values))
    if slots is None:
        return []
    scheme = next(
        (s for s in plan.schemes if s in ("mod", "range") or is_power_of_two(slots)),
        "mask" if is_power_of_two(slots) else "mod",
    )
    out: list[tuple[str, str | None, int | None, int, FitTest]] = []
    name, width = state.spec.name, state.spec.width
    for kind in plan.table_kinds if "tables" in plan.checks else ():
        if kind_fits(kind, slots) is not None:
            continue
        cells = simulate(values, width, kind, slots, scheme, plan.loads)
        ideal = ideal_cells(width, kind, slots, scheme, plan.loads, plan.seed)
        for test in probe_tests(cells, ideal, scheme):
            out.append((name, scheme, slots, cells[-1].keys, test))
    if "tags" in plan.checks:
        from hashaudit.stats.tags import tag_tests

        positions = [(t.scheme, t.buckets) for t in state.tables] or [(scheme, slots)]
        for where, m in positions:
            for test in tag_tests(values, width, where, m, *(plan.tag_bits or (7, None))):
                out.append((name, where, m, len(values), test))
    if "growth" in plan.checks:  # every kept key: growth decides the sizes
        for kind in plan.table_kinds:
            for i, policy in enumerate(plan.growth):
                if kind == "quadratic" and not policy.powers_of_two:
                    continue
                grown = replay_growth(values, width, kind, policy, scheme)
                ideal_growth = ideal_replay(width, kind, policy, scheme, len(values), plan.seed)
                for test in growth_tests(grown, ideal_growth):
                    out.append((name, _scheme_of(grown.slots, scheme), grown.slots, len(values), test))
                if i == 0 and kind != "chaining":  # order cannot change a chained table's total work
                    test = order_hazard(values, width, kind, policy, scheme, grown.slots, plan.seed)
                    out.append((name, _scheme_of(grown.slots, scheme), grown.slots, len(values), test))
    return out


def _scheme_of(slots: int, scheme: str) -> str:
    return scheme if is_power_of_two(slots) or scheme in ("mod", "range") else "mod"


RANDOM_ORDERS = 8
ORDER_PROBE_LIMIT = 64  # an order replay stops past this many times the random orders' mean probes


def order_hazard(
    values: np.ndarray, width: int, kind: str, policy: GrowthPolicy, scheme: str, slots: int, seed: int
) -> FitTest:
    """Replay the keys in every order of ``insertion_orders`` (and ``RANDOM_ORDERS`` random ones) into a growing
    table and test the totals."""
    from hashaudit.stats.probes import order_tests

    def work(order: np.ndarray, limit: int | None = None) -> tuple[int, int, bool]:
        replay = replay_growth(
            values, width, kind, policy, scheme, order=order, measure_moments=False, probe_limit=limit
        )
        return replay.insert_probes + replay.rehash_probes, replay.insert_worst, replay.stopped

    orders = insertion_orders(values, width, slots, scheme, seed)
    rng = np.random.default_rng([seed, len(values), 0x0D3F])
    random_runs = [work(rng.permutation(len(values)))[:2] for _ in range(RANDOM_ORDERS)]
    # an order far costlier than random is stopped early: its total is then a lower bound, and enough to judge
    limit = ORDER_PROBE_LIMIT * int(np.mean([total for total, _ in random_runs]))
    full = {name: work(order, limit) for name, order in orders.items() if name != "random"}
    runs = {name: (total, high) for name, (total, high, _) in full.items()}
    totals = {name: total for name, (total, _) in runs.items()}
    worst = {name: high for name, (_, high) in runs.items()}
    (test,) = order_tests(kind, policy.label, totals, [total for total, _ in random_runs], worst)
    test.details["random_worst_insertion"] = max(high for _, high in random_runs)
    test.details["stopped_orders"] = [name for name, (_, _, stopped) in full.items() if stopped]
    return test


def _parts_for(keys: int, budget: int) -> int:
    """Parts (a power of two) so that ``keys`` distinct keys fit ``budget`` bytes, with a tenth to spare."""
    need = keys * BYTES_PER_DISTINCT * 1.1 / budget
    return 1 if need <= 1 else min(MAX_PARTS, 1 << math.ceil(math.log2(need)))


def _more_parts(full: DistinctBudgetError, estimate: int | None, budget: int) -> int:
    """By how much to multiply the number of parts after ``full``: enough for the distinct keys projected from the
    share of the input read so far (with a quarter to spare), and at least twice as many."""
    factor = 2
    if estimate and full.keys_seen:
        projected = full.distinct * max(1.0, estimate / full.keys_seen) * BYTES_PER_DISTINCT * 1.1
        factor = max(2, 1 << max(0, math.ceil(projected / budget) - 1).bit_length())
    return factor


def _available_memory_bytes() -> int | None:
    try:
        with open("/proc/meminfo", encoding="ascii") as f:
            for line in f:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except (OSError, ValueError, IndexError):
        pass
    try:
        return os.sysconf("SC_PHYS_PAGES") * os.sysconf("SC_PAGE_SIZE")
    except (ValueError, OSError, AttributeError):
        return None


def _check_memory(needed: int, pairs: list[tuple[str, int]]) -> None:
    """Refuse tables whose counts cannot fit, instead of running the machine out of memory."""
    available = _available_memory_bytes()
    # the counts, plus one floating-point copy of the largest table while its statistics are computed
    peak = needed + 8 * max((m for _, m in pairs), default=0)
    if available is not None and peak > 0.8 * available:
        raise UsageError(
            f"the tables need {peak / 2**30:.1f} GiB for their counts (8 bytes per bucket per table and hash) but "
            f"{available / 2**30:.1f} GiB are available; use fewer or smaller --buckets"
        )


def _import_quietly(module: str) -> None:
    """Import ahead of time; a failure shows later, as one line, when the module is really needed."""
    try:
        importlib.import_module(module)
    except BaseException:  # noqa: BLE001 - reported by the import that needs it
        pass


def _lane_count(threads: int, hashes: int) -> int:
    if threads < 0:
        raise UsageError(f"--threads must be 0 (automatic) or more, not {threads}")
    if threads == 0:
        threads = min(os.cpu_count() or 1, 8)
    return max(1, threads)


def _merge_lanes(lane_states: list[list[_HashState]]) -> list[_HashState]:
    merged = lane_states[0]
    for other in lane_states[1:]:
        for mine, theirs in zip(merged, other, strict=True):
            for accumulator, twin in zip(mine.streams(), theirs.streams(), strict=True):
                accumulator.merge(twin)  # type: ignore[arg-type]
            for shard_counts, shard_twin in zip(mine.shards, theirs.shards, strict=True):
                shard_counts.merge(shard_twin)
            for bucket_load, load_twin in zip(mine.bucket_loads, theirs.bucket_loads, strict=True):
                bucket_load.merge(load_twin)
            if mine.first_values is not None and theirs.first_values is not None:
                mine.first_values.merge(theirs.first_values)
    return merged


def _conclude(
    states: list[_HashState],
    plan: AuditPlan,
    total: int,
    occurrences: int,
    sources: Sequence[dict],
    started: float,
    hash_seconds: dict[str, float],
    sample: KeySample | None = None,
    passes: int = 1,
    heavy: HeavyKeys | None = None,
) -> AuditResult:
    from hashaudit.stats.avalanche import avalanche_matrix, avalanche_tests
    from hashaudit.stats.bits import bit_tests
    from hashaudit.stats.collisions import collision_tests
    from hashaudit.stats.neighbours import NeighbourFamily, neighbour_families, neighbour_tests
    from hashaudit.stats.seeds import seed_runs, seed_tests

    families: list[NeighbourFamily] | None = None
    from hashaudit.stats.fit import bucket_tests

    family: list[tuple[str, str | None, int | None, int, FitTest]] = []
    plots: dict[str, dict] = {}
    summaries_by_hash: dict[str, list[TableSummary]] = {}
    for state in states:
        for table in state.tables:
            result = table.result()
            for test in bucket_tests(result, seed=plan.seed):
                family.append((state.spec.name, result.scheme, result.buckets, result.keys, test))
            loads = next(
                (b for b in state.bucket_loads if (b.scheme, b.buckets) == (result.scheme, result.buckets)), None
            )
            summaries_by_hash.setdefault(state.spec.name, []).append(_summary(result, loads))
        summaries_by_hash.setdefault(state.spec.name, [])
        if state.bits is not None:
            bits_result = state.bits.result()
            for test in bit_tests(bits_result, seed=plan.seed):
                family.append((state.spec.name, None, None, bits_result.keys, test))
        if state.collisions is not None:
            collision_result = state.collisions.result()
            for test in collision_tests(collision_result):
                family.append((state.spec.name, None, None, collision_result.keys, test))
        if sample is not None and len(sample) and "neighbours" in plan.checks:
            if families is None:
                families = neighbour_families(sample, seed=plan.seed)
            tables = [(t.scheme, t.buckets) for t in state.tables]
            for _family, test in neighbour_tests(
                state.spec.hash_batch,
                state.spec.width,
                families,
                tables,
                seed=plan.seed,
                seeded=state.spec.seeded,
                integer_keys=state.spec.integer_keys,
                name=state.spec.name,
            ):
                d = test.details
                family.append((state.spec.name, d.get("worst_scheme"), d.get("worst_buckets"), d["family_keys"], test))
        if sample is not None and len(sample) and "seeds" in plan.checks and state.spec.seeded:
            tables = [(t.scheme, t.buckets) for t in state.tables]
            runs = seed_runs(
                state.spec.hash_batch,
                state.spec.width,
                sample.keys(),
                tables,
                null_seed=plan.seed,
                name=state.spec.name,
            )
            for test in seed_tests(runs):
                family.append((state.spec.name, None, None, runs.keys, test))
        if sample is not None and len(sample) and "avalanche" in plan.checks:
            hash_seed = plan.seed if state.spec.seeded else 0
            matrix = avalanche_matrix(
                state.spec.hash_batch,
                state.spec.width,
                sample,
                seed=hash_seed,
                max_bytes=plan.avalanche_bytes,
                name=state.spec.name,
            )
            for test in avalanche_tests(matrix):
                family.append((state.spec.name, None, None, matrix.keys, test))
            plots.setdefault(state.spec.name, {})["avalanche"] = matrix.flip_probability()
        if sample is not None and len(sample) >= 64:
            plots.setdefault(state.spec.name, {})["no_collision"] = no_collision_curve(
                state.spec, sample.keys(), state.tables, plan.seed
            )
        if state.first_values is not None:
            family.extend(_table_tests(state, plan))
    for state in states:
        for shard_counts in state.shards:
            for test in [*balance_tests(shard_counts), *movement_tests(shard_counts)]:
                family.append((state.spec.name, None, None, int(shard_counts.distinct_.sum()), test))
    findings = judge(family, plan.thresholds)
    if plan.distinct and "collisions" in plan.checks:
        findings += [_duplicate_finding(state.spec.name, total, occurrences) for state in states]
    if heavy is not None:
        findings += load_findings(states, heavy, plan.thresholds, plan.seed)
    hash_audits = []
    for state in states:
        own = tuple(f for f in findings if f.hash_name == state.spec.name)
        summaries = tuple(summaries_by_hash[state.spec.name])
        hash_audits.append(
            HashAudit(
                state.spec.name,
                state.spec.width,
                state.spec.seeded,
                plan.seed,
                state.spec.path,
                worst_verdict([f.verdict for f in own]),
                own,
                summaries,
            )
        )
    overall = "fail" if any(h.verdict == "fail" for h in hash_audits) else "pass"
    seconds = time.perf_counter() - started
    settings = {
        "hashes": [s.spec.name for s in states],
        "tables": [{"scheme": t.scheme, "buckets": t.buckets} for t in states[0].tables],
        "checks": list(plan.checks),
        "seed": plan.seed,
        "count": "distinct" if plan.distinct else "all",
        "thresholds": asdict(plan.thresholds),
    }
    run = {
        "hashaudit_version": _version(),
        "python": platform.python_version(),
        "numpy": np.__version__,
        "seconds": round(seconds, 3),
        "keys_per_second": round(total / seconds) if seconds > 0 else None,
        "hash_seconds": {k: round(v, 3) for k, v in hash_seconds.items()},
        "passes": passes,  # reads of the input: more when the distinct keys outgrew --distinct-memory or to settle
        # the heavy keys' counts
        "platform": sys.platform,
    }
    return AuditResult(overall, total, tuple(hash_audits), tuple(sources), settings, run, occurrences, plots)


CURVE_POINTS = 24
CURVE_DRAWS = 200


def no_collision_curve(spec: HashSpec, keys: KeyBatch, tables: list[BucketCounts], seed: int) -> dict:
    """The observed probability that k keys share no bucket, as k grows, against Q(m, k).

    For the smallest table of the audit (or 2^16 buckets without one), ``CURVE_DRAWS`` random subsets of the key
    sample (seeded) of each size k on a grid up to three times the birthday threshold √m: the share of subsets
    with no two keys in one bucket. Simple uniform hashing predicts Q(m, k) (the birthday problem).
    """
    from hashaudit.stats.theory import p_no_collision
    from hashaudit.tables.schemes import bucket_index

    scheme, m = min(((t.scheme, t.buckets) for t in tables), key=lambda p: p[1], default=("mask", 1 << 16))
    values = spec.hash_batch(keys, seed if spec.seeded else 0)
    homes = bucket_index(values, scheme, m, spec.width)
    top = int(min(len(homes), max(8.0, 3 * math.sqrt(m))))
    sizes = sorted({max(2, int(round(x))) for x in np.linspace(2, top, CURVE_POINTS)})
    rng = np.random.default_rng([seed, m, 0xC0])
    observed = []
    for k in sizes:
        clear = 0
        for _ in range(CURVE_DRAWS):
            pick = homes[rng.choice(len(homes), size=k, replace=False)]
            clear += len(np.unique(pick)) == k
        observed.append(clear / CURVE_DRAWS)
    return {
        "scheme": scheme,
        "buckets": m,
        "keys": sizes,
        "observed": observed,
        "theory": [p_no_collision(m, k) for k in sizes],
        "draws": CURVE_DRAWS,
    }


def _duplicate_finding(hash_name: str, distinct: int, occurrences: int) -> Finding:
    """``duplicate_keys``: repeated keys are counted first and kept out of every other check; they are a fact about
    the input, not the hash, so this finding informs and never fails."""
    repeats = occurrences - distinct
    share = repeats / occurrences if occurrences else 0.0
    effect = Effect("repeated_share", share, float(repeats), 0.0, "share of occurrences repeating an earlier key")
    message = (
        f"{repeats:,} of {occurrences:,} keys repeat an earlier key ({100 * share:.1f} %); every check counts each "
        "distinct key once — repeats are not the hash's fault"
        if repeats
        else f"no key repeats: {occurrences:,} distinct keys"
    )
    return Finding(
        hash_name,
        "duplicate_keys",
        None,
        None,
        distinct,
        float(repeats),
        0.0,
        float(repeats),
        1.0,
        1.0,
        1.0,
        "exact count through 128-bit key fingerprints (a false match has probability about d^2/2^129)",
        effect,
        math.nan,
        "info" if repeats else "pass",
        "none",
        message,
    )


def _summary(result: BucketCountsResult, loads: BucketLoads | None = None) -> TableSummary:
    from hashaudit.stats.fit import occupancy_table

    counts = result.counts
    occupied = np.flatnonzero(counts)  # the hottest buckets are among the occupied ones (at most n of them)
    top = min(HOTTEST_SHOWN, len(occupied))
    hottest = occupied[np.argpartition(counts[occupied], -top)[-top:]] if top else occupied
    hottest = hottest[np.lexsort((hottest, -counts[hottest]))]
    return TableSummary(
        result.scheme,
        result.buckets,
        result.keys,
        result.load_factor,
        occupancy_table(result),
        [(int(b), int(counts[b])) for b in hottest],
        loads.hottest(HOTTEST_SHOWN) if loads is not None else [],
    )


def _version() -> str:
    from hashaudit import __version__

    return __version__
