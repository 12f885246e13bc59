"""The conclusion step, shared by every engine: merged accumulators in, an ``AuditResult`` out.

Each running check group concludes for each hash function (its tests of fit), in registry order; every test of
the audit is one Holm family (``hashaudit.checks.judge``); then come the groups' facts (repeated keys, hot keys)
and the table summaries. Nothing here names a check.
"""

from __future__ import annotations

import contextlib
import platform
import sys
import time
from collections.abc import Callable, Generator, Sequence
from concurrent.futures import ThreadPoolExecutor
from typing import Any

import numpy as np

from hashaudit.checks import Conclusion, judge
from hashaudit.engine.state import HashState
from hashaudit.verdict.findings import worst_verdict
from hashaudit.verdict.result import AuditResult, HashAudit, TableSummary

HOTTEST_SHOWN = 5
CURVE_MIN_SAMPLE = 64  # keys of the sample below which the no-collision curve says nothing


def conclude(
    states: list[HashState],
    plan: Any,
    *,
    keys: int,
    occurrences: int,
    tables: list[tuple[str, int]],
    sources: Sequence[dict] = (),
    started: float | None = None,
    hash_seconds: dict[str, float] | None = None,
    sample: Any = None,
    heavy: Any = None,
    passes: int = 1,
    figures: bool = True,
    phase: Callable[[str], None] | None = None,
    workers: int = 1,
) -> AuditResult:
    """Turn merged accumulators into the audit's result.

    Parameters
    ----------
    states : list of HashState
        One per hash function, in the plan's order, with every partial count merged.
    plan : AuditPlan
    keys, occurrences : int
        Keys the checks counted and occurrences read.
    tables : list of (str, int)
        The (scheme, buckets) tables counted.
    sources : sequence of dict
        Source descriptions for the report.
    started : float, optional
        ``time.perf_counter()`` at the start, for the run's seconds.
    hash_seconds : dict, optional
        Seconds spent hashing, per function.
    sample : KeySample, optional
    heavy : HeavyKeys, optional
    passes : int
        Reads of the input.
    figures : bool
        Compute the data of the HTML page's figures (``AuditResult.plots``): the no-collision curve (a subsample
        simulation) and the flip matrices. Without it nothing is drawn and the JSON is the same.
    phase : callable, optional
        Told the step under way (``"avalanche checks of xxh3_64"``) before each one, for a progress line.
    workers : int
        Threads that conclude check groups at the same time (each group of each hash is one task; the kernels
        release the GIL). The result does not depend on it: tests, findings and figures are gathered in order.
    """
    cut = 0
    whole_sample = sample.keys() if sample is not None else None  # the input's key lengths, for the kernel timings
    if sample is not None:
        sample, cut = sample.cut_long_keys()
    ctx = Conclusion(plan, states, tables, keys, occurrences, sample, heavy, figures=figures)
    family: list[tuple[str, str | None, int | None, int, Any]] = []
    concluding = [[group for group in state.groups if group.conclude is not None] for state in states]
    units = [(state, group) for state, groups in zip(states, concluding, strict=True) for group in groups]
    with contextlib.closing(_conclude_groups(ctx, units, workers, phase)) as concluded:
        for state, groups in zip(states, concluding, strict=True):
            for _ in groups:
                plots, tested = next(concluded)
                family += tested
                for hash_name, named in plots.items():  # in the groups' order, whichever thread finished first
                    ctx.plots.setdefault(hash_name, {}).update(named)
            if figures and sample is not None and len(sample) >= CURVE_MIN_SAMPLE and state.spec.path != "placement":
                if phase is not None:
                    phase(f"the no-collision curve of {state.spec.name} for the page")
                from hashaudit.stats.curves import no_collision_curve

                spec = state.spec
                curve = no_collision_curve(
                    spec.hash_batch, spec.width, sample.keys(), tables, plan.seed, plan.seed if spec.seeded else 0
                )
                ctx.plot(spec.name, "no_collision", curve)
    findings = judge(family, plan.thresholds)
    for group in plan.groups():
        if group.facts is not None:
            if phase is not None:
                phase(f"{group.name} facts")
            findings += group.facts(ctx)
    hash_audits = []
    summaries_of = _table_summaries(states, workers)
    for state, summaries in zip(states, summaries_of, strict=True):
        own = tuple(f for f in findings if f.hash_name == state.spec.name)
        spec = state.spec
        verdict = worst_verdict([f.verdict for f in own])
        hash_audits.append(HashAudit(spec.name, spec.width, spec.seeded, plan.seed, spec.path, verdict, own, summaries))
    overall = "fail" if any(h.verdict == "fail" for h in hash_audits) else "pass"
    candidates = [state.spec for state in states if state.spec.path != "placement"]
    speeds: dict = {}
    if len(candidates) >= 2 and whole_sample is not None:  # the ranking of candidates compares their kernels' speed
        if phase is not None:
            phase("timing the hash kernels on the sampled keys")
        from hashaudit.verdict.ranking import measure_speeds

        speeds = measure_speeds(candidates, whole_sample, plan.seed)
    seconds = time.perf_counter() - (started if started is not None else time.perf_counter())
    run = {
        "hashaudit_version": _version(),
        "python": platform.python_version(),
        "numpy": np.__version__,
        "seconds": round(seconds, 3),
        # records read per second (every occurrence, whatever the checks counted); the distinct keys are in summary
        "records_per_second": round(occurrences / seconds) if seconds > 0 else None,
        "hash_seconds": {k: round(v, 3) for k, v in (hash_seconds or {}).items()},
        **({"hash_speed": speeds} if speeds else {}),
        # reads of the input: more when the distinct keys outgrew distinct_memory or to settle the heavy keys
        "passes": passes,
        "platform": sys.platform,
        "peak_memory_bytes": _peak_memory(),
    }
    settings = plan.settings_block()
    return AuditResult(
        overall, keys, tuple(hash_audits), tuple(sources), settings, run, occurrences, ctx.plots, tuple(tables), cut
    )


