"""``tables``: lookups in simulated tables of five organisations (chaining, linear, quadratic, double hashing,
Robin Hood) filled with the values of the first distinct keys, against the same tables filled by an ideal hash.

The simulated tables of the ``tables``, ``growth`` and ``tags`` groups share one accumulator: the values of the
first distinct keys (``hashaudit.tables.prefix.FirstValues``); this module says how many and in which table.
"""

from __future__ import annotations

from collections.abc import Iterator
from typing import Any

from hashaudit.checks._base import Check, CheckGroup, Conclusion, Tested
from hashaudit.settings import Setting
from hashaudit.verdict.words import count, excess, num, p_text

TABLE_KINDS = ("chaining", "linear", "quadratic", "double", "robin-hood")
DEFAULT_LOADS = (0.25, 0.5, 0.75, 0.9, 0.95)
AUTO_TABLE_SLOTS = 1 << 18
MIN_TABLE_SLOTS = 1 << 12  # 16 regions of 256 slots: smaller tables give too few independent batch means
MAX_TABLE_SLOTS = 1 << 30
SIMULATING_GROUPS = ("tables", "growth", "tags")


def simulated_keys(plan: Any) -> int:
    """How many of the first distinct keys' values the simulations keep (0 when they do not run)."""
    if not set(SIMULATING_GROUPS) & set(plan.checks):
        return 0
    return int(max(plan.loads) * (plan.table_slots or AUTO_TABLE_SLOTS))


def simulated_slots(plan: Any, keys: int) -> int | None:
    """Slots of the simulated tables given the keys kept, or None when too few keys fill the smallest table."""
    if plan.table_slots is not None:
        return plan.table_slots if int(max(plan.loads) * plan.table_slots) <= keys else None
    slots = AUTO_TABLE_SLOTS
    while slots >= MIN_TABLE_SLOTS and int(max(plan.loads) * slots) > keys:
        slots //= 2
    return slots if slots >= MIN_TABLE_SLOTS else None


def simulated(ctx: Conclusion, state: Any) -> tuple[Any, int, str] | None:
    """The kept values of one hash, the slots of its simulated tables and the first scheme that places them (the
    first ``--scheme`` that fits the size; :func:`simulated_schemes` gives all of them); None when too few keys fill
    the smallest table."""
    from hashaudit.tables.schemes import is_power_of_two

    kept = state.get("first_values")
    if not kept:
        return None

    def build() -> tuple[Any, int, str] | None:
        values = kept[0].values()
        slots = simulated_slots(ctx.plan, len(values))
        if slots is None:
            return None
        power = is_power_of_two(slots)
        scheme = next((s for s in ctx.plan.schemes if s in ("mod", "range") or power), "mask" if power else "mod")
        return values, slots, scheme

    return ctx.once(("simulated", state.spec.name), build)


def simulated_schemes(ctx: Conclusion, state: Any) -> list[str]:
    """Every scheme the simulated tables are placed by: each ``--scheme`` asked for that fits their size (``mask``
    and ``high`` need a power of two), else the one :func:`simulated` picks."""
    from hashaudit.tables.schemes import is_power_of_two

    found = simulated(ctx, state)
    if found is None:
        return []
    power = is_power_of_two(found[1])
    fitting = [s for s in ctx.plan.schemes if s in ("mod", "range") or power]
    return fitting or [found[2]]


def first_values(spec: Any, plan: Any, tables: list, lanes: int) -> dict:
    """The accumulator of the simulating groups: the values of the first distinct keys, by stream position."""
    from hashaudit.tables.prefix import FirstValues

    return {"first_values": (("positions",), [FirstValues(simulated_keys(plan))])}


def _probe(test: Any) -> str:
    d, e = test.details, test.effect
    search = "a successful" if d.get("search") == "hit" else "an unsuccessful"
    return (
        f"{d.get('table_kind')} table of {count(d.get('slots', 0), 'slot')} at load {d.get('load')}: {search} "
        f"lookup costs {count(e.observed, 'probe')} against {num(e.ideal)} for an ideal hash ({excess(e.value)})"
    )


