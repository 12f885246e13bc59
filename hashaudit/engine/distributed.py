"""The Dask engine: the same audit on a cluster, for inputs that outgrow one machine.

The input is cut into partitions that workers read themselves: byte ranges of plain key files split on line
boundaries (a line belongs to the range where it starts), and whole files for the other formats. Four stages:

1. **Read and hash** (one task per partition): keys, their 128-bit fingerprints and every audited hash value, each
   row tagged with its stream position (partition, index) and its weight. Shard loads, the heavy-key summary and
   the key sample are counted here, on every occurrence. Rows are routed by the top bits of their fingerprint into
   ``prefix_parts`` groups.
2. **Tell repeats apart** (one task per fingerprint prefix): a group's rows from every partition, sorted by
   fingerprint and position; loads per bucket count every row (table sizes that follow the key count are known by
   now), and the first occurrence of each key is kept and fed to the same accumulators the local
   engine uses (bucket counts, output bits, full-width collisions, the first values of the simulated tables, shard
   counts). A key and its repeats share a fingerprint, so they always meet in one group.
3. **Merge**: partial states are merged pairwise in a tree (not all on one worker), and the client concludes with
   the local engine's own tests of fit — so the JSON report is the local engine's, apart from run metadata.
The heavy-key summaries of stage 1 are merged before stage 2 starts. When the merged one has cut counts and some
kept key may exceed its floor, stage 2 also counts those keys exactly — it holds every occurrence, grouped by
fingerprint — and the client settles the summary with the sums (``HeavyKeys.settle``), as the local engine does with
a second read; so the heavy-key figures do not depend on the order partial summaries merged in, and the input is
read once.

Where a check needs one machine: the full-width collision values of each hash (4 bytes per distinct key for 32-bit
functions, 8 for 64-bit, 16 for 128-bit) and the values kept for the simulated tables (at most ``AUTO_TABLE_SLOTS`` or
``--table-slots``) are merged on the client. The rows of stage 1 — 24 + 8·h bytes per key read for h hash functions
(8 more with weights) — wait in the workers' memory (Dask spills them to disk when it fills) until stage 2 takes
them, one prefix group per task: about a ``prefix_parts``-th of them at a time.
"""

from __future__ import annotations

import io
import os
import time
from collections.abc import Sequence
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np

from hashaudit.engine.conclude import conclude
from hashaudit.engine.plan import AuditPlan
from hashaudit.engine.state import HashState
from hashaudit.errors import UsageError
from hashaudit.hashes.registry import REGISTRY
from hashaudit.keys.batch import KeyBatch
from hashaudit.keys.options import SourceOptions
from hashaudit.keys.records import SourceStats
from hashaudit.settings import SettingError
from hashaudit.stats.heavy import HeavyCounts
from hashaudit.verdict.result import AuditResult

PARTITION_BYTES = 64 << 20
POSITION_SHIFT = 40  # a row's stream position: partition << 40 | index (up to 10^12 keys per partition)


@dataclass
class _Partition:
    index: int
    source: str
    options: SourceOptions
    start: int | None = None
    end: int | None = None
    row_group: int | None = None


@dataclass
class _Partial:
    """A mergeable piece of an audit: accumulators per hash, and the counts of the keys seen."""

    states: list[HashState]
    sample: Any = None
    heavy: Any = None
    occurrences: int = 0
    distinct: int = 0
    stats: dict[int, SourceStats] = field(default_factory=dict)
    heavy_counts: np.ndarray | None = None  # exact loads of the heavy-key candidates (stage 2)


