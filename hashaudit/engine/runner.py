"""The local engine's runner: one pass over the key batches (or one per part of the fingerprint space when the
distinct keys outgrow their memory), every requested hash computed once per batch on hashing lanes (threads),
every accumulator of that hash fed from the same ``uint64`` array, and the heavy keys settled by a second read.
The conclusion is ``hashaudit.engine.conclude``'s, shared with the Dask engine."""

from __future__ import annotations

import importlib
import itertools
import math
import os
import threading
import time
from collections.abc import Callable, Iterable, Sequence
from concurrent.futures import ThreadPoolExecutor

import numpy as np

from hashaudit.engine._malloc import fix_mmap_threshold
from hashaudit.engine.conclude import conclude
from hashaudit.engine.memory import meminfo
from hashaudit.engine.plan import AuditPlan
from hashaudit.engine.prefetch import prefetch
from hashaudit.engine.state import HashState
from hashaudit.errors import UsageError
from hashaudit.hashes.registry import REGISTRY, HashRegistry
from hashaudit.keys.batch import KeyBatch
from hashaudit.settings import SettingError
from hashaudit.stats.distinct import BYTES_PER_DISTINCT, DistinctBudgetError, DistinctKeys
from hashaudit.stats.heavy import HeavyCounts, HeavyKeys
from hashaudit.stats.sample import KeySample
from hashaudit.verdict.result import AuditResult

LANE_COPY_BYTES = 256 << 20  # largest table memory a hashing thread may copy for itself
MAX_PARTS = 1 << 12


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
    figures: bool = True,
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
    figures : bool
        Compute the data of the HTML page's figures (``AuditResult.plots``); the JSON does not depend on it.
    """
    started = time.perf_counter()
    # The statistics need scipy, which takes a while to import: load it while the keys stream through.
    threading.Thread(target=_import_quietly, args=("hashaudit.stats.fit",), daemon=True).start()
    specs = plan.subjects(registry)
    pairs = plan.tables(keys)
    fix_mmap_threshold()
    phase = getattr(progress, "phase", None)  # a progress line that can also name the phases after the reading
    lanes = _lane_count(threads, len(specs))
    count_bytes = 4 * sum(m for _, m in pairs)  # one uint32 per bucket per table, for one hash
    _check_memory(count_bytes * len(specs), pairs)
    for group in plan.groups():  # what the widths and sizes alone refuse is said before reading
        if group.before_read is not None:
            group.before_read(plan, [spec.width for spec in specs], pairs)
    # With several hashes, each lane owns some of them; with one, lanes split each batch and own a copy of
    # the tables, merged at the end (merging counts is exact, so the result is bit-identical to one lane).
    # Copies are only made while they are small.
    if len(specs) < lanes and count_bytes > LANE_COPY_BYTES:
        lanes = max(1, len(specs))
    split_keys = len(specs) < lanes

    def fresh_states() -> list[list[HashState]]:
        return [
            [
                HashState.build(spec, plan, pairs, lanes if split_keys else 1)
                for i, spec in enumerate(specs)
                if split_keys or i % lanes == lane
            ]
            for lane in range(lanes)
        ]

    lane_states = fresh_states()
    hash_seconds = {spec.name: 0.0 for spec in specs}

    def work(lane: int, batch: KeyBatch, first: np.ndarray | None, offset: int) -> None:
        positions = None  # made once per batch, for every state that wants them (none changes them)
        for state in lane_states[lane]:
            t0 = time.perf_counter()
            values = state.spec.hash_batch(batch, plan.seed if state.spec.seeded else 0)
            if loading[0]:  # every occurrence, once (in the first pass over the input)
                state.add_loads(values, batch.weights)
            if first is not None:
                values = values[first]
            wanted = state.wants("positions")
            if wanted and positions is None:
                positions = _positions(first, len(batch), offset)
            state.add_values(values, positions if wanted else None)
            hash_seconds[state.spec.name] += time.perf_counter() - t0

    loading = [True]
    groups = plan.groups()
    heavy = HeavyKeys() if any(g.needs_heavy for g in groups) else None
    counting: list[HeavyCounts | None] = [None]  # the heavy keys' exact counts, taken in a second read
    extra_reads = 0
    wants_sample = any(g.needs_sample for g in groups)
    sample = KeySample(plan.avalanche_keys, plan.seed) if wants_sample else None
    pool = ThreadPoolExecutor(max_workers=lanes - 1, thread_name_prefix="hashaudit-hash") if lanes > 1 else None
    estimated: list[int | None] = [keys]

    def one_pass(stream: Iterable[KeyBatch], distinct: DistinctKeys | None, sampling: bool) -> int:
        """Feed every batch of ``stream`` to the accumulators (only first occurrences when ``distinct`` is given,
        and among them only the keys of its part); returns the number of keys read."""
        read = 0
        loading[0] = sampling
        # the fingerprints that tell repeats apart are taken on the reading thread, beside the reading itself,
        # while this thread inserts the previous batch's
        printed: Iterable[tuple[KeyBatch, np.ndarray | None]] = (
            ((b, distinct.fingerprint(b) if len(b) else None) for b in stream)
            if distinct is not None
            else ((b, None) for b in stream)
        )
        for batch, prints in prefetch(printed) if read_ahead else printed:
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
            first = distinct.update(batch, prints) if distinct is not None else None
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
                    if part and phase is not None:
                        phase(f"reading the input again for part {part + 1} of {parts} of the distinct keys")
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
                        state.close()
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
            if phase is not None:
                phase("counting the heaviest keys exactly (another read of the input)")
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
    if phase is not None:
        phase("concluding")
    return conclude(
        states,
        plan,
        keys=total,
        occurrences=occurrences,
        tables=pairs,
        sources=sources,
        started=started,
        hash_seconds=hash_seconds,
        sample=sample,
        heavy=heavy,
        passes=parts + extra_reads,
        figures=figures,
        phase=phase,
        workers=_lane_count(threads, len(specs)),
    )


def _positions(first: np.ndarray | None, keys: int, offset: int) -> np.ndarray:
    """Stream positions of a batch's counted keys (its first occurrences, or all ``keys`` of it), in one array."""
    if first is None:
        return np.arange(offset, offset + keys, dtype=np.int64)
    positions = np.flatnonzero(first).astype(np.int64, copy=False)
    positions += offset
    return positions


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
    return meminfo("MemAvailable")


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
        raise SettingError("threads", f"must be 0 (automatic) or more, not {threads}")
    if threads == 0:
        threads = min(os.cpu_count() or 1, 8)
    return max(1, threads)


def _merge_lanes(lane_states: list[list[HashState]]) -> list[HashState]:
    merged = lane_states[0]
    for other in lane_states[1:]:
        for mine, theirs in zip(merged, other, strict=True):
            mine.merge(theirs)
    return merged
