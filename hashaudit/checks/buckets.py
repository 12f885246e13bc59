"""``buckets``: how the keys spread over the tables asked for (chi-square, G-test, empty buckets, colliding pairs,
fullest bucket), each against simple uniform hashing."""

from __future__ import annotations

from collections.abc import Iterator
from typing import Any

from hashaudit.checks._base import Check, CheckGroup, Conclusion, Tested
from hashaudit.settings import Setting
from hashaudit.verdict.words import count, excess, num, pct


def _cost(test: Any) -> str:
    e = test.effect
    cost = f"{count(e.observed, 'probe')} against {num(e.ideal)} for an ideal hash ({excess(e.value)})"
    if test.name == "colliding_pairs":
        pairs = count(test.observed, "colliding pair")
        return f"{pairs} against {num(test.expected)} expected; a successful chained lookup costs {cost}"
    symbol = "χ²" if test.name == "chi_square" else "G"
    uneven = f"bucket counts more uneven than random ({symbol} = {num(test.statistic)} vs {num(test.expected)})"
    if e.value <= 0:  # the statistic weighs light and empty buckets that chained lookups barely feel
        return (
            f"{uneven} in the light and empty buckets, not in the cost of lookups: a successful chained lookup "
            f"costs {cost}"
        )
    return f"{uneven}; a successful chained lookup costs {cost}"


def _empty(test: Any) -> str:
    e = test.effect
    return (
        f"{pct(e.observed)} of buckets stay empty against {pct(e.ideal)} for an ideal hash "
        f"({100 * e.value:+.1f} points of the table)"
    )


def _max_load(test: Any) -> str:
    e = test.effect
    return (
        f"the hottest bucket holds {count(e.observed, 'key')} against an expected maximum of {num(e.ideal)} "
        f"({e.value:,.3g}×)"
    )


def _accumulators(spec: Any, plan: Any, tables: list[tuple[str, int]], lanes: int) -> dict:
    from hashaudit.stats.buckets import BucketCounts

    return {"tables": (("values",), [BucketCounts(spec.name, plan.seed, s, m, spec.width) for s, m in tables])}


def _conclude(ctx: Conclusion, state: Any) -> Iterator[Tested]:
    from hashaudit.stats.fit import bucket_tests

    for table in state.get("tables"):
        result = table.result()
        for test in bucket_tests(result, seed=ctx.plan.seed):
            yield result.scheme, result.buckets, result.keys, test


GROUP = CheckGroup(
    "buckets",
    "bucket counts of every table against simple uniform hashing",
    (
        Check("chi_square", _cost, help="Pearson's chi-square of the bucket counts", rank=3, figure="occupancy"),
        Check("g_test", _cost, help="the G-test (likelihood ratio) of the bucket counts", rank=4, figure="occupancy"),
        Check("empty_buckets", _empty, help="buckets left empty", rank=2, figure="occupancy"),
        Check("colliding_pairs", _cost, help="pairs of keys that share a bucket", rank=0, figure="occupancy"),
        Check(
            "max_load", _max_load, help="the fullest bucket against its expected maximum", rank=1, figure="occupancy"
        ),
    ),
    settings=(
        Setting(
            "lookup_cost_excess",
            "thresholds",
            "Fail above this relative excess of probes per successful chained lookup (0.05 = 5 % more).",
            default=0.05,
            kind="float",
            minimum=0,
            aliases=("--max-cost-excess",),
        ),
        Setting(
            "empty_excess",
            "thresholds",
            "Fail above this excess of empty buckets, as a fraction of the table.",
            default=0.02,
            kind="float",
            minimum=0,
            aliases=("--max-empty-excess",),
        ),
        Setting(
            "max_load_ratio",
            "thresholds",
            "Fail above this ratio of the hottest bucket to its expected maximum.",
            default=1.25,
            kind="float",
            minimum=0,
        ),
    ),
    accumulators=_accumulators,
    conclude=_conclude,
)