def _conclude_groups(
    ctx: Conclusion, units: list[tuple[Any, Any]], workers: int, phase: Callable[[str], None] | None
) -> Generator[tuple[dict, list], None, None]:
    """The figure data and tests of each (state, group) of ``units``, in that order, concluded on up to ``workers``
    threads. A failure is raised here, in the unit's turn; the units not started by then are dropped."""

    def run(state: Any, group: Any) -> tuple[dict, list]:
        view = ctx.for_one_group()
        tested = [(state.spec.name, *t) for t in group.conclude(view, state)]
        return view.plots, tested

    if workers <= 1 or len(units) <= 1:
        for state, group in units:
            if phase is not None:
                phase(f"{group.name} checks of {state.spec.name}")
            yield run(state, group)
        return
    pool = ThreadPoolExecutor(max_workers=min(workers, len(units)), thread_name_prefix="hashaudit-conclude")
    try:
        futures = [pool.submit(run, state, group) for state, group in units]
        for (state, group), future in zip(units, futures, strict=True):
            if phase is not None:
                phase(f"{group.name} checks of {state.spec.name}")
            yield future.result()
    finally:
        # on an error, a signal or Ctrl-C: the groups under way finish, the others never start
        pool.shutdown(wait=False, cancel_futures=True)


def _table_summaries(states: list[HashState], workers: int) -> list[tuple[TableSummary, ...]]:
    """The summary of every table of every state (in order), made on up to ``workers`` threads: each one reads a
    table's counts once more (numpy lets go of the GIL for that), and a run with many large tables spent a
    noticeable part of its end on them one after the other."""
    jobs = [(table, state.get("bucket_loads")) for state in states for table in state.get("tables")]
    if workers <= 1 or len(jobs) <= 1:
        made = [_summary(table, loads) for table, loads in jobs]
    else:
        with ThreadPoolExecutor(max_workers=min(workers, len(jobs)), thread_name_prefix="hashaudit-summary") as pool:
            made = list(pool.map(lambda job: _summary(*job), jobs))
    in_order = iter(made)
    return [tuple(next(in_order) for _ in state.get("tables")) for state in states]


def _summary(table: Any, loads: list[Any]) -> TableSummary:
    from hashaudit.stats.fit import occupancy_table

    result = table.result()
    counts = result.counts
    occupied = np.flatnonzero(counts)  # the hottest buckets are among the occupied ones (at most n of them)
    top = min(HOTTEST_SHOWN, len(occupied))
    # result.occupied is counts[occupied], in the same order (made once, shared with the occupancy table)
    hottest = occupied[np.argpartition(result.occupied, -top)[-top:]] if top else occupied
    hottest = hottest[np.lexsort((hottest, -counts[hottest]))]
    load = next((b for b in loads if (b.scheme, b.buckets) == (result.scheme, result.buckets)), None)
    return TableSummary(
        result.scheme,
        result.buckets,
        result.keys,
        result.load_factor,
        occupancy_table(result),
        [(int(b), int(counts[b])) for b in hottest],
        load.hottest(HOTTEST_SHOWN) if load is not None else [],
    )


def _peak_memory() -> int | None:
    """The process's largest resident set so far, in bytes (None where the system does not say)."""
    try:
        import resource
    except ImportError:  # pragma: no cover - not on Windows
        return None
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    return int(peak) * (1 if sys.platform == "darwin" else 1024)  # bytes on macOS, KiB elsewhere


def _version() -> str:
    from hashaudit import __version__

    return __version__
