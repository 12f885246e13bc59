"""``neighbours``: families of keys made from the sample the way real keys resemble each other (counters, one
changed character, case, shared prefixes, an appended byte; for integer keys the value ± 1, ± small strides, one
flipped bit), and whether the hash tells them apart.

Whether the keys are integers is the plan's ``neighbour_keys`` setting: the sample alone cannot tell 8-byte
integers from 8-byte text."""

from __future__ import annotations

from collections.abc import Iterator
from typing import Any

from hashaudit.checks._base import Check, CheckGroup, Conclusion, Tested
from hashaudit.settings import Setting
from hashaudit.verdict.words import count, excess, num

FAMILIES = ("counter", "one_char", "case", "shared_prefix", "appended_byte")
INTEGER_FAMILIES = ("adjacent", "stride", "bit_flip")  # hashaudit.stats.neighbours.INTEGER_FAMILIES
NEIGHBOUR_KEYS = ("bytes", "integers")


def _sentence(test: Any) -> str:
    d, e = test.details, test.effect
    family = (
        f"neighbour keys '{d.get('family')}' ({count(d.get('family_keys', 0), 'key')} made from yours: "
        f"{d.get('transformation')})"
    )
    if e.name == "lookup_cost_excess":
        return (
            f"{family}: in {d.get('worst')}, {count(test.observed, 'colliding pair')} against "
            f"{num(test.expected)} expected; a chained lookup costs {count(e.observed, 'probe')} against "
            f"{num(e.ideal)} ({excess(e.value)})"
        )
    return f"{family}: {count(test.observed, 'full-value colliding pair')} against {test.expected:.3g} expected"


def neighbour_keys_for(options: Any) -> str:
    """The ``neighbour_keys`` a plan gets when the user did not say: ``integers`` when every source reads its keys as
    integers (``key_format`` int), else ``bytes``. The one rule for the command line and the gate."""
    listed = options if isinstance(options, list | tuple) else [options]
    return "integers" if listed and all(o.key_format == "int" for o in listed) else "bytes"


def _conclude(ctx: Conclusion, state: Any) -> Iterator[Tested]:
    from hashaudit.stats.neighbours import neighbour_families, neighbour_tests

    if ctx.sample is None or not len(ctx.sample):
        return
    integers = ctx.plan.neighbour_keys == "integers"
    families = ctx.once(  # built once, hashed by every function
        "neighbour_families", lambda: neighbour_families(ctx.sample, seed=ctx.plan.seed, integers=integers)
    )
    tables = ctx.tables
    spec = state.spec
    for _family, test in neighbour_tests(
        spec.hash_batch,
        spec.width,
        families,
        tables,
        seed=ctx.plan.seed,
        seeded=spec.seeded,
        integer_keys=spec.integer_keys,
        name=spec.name,
    ):
        d = test.details
        yield d.get("worst_scheme"), d.get("worst_buckets"), d["family_keys"], test


def _warm_up(plan: Any, sample: Any, widths: tuple[int, ...], stand_in: Any) -> None:
    """The neighbour families' kernels and their tests."""
    from hashaudit.stats.neighbours import neighbour_families, neighbour_tests

    families = neighbour_families(sample, seed=plan.seed, integers=plan.neighbour_keys == "integers")
    for width in widths:
        list(neighbour_tests(stand_in(width), width, families, plan.tables(len(sample)), seed=plan.seed))


GROUP = CheckGroup(
    "neighbours",
    "families of similar keys made from the sample (counters, one changed character, case, prefixes)",
    tuple(
        Check(f"neighbour_{f}", _sentence, null_law="not_studied", help=f"neighbour keys: {f.replace('_', ' ')}")
        for f in FAMILIES + INTEGER_FAMILIES
    ),
    settings=(
        Setting(
            "neighbour_keys",
            "checks",
            "How neighbour keys are made: bytes (changed characters, case, prefixes, appended bytes) or integers "
            "(8-byte little-endian values: value ± 1, ± strides, one flipped bit).",
            default="bytes",
            kind="choice",
            choices=NEIGHBOUR_KEYS,
        ),
    ),
    conclude=_conclude,
    warm_up=_warm_up,
    needs_sample=True,
)