def plan_partitions(sources: Sequence[str], options: Sequence[SourceOptions], partition_bytes: int) -> list[_Partition]:
    """Byte ranges of plain key files, Parquet row groups, key ranges of database sources with a split column (in
    ascending order, then the NULLs), whole files or queries otherwise; in stream order."""
    from hashaudit.keys.open import compression_for, format_for

    parts: list[_Partition] = []
    for source, opts in zip(sources, options, strict=True):
        if source == "-":
            raise UsageError("the dask engine reads files that every worker can open, not standard input")
        if _is_database(source, opts):
            for key_options in _key_range_options(source, opts):
                parts.append(_Partition(len(parts), source, key_options))
            continue
        plain = (opts.format in ("auto", "lines") and format_for(source) == "lines" and not compression_for(source)
                 and "://" not in source)  # fmt: skip
        size = os.path.getsize(source) if plain and os.path.isfile(source) else None
        fmt = opts.format if opts.format != "auto" else format_for(source)
        if fmt == "parquet" and os.path.isfile(source):
            import pyarrow.parquet as pq

            for group in range(max(1, pq.ParquetFile(source).num_row_groups)):
                parts.append(_Partition(len(parts), source, opts, row_group=group))
            continue
        if not plain or size is None:
            parts.append(_Partition(len(parts), source, opts))
            continue
        for start in range(0, max(size, 1), partition_bytes):
            parts.append(_Partition(len(parts), source, opts, start, min(size, start + partition_bytes)))
    return parts


def _is_database(source: str, opts: SourceOptions) -> bool:
    """Read as a database (the rule of ``KeyStream``): ``--format sql``, or a database name or URL, or a query."""
    from hashaudit.keys.sql import is_database

    if opts.format != "auto":
        return opts.format == "sql"
    return is_database(source) or bool(opts.query or opts.db_table)


def _key_range_options(source: str, opts: SourceOptions) -> list[SourceOptions]:
    """The options of each partition of a database source: one per key range with a split column, else one."""
    from dataclasses import replace

    from hashaudit.keys.sql import plan_key_ranges

    if opts.db_split_column is None:
        return [opts]
    return [replace(opts, key_range=key_range) for key_range in plan_key_ranges(source, opts)]


def _range_bytes(path: str, start: int, end: int) -> bytes:
    """The lines that start in [start, end) of a file."""
    with open(path, "rb") as f:
        if start > 0:
            f.seek(start - 1)
            if f.read(1) != b"\n":
                f.readline()  # the line under way belongs to the previous range
        begin = f.tell()
        if begin >= end:
            return b""
        data = f.read(end - begin)
        if data and not data.endswith(b"\n"):
            data += f.readline()
        return data


def _partition_batches(part: _Partition, stats: SourceStats):  # type: ignore[no-untyped-def]
    """The key batches of one partition, read, normalised and counted as the local reader does."""
    from hashaudit.keys import open_keys
    from hashaudit.keys.columnar import read_columnar
    from hashaudit.keys.encode import Normaliser
    from hashaudit.keys.stream import counted_keys, line_records

    if part.start is None and part.row_group is None:
        stream = open_keys(part.source, part.options)
        yield from stream
        stats.records, stats.keys, stats.empty_keys = stream.stats.records, stream.stats.keys, stream.stats.empty_keys
        stats.skipped, stats.bytes_read = dict(stream.stats.skipped), stream.stats.bytes_read
        return
    o = part.options
    if part.row_group is not None:
        records = read_columnar(part.source, "parquet", o, stats, part.row_group)
        where = "{} row {}"
    else:
        data = _range_bytes(part.source, part.start or 0, part.end or 0)
        stats.bytes_read = (part.end or 0) - (part.start or 0)
        records = line_records(io.BytesIO(data), part.source, o, stats)
        where = "{} line {} of the byte range at " + str(part.start)  # lines counted from the range's start
    limit = o.max_key_bytes if part.row_group is not None else None  # line_records holds lines to it already
    skip = o.on_bad_record == "skip"
    yield from counted_keys(records, Normaliser(o), stats, lambda r: where.format(part.source, r), limit, skip)


