"""``placement``: where keys land in a system that is really run — a topic's partitions, a cluster's slots and
nodes — under that system's exact placement rule (``hashaudit.placements.rules``), against an ideal hash placed by
the same rule, and how many keys move when the system grows. Each placement is a subject of its own in the reports.
"""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import replace
from typing import Any

from hashaudit.checks._base import Check, CheckGroup, Conclusion, Tested
from hashaudit.settings import Setting
from hashaudit.verdict.words import excess, num, pct


def _balance(test: Any) -> str:
    d, e = test.details, test.effect
    unit = d.get("unit", "unit")
    return (
        f"the hottest {unit} {d.get('hottest_shard')} holds {num(d.get('hottest_keys', 0))} distinct keys, "
        f"{e.observed:.3f}× its share against an expected maximum of {e.ideal:.3f}× for an ideal hash under the same "
        f"rule ({excess(e.value)}; χ² = {num(test.statistic)} on {num(test.expected)} df)"
    )


def _movement(test: Any) -> str:
    d, e = test.details, test.effect
    return (
        f"adding a {d.get('unit', 'unit')} ({d.get('shards')} to {d.get('shards', 0) + 1}) moves {pct(e.observed)} of "
        f"the keys against {pct(e.ideal)} for an ideal hash under the same rule"
    )


def _parse(text: str) -> Any:
    from hashaudit.placements.rules import parse_placement

    return parse_placement(text)


def _show(placements: tuple) -> list[str]:
    return [p.name if hasattr(p, "name") else str(p) for p in placements]


def _accumulators(subject: Any, plan: Any, tables: list, lanes: int) -> dict:
    from hashaudit.stats.shards import ShardCounts

    return {"units": (("loads", "values"), [ShardCounts(subject.name, subject.width, subject.layout)])}


def _conclude(ctx: Conclusion, state: Any) -> Iterator[Tested]:
    from hashaudit.stats.shards import balance_tests, movement_tests

    unit = state.spec.unit
    for counts in state.get("units"):
        keys = int(counts.distinct_.sum())
        named = {"shard_balance": "placement_balance", "shard_movement": "placement_movement"}
        for test in [*balance_tests(counts), *movement_tests(counts)]:
            details = {**test.details, "unit": unit, "rule": state.spec.rule, "placement": state.spec.name}
            if "keys_per_shard" not in details:
                details["keys_per_shard"] = counts.distinct_.tolist()
            details["load_per_shard"] = [round(float(x), 6) for x in counts.load_]
            yield None, None, keys, replace(test, name=named[test.name], details=details)


GROUP = CheckGroup(
    "placement",
    "keys over a real system's units under its exact placement rule (--placement turns it on)",
    (
        Check(
            "placement_balance",
            _balance,
            null_law="not_studied",
            help="distinct keys per unit (partition, node) under the system's rule",
            figure="shards",
        ),
        Check(
            "placement_movement",
            _movement,
            null_law="not_studied",
            help="keys moving when the system gains a unit",
        ),
    ),
    default=False,
    settings=(
        Setting(
            "placements",
            "checks",
            "A system's placement rule with its parameters (repeatable): kafka:partitions=N, "
            "jvm-hashcode-mod:n=N, redis-cluster:nodes=N, cassandra:nodes=N, ketama:servers=N "
            "(hashaudit placements lists them).",
            default=(),
            kind="text",
            parse=_parse,
            show=_show,
            repeatable=True,
            flag="--placement",
            metavar="NAME:PARAM=N",
        ),
    ),
    requires="placements",
    subjects="placements",
    accumulators=_accumulators,
    conclude=_conclude,
)
