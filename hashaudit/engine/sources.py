"""Audit keys read from files or standard input: open the sources, count keys first when table sizes depend
on the count, then stream every batch through the local engine."""

from __future__ import annotations

import dataclasses
import itertools
import os
from collections.abc import Callable, Iterator, Sequence
from typing import Any

from hashaudit.engine.plan import AuditPlan
from hashaudit.engine.runner import audit_batches
from hashaudit.errors import InputError, UsageError
from hashaudit.keys import open_keys
from hashaudit.keys.batch import KeyBatch
from hashaudit.keys.options import SourceOptions
from hashaudit.keys.sql import is_database
from hashaudit.verdict.result import AuditResult


def audit(
    sources: Sequence[str | os.PathLike],
    plan: AuditPlan | None = None,
    options: SourceOptions | Sequence[SourceOptions] | None = None,
    *,
    progress: Callable[[int], None] | None = None,
    threads: int = 0,
    show_keys: bool = False,
    figures: bool = True,
) -> AuditResult:
    """Audit the keys of one or more sources (files, or ``"-"`` for standard input).

    Parameters
    ----------
    sources : sequence of path
        Key files; ``"-"`` reads standard input. Several sources are audited as one key set.
    plan : AuditPlan, optional
        Hash functions, table sizes, schemes, seed and thresholds (defaults when omitted).
    options : SourceOptions or sequence of SourceOptions, optional
        How records become keys: one for every source, or one per source.
    progress : callable, optional
        Called with the number of keys of each batch.
    threads : int
        Hashing threads; 0 = one per core.
    show_keys : bool
        Read the input a second time to name up to five keys of each reported full-width collision group. Keys
        appear in no report otherwise.
    figures : bool
        Compute the data of the HTML page's figures (``hashaudit.engine.runner.audit_batches``).

    Returns
    -------
    AuditResult
    """
    plan = plan or AuditPlan()
    if not sources:
        raise UsageError("no source given")
    per_source = _per_source(options, len(sources))
    keys = None
    if plan.needs_key_count():
        for s in sources:
            if str(s) == "-" or (os.path.exists(s) and not os.path.isfile(s)):
                what = "standard input" if str(s) == "-" else f"{str(s)!r}, which is not a regular file"
                raise UsageError(
                    f"reading {what}: give --buckets (table sizes are otherwise derived from the key count, "
                    "which needs a first pass over the input)"
                )
    files = [str(s) for s in sources if str(s) != "-" and os.path.isfile(s)]
    stamps = {f: _stamp(f) for f in files}  # each pass must read the same files: checked before every re-read
    streams = [open_keys(s, o) for s, o in zip(sources, per_source, strict=True)]
    attach = getattr(progress, "attach", None)
    if attach is not None:
        attach(streams)
    estimate = _line_estimate(streams)
    batches: Iterator[KeyBatch] = itertools.chain.from_iterable(streams)
    if plan.needs_key_count():
        total_bytes = sum(stream.size_bytes or 0 for stream in streams)
        if estimate is not None and total_bytes > EXACT_COUNT_BYTES:
            # Large plain key files: the sizes only need the count to the nearest power of two, so estimate it
            # from the file size and the first batch instead of reading everything twice.
            first = next(batches, None)
            if first is not None:
                keys = estimate(first)
                batches = itertools.chain([first], batches)
        if keys is None:
            keys = _count_keys(sources, per_source, plan)

    # files, and database queries (run again: on a database that changes meanwhile, audit a snapshot)
    readable_again = all(str(s) != "-" and (os.path.isfile(s) or is_database(str(s))) for s in sources)

    def reopen() -> Iterator[KeyBatch]:
        _check_unchanged(stamps)
        streams[:] = [open_keys(s, o) for s, o in zip(sources, per_source, strict=True)]  # the last complete read
        return itertools.chain.from_iterable(streams)

    result = audit_batches(
        batches,
        plan,
        keys=keys,
        progress=progress,
        threads=threads,
        key_estimate=estimate,
        reopen=reopen if readable_again else None,
        figures=figures,
    )
    if keys is not None and readable_again and _sizes_differ(plan, keys, result.keys):
        # The sizes came from an estimate of the lines, and the distinct keys (what the tables hold) are fewer
        # or more than it by enough to change them: audit again with tables sized for the keys there are.
        passes = result.run.get("passes", 1)
        keys = result.keys
        phase = getattr(progress, "phase", None)
        if phase is not None:
            phase(f"reading the input again with tables sized for {keys:,} distinct keys")
        result = audit_batches(
            reopen(),
            plan,
            keys=keys,
            progress=progress,
            threads=threads,
            key_estimate=estimate,
            reopen=reopen,
            figures=figures,
        )
        result = dataclasses.replace(result, run={**result.run, "passes": result.run.get("passes", 1) + passes})
    if result.run.get("passes", 1) > 1 or keys is not None:
        _check_unchanged(stamps)  # a change during the last of several reads
    described = tuple({**stream.description, "stats": _stats_dict(stream.stats)} for stream in streams)
    final = dataclasses.replace(result, sources=described)
    if show_keys:
        from hashaudit.engine.showkeys import attach_colliding_keys

        if getattr(progress, "phase", None) is not None:
            progress.phase("reading the input again to name the keys (--show-keys)")  # type: ignore[union-attr]

        attach_colliding_keys(final, sources, per_source, plan.seed)
    return final