def _stage_read(part: _Partition, plan: AuditPlan, pairs: list, bits: int) -> tuple[list, _Partial]:
    """Stage 1: rows routed by fingerprint prefix, and the occurrence-level accumulators of this partition."""
    from hashaudit.engine._malloc import fix_mmap_threshold

    fix_mmap_threshold()  # in each worker process
    from hashaudit.hashes.fingerprint import key_fingerprints_128
    from hashaudit.stats.avalanche import KeySample
    from hashaudit.stats.heavy import HeavyKeys

    specs = plan.subjects(REGISTRY)
    loads = [HashState.build(spec, plan, pairs) for spec in specs]
    for state in loads:  # only the occurrence loads count here: the rest is stage 2's
        state.keep_only("loads")
    groups = plan.groups()
    sample = KeySample(plan.avalanche_keys, plan.seed) if any(g.needs_sample for g in groups) else None
    heavy = HeavyKeys() if any(g.needs_heavy for g in groups) else None
    stats = SourceStats()
    chunks: list[tuple] = []
    index = 0
    for batch in _partition_batches(part, stats):
        prints = key_fingerprints_128(batch)
        values = [spec.hash_batch(batch, plan.seed if spec.seeded else 0) for spec in specs]
        for state, v in zip(loads, values, strict=True):
            state.add_loads(v, batch.weights)
        if sample is not None:
            sample.update(batch)
        if heavy is not None:
            heavy.update(batch, batch.weights)
        positions = (np.int64(part.index) << np.int64(POSITION_SHIFT)) + np.arange(index, index + len(batch))
        chunks.append((prints, positions, values, batch.weights))
        index += len(batch)
    routes: list[list[tuple]] = [[] for _ in range(1 << bits)]
    for prints, positions, values, weights in chunks:
        group = (prints[:, 1] >> np.uint64(64 - bits)).astype(np.int64) if bits else np.zeros(len(prints), np.int64)
        order = np.argsort(group, kind="stable")
        bounds = np.searchsorted(group[order], np.arange((1 << bits) + 1))
        for g in range(1 << bits):
            pick = order[bounds[g] : bounds[g + 1]]
            if len(pick):
                routes[g].append((prints[pick], positions[pick], [v[pick] for v in values],
                                  None if weights is None else weights[pick]))  # fmt: skip
    return routes, _Partial(loads, sample, heavy, index, 0, {part.index: stats})


def _route(result: tuple[list, _Partial], group: int) -> list[tuple]:
    return result[0][group]


def _distinct_in(routed: list[list[tuple]]) -> int:
    """Distinct keys of one fingerprint group (its rows from every partition): the tables' key count."""
    pieces = [piece for rows in routed for piece in rows]
    if not pieces:
        return 0
    return len(np.unique(np.concatenate([p[0] for p in pieces]), axis=0))


def _partial_of(result: tuple[list, _Partial]) -> _Partial:
    return replace(result[1], heavy=None)  # the heavy-key summaries are merged apart, before stage 2


def _heavy_of(result: tuple[list, _Partial]) -> Any:
    return result[1].heavy


def _merge_heavy(a: Any, b: Any) -> Any:
    return a.merge(b)


def _candidate_loads(ordered: np.ndarray, first: np.ndarray, weights: np.ndarray | None, candidates: np.ndarray,
                     order: np.ndarray) -> np.ndarray:  # fmt: skip
    """The load (occurrences, or summed weights) of each candidate fingerprint among the sorted rows ``ordered``,
    whose runs of equal fingerprints start where ``first`` is set."""
    starts = np.flatnonzero(first)
    loads = np.diff(np.append(starts, len(ordered))).astype(np.float64)
    if weights is not None:
        loads = np.add.reduceat(weights[order], starts)
    runs = ordered[starts]
    out = np.zeros(len(candidates), dtype=np.float64)
    index = {(int(lo), int(hi)): j for j, (lo, hi) in enumerate(candidates.tolist())}
    for r in np.flatnonzero(np.isin(runs[:, 1], candidates[:, 1])).tolist():
        j = index.get((int(runs[r, 0]), int(runs[r, 1])))
        if j is not None:
            out[j] = loads[r]
    return out


