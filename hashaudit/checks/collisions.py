"""``collisions``: keys that share their full hash value (against the birthday bound), and repeated keys."""

from __future__ import annotations

from collections.abc import Iterator
from typing import Any

from hashaudit.checks._base import Check, CheckGroup, Conclusion, Tested
from hashaudit.settings import Setting
from hashaudit.verdict.words import count


def _full(test: Any) -> str:
    d = test.details
    return (
        f"{count(d.get('keys_in_collisions', 0), 'distinct key')} share their full {d.get('width')}-bit value "
        f"({count(d.get('groups', 0), 'group')}): {count(test.observed, 'colliding pair')} against "
        f"{test.expected:.3g} expected by the birthday bound"
    )


def _accumulators(spec: Any, plan: Any, tables: list, lanes: int) -> dict:
    from hashaudit.stats.collisions import FullCollisions

    budget = plan.collision_memory // lanes  # each lane keeps its share in memory, then spills to disk
    return {"collisions": (("values",), [FullCollisions(spec.name, plan.seed, spec.width, budget, plan.spill_dir)])}


def _conclude(ctx: Conclusion, state: Any) -> Iterator[Tested]:
    from hashaudit.stats.collisions import collision_tests

    for store in state.get("collisions"):
        result = store.result()
        for test in collision_tests(result):
            yield None, None, result.keys, test


def _facts(ctx: Conclusion) -> list:
    from hashaudit.verdict.facts import duplicate_finding

    if ctx.plan.all_keys:
        return []
    return [
        duplicate_finding(state.spec.name, ctx.keys, ctx.occurrences) for state in ctx.states if GROUP in state.groups
    ]


GROUP = CheckGroup(
    "collisions",
    "keys sharing their full hash value (birthday bound); repeated keys",
    (
        Check("full_collisions", _full, help="distinct keys with the same full-width hash value", shows_keys=True),
        Check("duplicate_keys", facts_only=True, null_law="facts", help="keys that repeat an earlier key"),
    ),
    settings=(
        Setting(
            "collision_memory",
            "checks",
            "Hash values kept in memory per function for full-width collisions before spilling to disk. "
            "Default: a share of --memory.",
            kind="size",
            minimum=0,
            metavar="BYTES",
            recorded=False,  # a memory budget: the result is the same for any
        ),
        Setting(
            "collision_excess",
            "thresholds",
            "Fail above this excess of full-width colliding pairs over the birthday expectation.",
            default=0.1,
            kind="float",
            minimum=0,
            aliases=("--max-collision-excess",),
        ),
    ),
    accumulators=_accumulators,
    conclude=_conclude,
    facts=_facts,
)
