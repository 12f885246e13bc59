"""``neighbours``: families of keys made from the sample the way real keys resemble each other (counters, one
changed character, case, shared prefixes, an appended byte), and whether the hash tells them apart."""

from __future__ import annotations

from collections.abc import Iterator
from typing import Any

from hashaudit.checks._base import Check, CheckGroup, Conclusion, Tested
from hashaudit.verdict.words import excess, num

FAMILIES = ("counter", "one_char", "case", "shared_prefix", "appended_byte")


def _sentence(test: Any) -> str:
    d, e = test.details, test.effect
    family = (
        f"neighbour keys '{d.get('family')}' ({num(d.get('family_keys', 0))} keys made from yours: "
        f"{d.get('transformation')})"
    )
    if e.name == "lookup_cost_excess":
        return (
            f"{family}: in {d.get('worst')}, {num(test.observed)} colliding pairs against {num(test.expected)} "
            f"expected; a chained lookup costs {num(e.observed)} probes against {num(e.ideal)} ({excess(e.value)})"
        )
    return f"{family}: {num(test.observed)} full-value colliding pairs against {test.expected:.3g} expected"


def _conclude(ctx: Conclusion, state: Any) -> Iterator[Tested]:
    from hashaudit.stats.neighbours import neighbour_families, neighbour_tests

    if ctx.sample is None or not len(ctx.sample):
        return
    if "neighbour_families" not in ctx.shared:  # built once, hashed by every function
        ctx.shared["neighbour_families"] = neighbour_families(ctx.sample, seed=ctx.plan.seed)
    tables = ctx.tables
    spec = state.spec
    for _family, test in neighbour_tests(
        spec.hash_batch,
        spec.width,
        ctx.shared["neighbour_families"],
        tables,
        seed=ctx.plan.seed,
        seeded=spec.seeded,
        integer_keys=spec.integer_keys,
        name=spec.name,
    ):
        d = test.details
        yield d.get("worst_scheme"), d.get("worst_buckets"), d["family_keys"], test


GROUP = CheckGroup(
    "neighbours",
    "families of similar keys made from the sample (counters, one changed character, case, prefixes)",
    tuple(
        Check(f"neighbour_{f}", _sentence, null_law="not_studied", help=f"neighbour keys: {f.replace('_', ' ')}")
        for f in FAMILIES
    ),
    conclude=_conclude,
    needs_sample=True,
)