def _stage_distinct(routed: list[list[tuple]], plan: AuditPlan, pairs: list,
                    candidates: np.ndarray | None = None) -> _Partial:  # fmt: skip
    """Stage 2: the first occurrence of every key of one fingerprint group, fed to the accumulators; and the loads
    of the heavy-key ``candidates`` (128-bit fingerprints, one row each)."""
    specs = plan.subjects(REGISTRY)
    states = [HashState.build(spec, plan, pairs) for spec in specs]
    pieces = [piece for rows in routed for piece in rows]
    none = None if candidates is None else np.zeros(len(candidates), dtype=np.float64)
    if not pieces:
        return _Partial(states, distinct=0, heavy_counts=none)
    prints = np.concatenate([p[0] for p in pieces])
    positions = np.concatenate([p[1] for p in pieces])
    order = np.lexsort((positions, prints[:, 0], prints[:, 1]))
    ordered = prints[order]
    first = np.ones(len(order), dtype=bool)
    first[1:] = np.any(ordered[1:] != ordered[:-1], axis=1)
    keep = np.sort(order[first])  # stream order: the accumulators see keys as the local engine does
    weighted = any(p[3] is not None for p in pieces)
    weights = np.concatenate([p[3] if p[3] is not None else np.ones(len(p[0])) for p in pieces]) if weighted else None
    for h, state in enumerate(states):
        every = np.concatenate([p[2][h] for p in pieces])
        for bucket_load in state.get("bucket_loads"):  # loads per bucket count every occurrence (sizes known now)
            bucket_load.add_load(every, weights)
        state.add_values(every[keep], positions[keep])
    counted = None if candidates is None else _candidate_loads(ordered, first, weights, candidates, order)
    return _Partial(states, distinct=int(first.sum()), heavy_counts=counted)


def _merge(a: _Partial, b: _Partial) -> _Partial:
    """Merge two partial audits (associative and commutative, like every accumulator)."""
    for mine, theirs in zip(a.states, b.states, strict=True):
        mine.merge(theirs)
    if a.sample is None:
        a.sample = b.sample
    elif b.sample is not None:
        a.sample.merge(b.sample)
    if a.heavy is None:
        a.heavy = b.heavy
    elif b.heavy is not None:
        a.heavy.merge(b.heavy)
    if a.heavy_counts is None:
        a.heavy_counts = b.heavy_counts
    elif b.heavy_counts is not None:
        a.heavy_counts = a.heavy_counts + b.heavy_counts
    a.occurrences += b.occurrences
    a.distinct += b.distinct
    a.stats.update(b.stats)
    return a


def _tree_merge(client: Any, futures: list, merge: Any = _merge) -> Any:
    while len(futures) > 1:
        paired = [client.submit(merge, futures[i], futures[i + 1]) for i in range(0, len(futures) - 1, 2)]
        futures = paired + ([futures[-1]] if len(futures) % 2 else [])
    return futures[0]


