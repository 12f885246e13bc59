"""Choosing among candidate hash functions: one ranking row per hash function of an audit, best first.

A row holds what the audit found for the function — its verdict, its worst significant operational cost and the
check groups in which it failed — and how fast its kernel hashed the sampled keys of this input. Speeds are
measurements of the machine at hand, not results of the audit: :func:`measure_speeds` times the kernels at the
conclusion (the engines' own ``hash_seconds`` also count feeding the accumulators), the timings go in the report's
``run`` block and only break ties of the deterministic order.

The order: ``pass`` before ``warn`` before ``fail`` (``info`` counts as a pass: more even than random); then the
extra probes per lookup, then the hottest bucket or shard over its expected load, fewest first; then the fastest
kernel; then the order in which the functions were asked for. A cost counts only when a check found it
significant (a finding that failed or warned): an excess no check could tell from chance is no cost, so that two
clean candidates are told apart by speed, not by noise.
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass
from typing import Any

from hashaudit.verdict.findings import Finding

PROBE_EFFECTS = frozenset({"lookup_cost_excess", "probe_cost_excess"})
"""Effects whose observed and ideal values are probes per lookup."""
PROBE_GROUPS = ("buckets", "tables", "growth")
"""The check groups whose lookup costs are measured on tables filled with the audited keys themselves (the
neighbour and seed checks measure derived keys and other seeds; they still count among the failing groups)."""
HOTTEST_EFFECTS = {"max_load_ratio": "value", "shard_imbalance": "observed"}
"""Effects that say how much the hottest bucket or shard holds against what it should, and which of the effect's
fields is that ratio (``max_load``: the hottest bucket over the expected maximum; ``shard_balance``: the hottest
shard's keys over its expected share)."""
SIGNIFICANT = ("fail", "warn")
RANK_OF_VERDICT = {"pass": 0, "info": 0, "warn": 1, "fail": 2}

SPEED_SECONDS = 0.01
"""A timing round repeats the kernel over the sampled keys until at least this long."""
SPEED_ROUNDS = 3
"""Timing rounds per kernel; the fastest counts (the others were slowed by something else)."""
SPEED_BATCH_KEYS = 1 << 16
"""A vectorised kernel is timed on the sample repeated up to this many keys, so that one call's fixed cost (the
dispatch, the output array) weighs per key as little as in an audit's batches."""
SPEED_BATCH_BYTES = 8 << 20
"""…and up to this many bytes, so that a sample of very long keys is not copied into a large buffer."""
SPEED_NOTE = (
    "the audit's own kernels timed alone on the sampled keys, on this machine; a production implementation's "
    "speed may differ"
)


@dataclass(frozen=True)
class Cost:
    """The worst significant cost of one kind for one hash function, with the finding it comes from.

    Attributes
    ----------
    value : float
        Extra probes per lookup (observed minus ideal), or the hottest bucket's or shard's ratio to its expected
        load.
    observed, ideal : float
        The finding's operational quantity for these keys and for an ideal hash.
    check, table : str
        The check and the table (``linear mask 2^16 at load 0.9``, ``mod 8 shards``) it was measured on.
    verdict : str
        The finding's verdict (``fail`` or ``warn``).
    """

    value: float
    observed: float
    ideal: float
    check: str
    table: str
    verdict: str

    def to_dict(self) -> dict:
        """JSON-able form."""
        return {
            "value": self.value,
            "observed": self.observed,
            "ideal": self.ideal,
            "check": self.check,
            "table": self.table,
            "verdict": self.verdict,
        }


@dataclass(frozen=True)
class Speed:
    """How fast one hash function's kernel hashed the sampled keys.

    Attributes
    ----------
    keys_per_second : float
    ns_per_key : float
        The fastest of :data:`SPEED_ROUNDS` rounds.
    bytes_per_second : float
        The same, in key bytes.
    """

    keys_per_second: float
    ns_per_key: float
    bytes_per_second: float

    def to_dict(self) -> dict:
        """JSON-able form (rounded: a timing has no more digits than that)."""
        return {
            "keys_per_second": round(self.keys_per_second),
            "ns_per_key": round(self.ns_per_key, 3),
            "bytes_per_second": round(self.bytes_per_second),
        }


@dataclass(frozen=True)
class RankingRow:
    """One hash function of the ranking.

    Attributes
    ----------
    hash_name, verdict : str
    extra_probes : Cost or None
        The most extra probes per lookup that a check found significant; None when none did.
    probes_checked : bool
        Whether any check measured lookup costs on the audited keys (else the cost is unknown, not absent).
    hottest : Cost or None
        The largest significant ratio of the hottest bucket or shard to its expected load; None when none.
    hottest_checked : bool
        Whether any check measured a hottest bucket or shard.
    failing_groups : tuple of str
        The check groups with at least one failing check, in registry order.
    speed : Speed or None
        Measured on the sampled keys; None when the audit kept no key sample.
    """

    hash_name: str
    verdict: str
    extra_probes: Cost | None
    probes_checked: bool
    hottest: Cost | None
    hottest_checked: bool
    failing_groups: tuple[str, ...]
    speed: Speed | None = None

    def deterministic_key(self) -> tuple:
        """What orders the rows before speed: verdict, extra probes, hottest ratio (fewer and smaller first)."""
        return (
            RANK_OF_VERDICT.get(self.verdict, 2),
            self.extra_probes.value if self.extra_probes is not None else 0.0,
            self.hottest.value if self.hottest is not None else 1.0,
        )

    def to_dict(self) -> dict:
        """The deterministic part, for the report's ``ranking`` (the speed goes in ``run.hash_speed``)."""
        return {
            "hash": self.hash_name,
            "verdict": self.verdict,
            "extra_probes": self.extra_probes.to_dict() if self.extra_probes is not None else None,
            "probes_checked": self.probes_checked,
            "hottest": self.hottest.to_dict() if self.hottest is not None else None,
            "hottest_checked": self.hottest_checked,
            "failing_groups": list(self.failing_groups),
        }


def _label(finding: Finding) -> str:
    load = finding.details.get("load")
    return f"{finding.table} at load {load:g}" if isinstance(load, int | float) else finding.table


def _worst(findings: Iterable[Finding], value: Callable[[Finding], float]) -> Cost | None:
    """The significant finding with the largest ``value``, as a cost (None when no finding is significant)."""
    significant = [f for f in findings if f.verdict in SIGNIFICANT and math.isfinite(value(f))]
    if not significant:
        return None
    worst = max(significant, key=value)  # the first of equal ones: findings are in a fixed order
    return Cost(value(worst), worst.effect.observed, worst.effect.ideal, worst.check, _label(worst), worst.verdict)


def rank_row(audit: Any, group_of: dict[str, str], speed: Speed | None = None) -> RankingRow:
    """The ranking row of one hash function's audit (a ``HashAudit``); ``group_of`` maps checks to groups."""
    probes = [f for f in audit.findings if f.effect.name in PROBE_EFFECTS and group_of.get(f.check) in PROBE_GROUPS]
    hottest = [f for f in audit.findings if f.effect.name in HOTTEST_EFFECTS]
    failing = {group_of.get(f.check, f.check) for f in audit.findings if f.verdict == "fail"}
    order = list(dict.fromkeys(group_of.values()))
    return RankingRow(
        audit.name,
        audit.verdict,
        _worst(probes, lambda f: f.effect.observed - f.effect.ideal),
        bool(probes),
        _worst(hottest, lambda f: float(getattr(f.effect, HOTTEST_EFFECTS[f.effect.name]))),
        bool(hottest),
        tuple(sorted(failing, key=lambda g: order.index(g) if g in order else len(order))),
        speed,
    )


def rank(hashes: Sequence[Any], speeds: dict[str, Speed] | None = None) -> list[RankingRow]:
    """The ranking of the hash functions of an audit, best first (see the module's docstring for the order).

    Parameters
    ----------
    hashes : sequence of HashAudit
        The audit's subjects; system placements are left out (they are not candidates).
    speeds : dict of str to Speed, optional
        Measured kernel speeds by hash name (:func:`measure_speeds`), breaking ties of the deterministic order.

    Returns
    -------
    list of RankingRow
        Empty when fewer than two hash functions were audited.
    """
    from hashaudit.checks import GROUPS

    group_of = {c.name: g.name for g in GROUPS for c in g.checks}
    candidates = [h for h in hashes if h.path != "placement"]
    if len(candidates) < 2:
        return []
    speeds = speeds or {}
    rows = [rank_row(h, group_of, speeds.get(h.name)) for h in candidates]
    return sorted(
        rows, key=lambda r: (*r.deterministic_key(), -(r.speed.keys_per_second if r.speed is not None else 0.0))
    )


def deterministic_order(rows: Sequence[RankingRow], names: Sequence[str]) -> list[RankingRow]:
    """``rows`` in the order that does not depend on timings: the deterministic key, then ``names``' order."""
    return sorted(rows, key=lambda r: (*r.deterministic_key(), names.index(r.hash_name)))


def speeds_from_run(run: dict) -> dict[str, Speed]:
    """The speeds recorded in a report's ``run.hash_speed`` block, by hash name."""
    block = run.get("hash_speed") or {}
    return {
        name: Speed(float(s["keys_per_second"]), float(s["ns_per_key"]), float(s["bytes_per_second"]))
        for name, s in (block.get("hashes") or {}).items()
    }


def measure_speed(
    batch_function: Callable[[Any, int], Any],
    keys: Any,
    seed: int,
    *,
    seconds: float = SPEED_SECONDS,
    rounds: int = SPEED_ROUNDS,
    clock: Callable[[], float] = time.perf_counter,
) -> Speed:
    """Time one batch hash function on ``keys``: rounds that each repeat it until ``seconds`` have passed.

    Parameters
    ----------
    batch_function : callable
        ``(KeyBatch, seed) -> values``.
    keys : KeyBatch
        Not empty.
    seed : int
    seconds : float
        Least length of a round.
    rounds : int
        Rounds; the fastest counts.
    clock : callable
        Seconds, monotonic.

    Returns
    -------
    Speed
    """
    n, total_bytes = len(keys), int(keys.offsets[-1] - keys.offsets[0])
    batch_function(keys, seed)  # the first call may compile or load a cached kernel: not timed
    best = math.inf
    for _ in range(rounds):
        calls = 0
        start = clock()
        while True:  # at least one call per round
            batch_function(keys, seed)
            calls += 1
            elapsed = clock() - start
            if elapsed >= seconds:
                break
        best = min(best, elapsed / calls)
    best = max(best, 1e-12)
    return Speed(n / best, 1e9 * best / n, total_bytes / best)


def measure_speeds(specs: Sequence[Any], sample: Any, seed: int) -> dict:
    """Time the kernel of each hash function on the sampled keys, for the report's ``run.hash_speed``.

    Parameters
    ----------
    specs : sequence of HashSpec
        The hash functions (seeded ones get ``seed``, as in the audit).
    sample : KeyBatch
        The sampled distinct keys, whole (their lengths are the input's key-length distribution). A vectorised
        kernel is given the sample repeated up to :data:`SPEED_BATCH_KEYS` keys (and :data:`SPEED_BATCH_BYTES`).
    seed : int

    Returns
    -------
    dict
        ``keys`` (sampled), ``mean_key_bytes``, ``seconds_per_round``, ``rounds``, ``note`` and, by hash name,
        ``hashes`` (:meth:`Speed.to_dict`). Empty when the sample is.
    """
    from hashaudit.keys.batch import KeyBatch

    n = len(sample)
    if n == 0:
        return {}
    nbytes = int(sample.offsets[-1] - sample.offsets[0])
    copies = max(1, min(-(-SPEED_BATCH_KEYS // n), SPEED_BATCH_BYTES // max(1, nbytes)))
    tiled = KeyBatch.concat([sample] * copies) if copies > 1 else sample
    hashes = {}
    for spec in specs:
        load = getattr(spec, "load", None)
        function = load() if load is not None else spec.hash_batch  # the batch function, without the checks
        keys = tiled if getattr(spec, "path", "kernel") == "kernel" else sample
        hashes[spec.name] = measure_speed(
            function, keys, seed if spec.seeded else 0, seconds=SPEED_SECONDS, rounds=SPEED_ROUNDS
        ).to_dict()
    return {
        "keys": n,
        "mean_key_bytes": round(nbytes / n, 2),
        "seconds_per_round": SPEED_SECONDS,
        "rounds": SPEED_ROUNDS,
        "note": SPEED_NOTE,
        "hashes": hashes,
    }
