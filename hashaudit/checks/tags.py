"""``tags``: the tag bits a table keeps beside each slot (a few bits of the hash value compared before the key):
false tag matches per lookup against an ideal hash, and whether tag and position bits depend on each other."""

from __future__ import annotations

from collections.abc import Iterator
from typing import Any

from hashaudit.checks._base import Check, CheckGroup, Conclusion, Tested
from hashaudit.checks.tables import first_values, simulated
from hashaudit.settings import Setting
from hashaudit.verdict.words import excess


def _sentence(test: Any) -> str:
    d, e = test.details, test.effect
    return (
        f"tag bits {d.get('tag_shift')}..{d.get('tag_shift', 0) + d.get('tag_bits', 0) - 1}: a lookup meets "
        f"{e.observed:.3g} false tag matches against {e.ideal:.3g} for an ideal hash ({excess(e.value)}; the "
        f"commonest tag holds {100 * d.get('worst_tag_share', 0):.2f} % of the keys, "
        f"{d.get('dependence_ratio') or 1:.2f}× the matches its bucket and tag shares alone explain)"
    )


def _parse(text: str) -> tuple[int, int | None]:
    from hashaudit.stats.tags import parse_tag_bits

    return parse_tag_bits(text)


def _show(value: tuple[int, int | None] | None) -> str | None:
    if value is None:
        return None
    bits, shift = value
    return str(bits) if shift is None else f"{bits}@{shift}"


def _positions(ctx: Conclusion, state: Any) -> list[tuple[str, int]]:
    found = simulated(ctx, state)
    return ctx.tables or ([(found[2], found[1])] if found else [])


def _conclude(ctx: Conclusion, state: Any) -> Iterator[Tested]:
    from hashaudit.stats.tags import tag_tests

    found = simulated(ctx, state)
    if found is None:
        return
    values = found[0]
    for where, m in _positions(ctx, state):
        for test in tag_tests(values, state.spec.width, where, m, *ctx.plan.tag_bits):
            yield where, m, len(values), test


def check_layout(plan: Any, widths: list[int], tables: list[tuple[str, int]]) -> None:
    """A layout whose tag overlaps the position bits is a usage error: said before any key is read."""
    from hashaudit.checks.tables import AUTO_TABLE_SLOTS
    from hashaudit.stats.tags import check_tag_layout

    for width in widths:
        for scheme, m in tables or [("mask", AUTO_TABLE_SLOTS)]:
            check_tag_layout(width, scheme, m, *plan.tag_bits)


GROUP = CheckGroup(
    "tags",
    "tag bits kept beside each slot: false tag matches per lookup (--tag-bits turns it on)",
    (Check("tag_bits", _sentence, null_law="not_studied", help="false tag matches per lookup"),),
    default=False,
    settings=(
        Setting(
            "tag_bits",
            "checks",
            "Tag bits a table keeps beside each slot, from bit SHIFT (default: the top N bits); runs tag_bits.",
            kind="text",
            parse=_parse,
            show=_show,
            metavar="N[@SHIFT]",
        ),
        Setting(
            "tag_match_excess",
            "thresholds",
            "Fail above this relative excess of false tag matches per lookup over an ideal hash.",
            default=0.25,
            kind="float",
            minimum=0,
            aliases=("--max-tag-excess",),
        ),
    ),
    requires="tag_bits",
    when_alone={"tag_bits": (7, None)},
    accumulators=first_values,
    conclude=_conclude,
    before_read=check_layout,
)