def _probe_regular(test: Any) -> str:
    d = test.details
    full = max(d.get("loads") or [{}], key=lambda row: row.get("load", 0))
    hit = full.get("hit") or {}
    cost = (
        f": at load {full.get('load')} a successful lookup costs {count(hit.get('mean', 0), 'probe')} against "
        f"{num(hit.get('ideal_mean', 0))} for an ideal hash"
        if hit
        else ""
    )
    return (
        f"{d.get('table_kind')} table of {count(d.get('slots', 0), 'slot')} filled with the first keys: lookups "
        f"cost fewer probes than random ({p_text(test.p_lower)}){cost} — the keys are structured and the function "
        "keeps the structure, harmless for a table"
    )


def _conclude(ctx: Conclusion, state: Any) -> Iterator[Tested]:
    from hashaudit.stats.probes import ideal_cells, probe_tests
    from hashaudit.tables.simulate import kind_fits, simulate

    found = simulated(ctx, state)
    if found is None:
        return
    values, slots, _ = found
    plan, width = ctx.plan, state.spec.width
    for scheme in simulated_schemes(ctx, state):
        for kind in plan.table_kinds:
            if kind_fits(kind, slots) is not None:
                continue
            cells = simulate(values, width, kind, slots, scheme, plan.loads)
            ideal = ideal_cells(width, kind, slots, scheme, plan.loads, plan.seed)
            for test in probe_tests(cells, ideal, scheme):
                yield scheme, slots, cells[-1].keys, test


def _warm_up(plan: Any, sample: Any, widths: tuple[int, ...], stand_in: Any) -> None:
    """The simulated tables' kernels: one small table of each kind, built as the ideal hash's are."""
    from hashaudit.stats.probes import _ideal
    from hashaudit.tables.simulate import kind_fits

    for kind in plan.table_kinds:
        if kind_fits(kind, 1 << 12) is None:
            _ideal(64, kind, 1 << 12, "mask", plan.loads, plan.seed)


def _prepare(values: dict) -> None:
    from hashaudit.settings import SettingError

    values["table_kinds"] = tuple(dict.fromkeys(values["table_kinds"] or TABLE_KINDS))
    values["loads"] = tuple(sorted(set(values["loads"] or DEFAULT_LOADS)))
    slots = values["table_slots"]
    if slots is not None and not MIN_TABLE_SLOTS <= slots <= MAX_TABLE_SLOTS:
        raise SettingError("table_slots", f"must be between {MIN_TABLE_SLOTS:,} and 2^30, not {slots:,}")


GROUP = CheckGroup(
    "tables",
    "lookups in simulated tables (chaining, linear, quadratic, double hashing, Robin Hood)",
    (
        Check(
            "probe_cost",
            _probe,
            regular=_probe_regular,
            null_law="conservative_combined",
            help="probes per lookup in simulated tables",
            figure="probes",
        ),
    ),
    settings=(
        Setting(
            "table_kinds",
            "checks",
            "Simulated table organisation (repeatable). Default: all five.",
            default=(),
            kind="choice",
            choices=TABLE_KINDS,
            repeatable=True,
            flag="--table-kind",
        ),
        Setting(
            "loads",
            "checks",
            "Load factor at which simulated lookups are measured (repeatable). Default: 0.25 0.5 0.75 0.9 0.95.",
            default=(),
            kind="float",
            minimum=0,
            maximum=1,
            open_range=True,
            repeatable=True,
            flag="--load",
            metavar="L",
        ),
        Setting(
            "table_slots",
            "checks",
            "Slots of the simulated tables. Default: the largest power of two up to 2^18 that the keys fill.",
            kind="size",
            metavar="M",
        ),
        Setting(
            "probe_cost_excess",
            "thresholds",
            "Fail above this relative excess of probes per lookup in a simulated table over an ideal hash.",
            default=0.1,
            kind="float",
            minimum=0,
            aliases=("--max-probe-excess",),
        ),
    ),
    accumulators=first_values,
    conclude=_conclude,
    warm_up=_warm_up,
    prepare=_prepare,
)