def _count_keys(sources: Sequence[str | os.PathLike], per_source: list[SourceOptions], plan: AuditPlan) -> int:
    """The keys the tables will hold, counted in a first read: distinct keys unless every occurrence counts (a
    key repeated 50 times must not size the tables for 50 keys). Occurrences when the distinct keys outgrow
    their memory."""
    batches = (b for s, o in zip(sources, per_source, strict=True) for b in open_keys(s, o))
    if not plan.distinct:
        return sum(len(b) for b in batches)
    from hashaudit.stats.distinct import DistinctBudgetError, DistinctKeys

    seen = DistinctKeys(plan.distinct_memory)
    occurrences = 0
    try:
        for batch in batches:
            occurrences += len(batch)
            seen.update(batch)
    except DistinctBudgetError:
        return occurrences + sum(len(b) for b in batches)
    return seen.distinct_


def _sizes_differ(plan: AuditPlan, assumed: int, counted: int) -> bool:
    """Whether automatic table sizes for ``counted`` keys differ from those used for ``assumed``."""
    return plan.needs_key_count() and plan.tables(assumed) != plan.tables(counted)


def _stamp(path: str) -> tuple[int, int, int]:
    info = os.stat(path)
    return info.st_size, info.st_mtime_ns, info.st_ino


def _check_unchanged(stamps: dict[str, tuple[int, int, int]]) -> None:
    """Refuse to go on when a file read in several passes changed between them (each pass must see the same keys)."""
    for path, stamp in stamps.items():
        try:
            now = _stamp(path)
        except OSError:
            now = None
        if now != stamp:
            raise InputError(
                f"{path!r} changed while it was being read (size, modification time or file): the passes over it "
                "would not count the same keys; audit a copy that does not change"
            )


def _per_source(options: SourceOptions | Sequence[SourceOptions] | None, count: int) -> list[SourceOptions]:
    if options is None or isinstance(options, SourceOptions):
        return [options or SourceOptions()] * count
    listed = list(options)
    if len(listed) != count:
        raise UsageError(f"{len(listed)} source options for {count} sources")
    return listed


EXACT_COUNT_BYTES = 64 << 20  # below this, table sizes come from an exact count (a cheap first pass)


def _line_estimate(streams: list) -> Callable[[KeyBatch], int | None] | None:
    """For uncompressed files of one key per line: keys ≈ file bytes / bytes per line of the first batch."""
    sizes = [s.size_bytes for s in streams]
    plain = all(s.description.get("format") == "lines" and not s.description.get("compression") for s in streams)
    if not plain or any(size is None for size in sizes):
        return None
    total = sum(sizes)

    def estimate(first: KeyBatch) -> int | None:
        per_line = (first.nbytes + len(first)) / max(len(first), 1)
        return int(total / per_line) if per_line > 0 else None

    return estimate


def _stats_dict(stats: object) -> dict:
    from dataclasses import asdict, is_dataclass

    return asdict(stats) if is_dataclass(stats) and not isinstance(stats, type) else dict(vars(stats))


def measure_keys(sources: Sequence[str], hash_name: str, seed: int, options: SourceOptions) -> tuple[int, Any, int]:
    """Distinct keys of the sources, the values under ``hash_name`` of the first ``PLAN_VALUES`` of them (the
    low 64 bits), and the hash's width: what ``hashaudit plan`` simulates a recommended table with."""
    import numpy as np

    from hashaudit.hashes.registry import REGISTRY
    from hashaudit.stats.distinct import DistinctKeys

    spec = REGISTRY.get(hash_name)
    store = DistinctKeys()
    kept: list[np.ndarray] = []
    held = 0
    for source in sources:
        for batch in open_keys(source, options):
            first = store.update(batch)
            if held < PLAN_VALUES:
                values = spec.hash_batch(batch, seed if spec.seeded else 0)[first]
                values = values[:, 0] if values.ndim == 2 else values
                kept.append(values[: PLAN_VALUES - held])
                held += len(kept[-1])
    if store.distinct_ == 0:
        raise UsageError("no keys to plan for")
    return store.distinct_, np.concatenate(kept), spec.width


PLAN_VALUES = 1 << 22