def audit_dask(
    sources: Sequence[str],
    plan: AuditPlan | None = None,
    options: SourceOptions | Sequence[SourceOptions] | None = None,
    *,
    scheduler: str | None = None,
    workers: int = 2,
    partition_bytes: int = PARTITION_BYTES,
    prefix_bits: int = 4,
    figures: bool = True,
) -> AuditResult:
    """Audit ``sources`` on a Dask cluster (``scheduler``: its address; None starts a local cluster of ``workers``
    processes). Same plan, same result as :func:`hashaudit.engine.sources.audit` (see the module notes)."""
    from distributed import Client, LocalCluster

    from hashaudit.engine.sources import _per_source
    from hashaudit.keys import open_keys

    plan = plan or AuditPlan()
    if not sources:
        raise UsageError("no source given")
    per_source = _per_source(options, len(sources))
    if not plan.distinct:
        raise SettingError("all_keys", "runs on the local engine (the dask engine tells distinct keys apart)")
    started = time.perf_counter()
    located = [_located(str(s)) for s in sources]  # workers elsewhere open files by their absolute path
    parts = plan_partitions(located, per_source, partition_bytes)
    descriptions = [open_keys(s, o).description for s, o in zip(sources, per_source, strict=True)]
    cluster = None if scheduler else LocalCluster(n_workers=workers, threads_per_worker=1, processes=True)
    client = Client(scheduler or cluster)
    try:
        first = [client.submit(_stage_read, part, plan, [], prefix_bits, pure=False) for part in parts]
        occurrences = sum(client.gather([client.submit(lambda r: r[1].occurrences, f) for f in first]))
        if occurrences == 0:
            raise UsageError("no keys to audit")
        pairs = plan.tables(None) if not plan.needs_key_count() else []
        if plan.needs_key_count():  # automatic sizes follow the distinct keys, known once the rows are routed
            counts = [
                client.submit(_distinct_in, [client.submit(_route, f, g) for f in first], pure=False)
                for g in range(1 << prefix_bits)
            ]
            pairs = plan.tables(sum(client.gather(counts)))
        heavy = None
        if any(g.needs_heavy for g in plan.groups()):
            heavy = _tree_merge(client, [client.submit(_heavy_of, f) for f in first], _merge_heavy).result()
        candidates = _heavy_candidates(heavy)
        groups = [
            client.submit(
                _stage_distinct, [client.submit(_route, f, g) for f in first], plan, pairs, candidates, pure=False
            )  # fmt: skip
            for g in range(1 << prefix_bits)
        ]
        partials = [client.submit(_partial_of, f) for f in first]
        total = _tree_merge(client, groups + partials).result()
        if heavy is not None and not heavy.exact:
            heavy.settle(HeavyCounts(heavy, total.heavy_counts))
    finally:
        client.close()
        if cluster is not None:
            cluster.close()
    stats = [total.stats[p.index] for p in parts]
    described = []
    for source, description in zip(located, descriptions, strict=True):
        mine = [s for p, s in zip(parts, stats, strict=True) if p.source == source]
        combined = {
            "records": sum(s.records for s in mine),
            "keys": sum(s.keys for s in mine),
            "empty_keys": sum(s.empty_keys for s in mine),
            "skipped": _add_skipped(mine),
            "bytes_read": sum(s.bytes_read for s in mine),
        }
        described.append({**description, "stats": combined})
    result = conclude(
        total.states,
        plan,
        keys=total.distinct,
        occurrences=total.occurrences,
        tables=pairs,
        sources=tuple(described),
        started=started,
        hash_seconds=dict.fromkeys(plan.hashes, 0.0),
        sample=total.sample,
        heavy=heavy,
        figures=figures,
    )
    result.run["engine"] = "dask"
    result.run["partitions"] = len(parts)
    return result


def _heavy_candidates(heavy: Any) -> np.ndarray | None:
    """The 128-bit fingerprints of the keys whose exact loads settle ``heavy`` (None when it needs none), one row
    per key in the summary's order."""
    if heavy is None or heavy.exact or not heavy.prune():
        return None
    from hashaudit.hashes.fingerprint import key_fingerprints_128

    return key_fingerprints_128(KeyBatch.from_keys([heavy.keys_[int(p)] for p in heavy.prints_]))


def _located(source: str) -> str:
    """A local file's absolute path (a worker's working directory is not the client's); other sources as given."""
    if source == "-" or "://" in source or not os.path.exists(source):
        return source
    return os.path.abspath(source)


def _add_skipped(stats: list[SourceStats]) -> dict[str, int]:
    out: dict[str, int] = {}
    for s in stats:
        for reason, count in s.skipped.items():
            out[reason] = out.get(reason, 0) + count
    return dict(sorted(out.items()))
