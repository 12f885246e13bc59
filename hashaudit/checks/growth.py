"""``growth``: a table built by inserting the keys and rehashing when it fills (``FACTOR@LOAD``), replayed with
the first distinct keys' values: lookups at its worst moments, and the orders of insertion that make building it
far costlier than a random order (a copy of a same-hash table, keys sorted by hash)."""

from __future__ import annotations

from collections.abc import Iterator
from typing import Any

from hashaudit.checks._base import Check, CheckGroup, Conclusion, Tested
from hashaudit.checks.tables import first_values, simulated, simulated_schemes
from hashaudit.settings import Setting, SettingError
from hashaudit.verdict.words import count, excess, num

ORDER_WORDS = {
    "source": "in source order",
    "iteration_2x": "in the slot order of a same-hash table twice its size (a copy of a bigger table)",
    "iteration_1x": "in the slot order of a same-hash table of its size (a copy)",
    "iteration_half": "in the slot order of a same-hash table half its size",
    "sorted_by_hash": "sorted by hash value",
}


def _growth(test: Any) -> str:
    d, e = test.details, test.effect
    g = d.get("growth", {})
    search = "a successful" if d.get("search") == "hit" else "an unsuccessful"
    return (
        f"growing {d.get('table_kind')} table ({g.get('policy')}, {count(g.get('resizes', 0), 'resize')} moving "
        f"{count(g.get('keys_moved', 0), 'key')}, {count(g.get('slots', 0), 'slot')} at the end): "
        f"{d.get('moment')} at {count(d.get('slots', 0), 'slot')}, {search} lookup costs "
        f"{count(e.observed, 'probe')} against "
        f"{num(e.ideal)} for an ideal hash ({excess(e.value)})"
    )


def _order(test: Any) -> str:
    d, e = test.details, test.effect
    worst = ORDER_WORDS.get(d.get("worst_order", ""), d.get("worst_order"))
    over = "over " if d.get("worst_order") in d.get("stopped_orders", []) else ""
    return (
        f"building a growing {d.get('table_kind')} table ({d.get('growth')}) from the keys {worst} costs "
        f"{over}{count(e.observed, 'probe')}, {over}{num(e.value)}× a random order — copy tables in random order, size "
        "the target before filling it, or give each table its own seed"
    )


def _scheme_of(slots: int, scheme: str) -> str:
    from hashaudit.tables.schemes import is_power_of_two

    return scheme if is_power_of_two(slots) or scheme in ("mod", "range") else "mod"


def _conclude(ctx: Conclusion, state: Any) -> Iterator[Tested]:
    from hashaudit.stats.probes import growth_tests, ideal_replay, order_hazard
    from hashaudit.tables.growth import replay_growth

    found = simulated(ctx, state)
    if found is None:
        return
    values = found[0]
    plan, width = ctx.plan, state.spec.width
    for scheme in simulated_schemes(ctx, state):
        for kind in plan.table_kinds:  # every kept key: growth decides the sizes
            for i, policy in enumerate(plan.growth):
                if kind == "quadratic" and not policy.powers_of_two:
                    continue
                grown = replay_growth(values, width, kind, policy, scheme)
                ideal_growth = ideal_replay(width, kind, policy, scheme, len(values), plan.seed)
                for test in growth_tests(grown, ideal_growth):
                    yield _scheme_of(grown.slots, scheme), grown.slots, len(values), test
                if i == 0 and kind != "chaining":  # order cannot change a chained table's total work
                    test = order_hazard(values, width, kind, policy, scheme, grown.slots, plan.seed)
                    yield _scheme_of(grown.slots, scheme), grown.slots, len(values), test


def _prepare(values: dict) -> None:
    from hashaudit.tables.growth import GrowthPolicy, parse_growth

    start = values["growth_start"]
    policies = []
    for item in values["growth"] or ("2@0.75",):
        if isinstance(item, GrowthPolicy):
            policies.append(item)
            continue
        try:
            policies.append(parse_growth(item, start))
        except SettingError:
            raise
        except Exception as exc:  # noqa: BLE001 - the parser's one line, under this setting's name
            raise SettingError("growth", str(exc).removeprefix("--growth ")) from None
    values["growth"] = tuple(policies)


def _show_growth(policies: tuple) -> list[str]:
    return [p.label if hasattr(p, "label") else str(p) for p in policies]


GROUP = CheckGroup(
    "growth",
    "a growing table replayed with rehashing, and insertion orders that make it costly",
    (
        Check("growth_cost", _growth, null_law="not_studied", help="lookups at a growing table's worst moments"),
        Check("order_hazard", _order, null_law="not_studied", help="insertion orders costlier than random"),
    ),
    default=False,
    settings=(
        Setting(
            "growth",
            "checks",
            "Growth policy replayed by growth_cost (repeatable), e.g. 2@0.75 (double when three quarters full) or "
            "1.5@0.875. Default: 2@0.75.",
            default=(),
            kind="text",
            parse=str,
            show=_show_growth,
            repeatable=True,
            metavar="FACTOR@LOAD",
        ),
        Setting(
            "growth_start",
            "checks",
            "Slots of a growing table before its first resize.",
            default=16,
            kind="size",
            minimum=2,
            maximum=1 << 30,
            metavar="M",
        ),
        Setting(
            "order_cost_ratio",
            "thresholds",
            "Fail when building a growing table from the keys in some order costs more than this many times a "
            "random order.",
            default=4.0,
            kind="float",
            minimum=0,
            aliases=("--max-order-ratio",),
        ),
    ),
    accumulators=first_values,
    conclude=_conclude,
    prepare=_prepare,
)
