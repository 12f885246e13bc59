"""``seeds``: does the seed of a seeded hash change how the keys spread, and do some keys collide whatever the
seed (seed-independent collisions: a hash-flooding risk)?"""

from __future__ import annotations

from collections.abc import Iterator
from typing import Any

from hashaudit.checks._base import Check, CheckGroup, Conclusion, Tested
from hashaudit.verdict.words import count, excess, num, p_text, table_label


def _spread(test: Any) -> str:
    d, e = test.details, test.effect
    table = d.get("costliest_table") or {}
    where = table_label(table.get("scheme"), table.get("buckets"))
    return (
        f"changing the seed does not change how the keys spread: over {count(len(d.get('seeds', [])), 'seed')} the per-seed "
        f"p-values pile up near 0; in {where} a chained lookup costs {count(e.observed, 'probe')} (median over seeds) "
        f"against {num(e.ideal)} ({excess(e.value)})"
    )


def _alike(test: Any) -> str:
    return (
        f"the seeds give suspiciously alike tables ({p_text(test.p_lower)}): the seed may not reach the bits a table "
        "uses"
    )


def _independent(test: Any) -> str:
    d = test.details
    return (
        f"{count(d.get('keys_in_collisions', 0), 'key')} of the sample collide under every one of "
        f"{count(len(d.get('seeds', [])), 'seed')} ({count(d.get('groups', 0), 'group')}): crafted keys could flood a table whatever its secret seed — use a "
        "keyed hash such as siphash24 and follow your security policy"
    )


def _conclude(ctx: Conclusion, state: Any) -> Iterator[Tested]:
    from hashaudit.stats.seeds import seed_runs, seed_tests

    if ctx.sample is None or not len(ctx.sample) or not state.spec.seeded:
        return
    spec = state.spec
    runs = seed_runs(
        spec.hash_batch, spec.width, ctx.sample.keys(), ctx.tables, null_seed=ctx.plan.seed, name=spec.name
    )
    for test in seed_tests(runs):
        yield None, None, runs.keys, test


GROUP = CheckGroup(
    "seeds",
    "seeded hashes: spread across seeds and seed-independent collisions (asked for explicitly)",
    (
        Check("seed_spread", _spread, regular=_alike, null_law="not_studied", help="how the spread varies by seed"),
        Check(
            "seed_independent_collisions",
            _independent,
            null_law="not_studied",
            help="sample keys colliding under every seed",
        ),
    ),
    default=False,
    conclude=_conclude,
    needs_sample=True,
)
