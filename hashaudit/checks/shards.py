"""``shards``: how distinct keys spread over N shards under a shard scheme (mod, jump consistent hashing,
rendezvous, a ring of virtual nodes), how many move when a shard is added, and which heavy keys make a shard hot."""

from __future__ import annotations

from collections.abc import Iterator
from typing import Any

from hashaudit.checks._base import Check, CheckGroup, Conclusion, Tested
from hashaudit.settings import Setting
from hashaudit.verdict.words import count, excess, num, pct

SHARD_SCHEMES = ("mod", "jump", "rendezvous", "ring")
MAX_SHARDS = 1 << 16


def _balance(test: Any) -> str:
    d, e = test.details, test.effect
    return (
        f"{d.get('shard_scheme')} over {count(d.get('shards', 0), 'shard')}: the hottest shard "
        f"{d.get('hottest_shard')} holds {count(d.get('hottest_keys', 0), 'distinct key')}, {e.observed:.3f}× its share against an expected "
        f"maximum of {e.ideal:.3f}× for an ideal hash ({excess(e.value)}; χ² = {num(test.statistic)} on "
        f"{num(test.expected)} df)"
    )


def _movement(test: Any) -> str:
    d, e = test.details, test.effect
    return (
        f"{d.get('shard_scheme')}: going from {d.get('shards')} to {count(d.get('shards', 0) + 1, 'shard')} moves "
        f"{pct(e.observed)} of the keys against {pct(e.ideal)} for an ideal hash under this scheme"
    )


def _layouts(plan: Any) -> list:
    from hashaudit.tables.shards import ShardLayout

    return [
        ShardLayout(scheme, n, plan.shard_weights, plan.vnodes) for n in plan.shards for scheme in plan.shard_schemes
    ]


def _accumulators(spec: Any, plan: Any, tables: list[tuple[str, int]], lanes: int) -> dict:
    from hashaudit.stats.shards import BucketLoads, ShardCounts

    return {
        "shards": (("loads", "values"), [ShardCounts(spec.name, spec.width, layout) for layout in _layouts(plan)]),
        "bucket_loads": (("loads",), [BucketLoads(scheme, m, spec.width) for scheme, m in tables]),
    }


def _conclude(ctx: Conclusion, state: Any) -> Iterator[Tested]:
    from hashaudit.stats.shards import balance_tests, movement_tests

    for counts in state.get("shards"):
        for test in [*balance_tests(counts), *movement_tests(counts)]:
            yield None, None, int(counts.distinct_.sum()), test


def _facts(ctx: Conclusion) -> list:
    """``hot_keys`` and ``load_attribution``: the heaviest keys placed on each layout's shards by each hash."""
    from hashaudit.checks._hot import attribution_findings

    findings = []
    for state in ctx.states:
        findings += attribution_findings(ctx, state.spec, state.get("shards"))
    return findings


def _prepare(values: dict) -> None:
    from hashaudit.tables.shards import ShardLayout

    values["shards"] = tuple(dict.fromkeys(values["shards"]))
    values["shard_schemes"] = tuple(dict.fromkeys(values["shard_schemes"] or ("mod",)))
    for n in values["shards"]:
        for scheme in values["shard_schemes"]:
            ShardLayout(scheme, n, values["shard_weights"], values["vnodes"])  # raises on a bad combination


GROUP = CheckGroup(
    "shards",
    "balance over N shards, movement when one is added, hot keys (--shards turns it on)",
    (
        Check("shard_balance", _balance, null_law="not_studied", help="distinct keys per shard", figure="shards"),
        Check("shard_movement", _movement, null_law="not_studied", help="keys moving when a shard is added"),
        Check("hot_keys", facts_only=True, null_law="facts", help="heavy keys that make a shard hot"),
        Check("load_attribution", facts_only=True, null_law="facts", help="the hottest shard's load, explained"),
    ),
    default=False,
    settings=(
        Setting(
            "shards",
            "checks",
            "Shard, partition or node count (repeatable); runs the shard checks: balance, movement, hot keys.",
            default=(),
            kind="int",
            minimum=1,
            maximum=MAX_SHARDS,
            repeatable=True,
            metavar="N",
        ),
        Setting(
            "shard_schemes",
            "checks",
            "How a hash value picks a shard (repeatable). Default: mod.",
            default=(),
            kind="choice",
            choices=SHARD_SCHEMES,
            repeatable=True,
            flag="--shard-scheme",
        ),
        Setting("vnodes", "checks", "Virtual nodes per shard on a ring.", default=160, kind="int", minimum=1),
        Setting(
            "shard_weights",
            "checks",
            "Capacity weight of each shard (rendezvous and ring), comma-separated.",
            default=(),
            kind="float",
            minimum=0,
            comma_list=True,
            metavar="W1,W2,...",
        ),
        Setting(
            "shard_imbalance",
            "thresholds",
            "Fail when the hottest shard's distinct keys exceed an ideal hash's expected maximum by more than this.",
            default=0.05,
            kind="float",
            minimum=0,
            aliases=("--max-shard-imbalance",),
        ),
        Setting(
            "movement_excess",
            "thresholds",
            "Fail when adding a shard moves this much more of the keys than an ideal hash under the same scheme.",
            default=0.1,
            kind="float",
            minimum=0,
            aliases=("--max-movement-excess",),
        ),
    ),
    requires="shards",
    accumulators=_accumulators,
    conclude=_conclude,
    facts=_facts,
    prepare=_prepare,
    needs_heavy=True,
)
