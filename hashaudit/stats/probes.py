"""``probe_cost``: what lookups cost when the user's hash values fill a simulated table, against an ideal hash.

For each table kind the values are inserted into one table (see :mod:`hashaudit.tables.simulate`) and the mean
probes of a successful and of an unsuccessful search are measured at each load factor of the grid. The reference
is the same simulation fed with uniformly random values of the same width (an ideal hash: simple uniform
hashing), in a table of the same size and scheme — exact for finite tables, where the classic formulas are
limits — and the formulas of Knuth (TAOCP vol. 3 §6.4, via :func:`hashaudit.stats.theory.expected_probes`) are
reported beside it.

The sampling error of a mean comes from batch means: the table is cut into up to 64 runs of home slots, each at
least 256 slots long (``hashaudit.tables.simulate.region_count``), whose
mean costs are nearly independent (a cluster rarely crosses the edge of a region thousands of slots long). Each
(load, search) cell gets a Welch t-test of the two sets of region means; the check's p-value is the smallest
cell p-value times the number of cells (Bonferroni within the check, Holm across the audit). The effect is the
largest relative excess of a cell: 0.1 means lookups cost 10 % more probes than with an ideal hash.

References
----------
B. L. Welch, "The generalization of Student's problem when several different population variances are
involved", Biometrika 34 (1947) 28-35.
A. M. Law, W. D. Kelton, Simulation Modeling and Analysis, 3rd ed., §9.5.3 (batch means).
"""

from __future__ import annotations

import math

import numpy as np

from hashaudit.stats._lazy import special
from hashaudit.stats._memo import remembered
from hashaudit.stats.outcome import Effect, FitTest
from hashaudit.tables.growth import GrowthPolicy, GrowthResult, insertion_orders, replay_growth
from hashaudit.tables.simulate import ProbeCell, simulate

MIN_MOMENT_SLOTS = 1 << 10
THEORY_KIND = {"chaining": "chaining", "linear": "linear", "quadratic": "quadratic", "double": "double"}


def _ideal(width: int, kind: str, slots: int, scheme: str, loads: tuple[float, ...], seed: int) -> tuple:
    bits = min(width, 64)
    needed = int(max(loads) * slots)
    rng = np.random.default_rng([seed, bits, slots, len(kind), sum(map(ord, kind)), 0x9E0BE])
    values = rng.integers(0, (1 << bits) - 1, size=needed, dtype=np.uint64, endpoint=True)
    return tuple(simulate(values, width, kind, slots, scheme, loads))


def ideal_cells(width: int, kind: str, slots: int, scheme: str, loads: tuple[float, ...], seed: int) -> list[ProbeCell]:
    """The same simulation with uniformly random values (seeded; computed once per machine, so several hash
    functions of one width, and later audits of the same sizes, share it: :mod:`hashaudit.stats._memo`)."""
    key = (int(width), kind, int(slots), scheme, tuple(loads), int(seed))
    return list(remembered("ideal_cells", key, lambda: _ideal(*key)))


def _ideal_replay(width: int, kind: str, policy: GrowthPolicy, scheme: str, keys: int, seed: int) -> GrowthResult:
    bits = min(width, 64)
    rng = np.random.default_rng([seed, bits, keys, sum(map(ord, kind + policy.label)), 0x6E0])
    values = rng.integers(0, (1 << bits) - 1, size=keys, dtype=np.uint64, endpoint=True)
    return replay_growth(values, width, kind, policy, scheme)


def ideal_replay(width: int, kind: str, policy: GrowthPolicy, scheme: str, keys: int, seed: int) -> GrowthResult:
    """``replay_growth`` of as many random values (seeded; computed once per machine, like ``ideal_cells``)."""
    key = (int(width), kind, policy, scheme, int(keys), int(seed))
    return remembered("ideal_replay", key, lambda: _ideal_replay(*key))


def _theory(kind: str, load: float) -> dict[str, float | None]:
    from hashaudit.stats.theory import expected_probes

    probes = expected_probes(load)
    if kind == "robin-hood":  # the same total displacement as linear probing; no classic miss formula
        return {"hit": probes["linear"]["hit"], "miss": None}
    values = probes[THEORY_KIND[kind]]
    return {"hit": values["hit"] if math.isfinite(values["hit"]) else None, "miss": values["miss"]}


def _welch(observed: np.ndarray, ideal: np.ndarray) -> tuple[float, float, float]:
    """t statistic and the upper and lower one-sided p-values of mean(observed) > mean(ideal)."""
    a = observed[np.isfinite(observed)]
    b = ideal[np.isfinite(ideal)]
    if len(a) < 2 or len(b) < 2:
        return math.nan, 1.0, 1.0
    va, vb = a.var(ddof=1) / len(a), b.var(ddof=1) / len(b)
    diff = float(a.mean() - b.mean())
    if va + vb == 0:
        if diff == 0:
            return 0.0, 1.0, 1.0
        return math.copysign(math.inf, diff), float(diff <= 0), float(diff >= 0)
    t = diff / math.sqrt(va + vb)
    df = (va + vb) ** 2 / ((va**2 / (len(a) - 1) if va else 0.0) + (vb**2 / (len(b) - 1) if vb else 0.0))
    # Student's t tails from scipy.special (what scipy.stats.t computes, without importing scipy.stats)
    return t, float(special.stdtr(df, -t)), float(special.stdtr(df, t))


def probe_tests(cells: list[ProbeCell], ideal: list[ProbeCell], scheme: str) -> list[FitTest]:
    """The ``probe_cost`` test of one table kind: the user's costs against the ideal hash's, load by load.

    Parameters
    ----------
    cells : list of ProbeCell
        The simulation with the hash function's values (one kind, increasing loads).
    ideal : list of ProbeCell
        The same simulation with random values (:func:`ideal_cells`), at least the same loads.
    scheme : str
        How values picked their home slot (for the details).

    Returns
    -------
    list of FitTest
        One test (none when the values filled no load of the grid). ``observed`` and ``expected`` are the mean
        probes of the costliest cell relative to the ideal, ``statistic`` its Welch t; ``details`` has the table
        kind, slots, the load of that cell and a row per load with means, 99th percentiles and maxima of both
        searches, the ideal and the formula, and their ratios.
    """
    if not cells:
        return []
    by_load = {c.load: c for c in ideal}
    pairs = [(cell, by_load[cell.load]) for cell in cells]
    rows = []
    for cell, twin in pairs:
        theory = _theory(cell.kind, cell.load)
        row: dict = {"load": cell.load, "keys": cell.keys}
        for search in ("hit", "miss"):
            mine, best = getattr(cell, f"{search}_mean"), getattr(twin, f"{search}_mean")
            formula = theory[search]
            row[search] = {
                "mean": mine,
                "p99": getattr(cell, f"{search}_p99"),
                "max": getattr(cell, f"{search}_max"),
                "ideal_mean": best,
                "ideal_p99": getattr(twin, f"{search}_p99"),
                "ideal_max": getattr(twin, f"{search}_max"),
                "theory_mean": formula,
                "ratio_to_ideal": mine / best,
                "ratio_to_theory": None if formula is None else mine / formula,
            }
        row["insert_probes"] = cell.insert_probes
        row["insert_worst"] = cell.insert_worst
        rows.append(row)
    worst = _worst_cell(pairs)
    cell, search = worst[1], worst[3]
    details = {
        "table_kind": cell.kind,
        "load": cell.load,
        "search": search,
        "slots": cell.slots,
        "scheme": scheme,
        "loads": rows,
    }
    method = f"Welch t on {len(cell.hit_regions)} region means per cell against random values"
    return [_cost_test("probe_cost", worst, method, details)]


def _cost_test(name: str, worst: tuple, method: str, details: dict) -> FitTest:
    """The test of the costliest cell found by ``_worst_cell``: its excess as the effect, the smallest cell p-value
    times the number of cells (Bonferroni) as the p-value."""
    excess, cell, twin, search, t, p_up, p_low = worst
    k = len(p_up)
    mine, best = getattr(cell, f"{search}_mean"), getattr(twin, f"{search}_mean")
    lookup = "successful" if search == "hit" else "unsuccessful"
    effect = Effect("probe_cost_excess", excess, mine, best, f"probes per {lookup} lookup")
    return FitTest(
        name,
        float(t) if math.isfinite(t) else 0.0,
        best,
        mine,
        min(1.0, k * min(p_up)),
        min(1.0, k * min(p_low)),
        f"{method}, Bonferroni over {k}",
        effect,
        details,
    )


def _worst_cell(
    pairs: list[tuple[ProbeCell, ProbeCell]],
) -> tuple[float, ProbeCell, ProbeCell, str, float, list[float], list[float]]:
    """Over (observed, ideal) cell pairs: the largest relative excess with its cell, search and t, and every
    cell's upper and lower p-values."""
    worst: tuple[float, ProbeCell, ProbeCell, str, float] | None = None
    p_up, p_low = [], []
    for cell, twin in pairs:
        for search in ("hit", "miss"):
            mine, best = getattr(cell, f"{search}_mean"), getattr(twin, f"{search}_mean")
            t, up, low = _welch(getattr(cell, f"{search}_regions"), getattr(twin, f"{search}_regions"))
            p_up.append(up)
            p_low.append(low)
            excess = (mine - best) / best
            if worst is None or excess > worst[0]:
                worst = (excess, cell, twin, search, t)
    assert worst is not None
    return (*worst, p_up, p_low)


def growth_tests(observed: GrowthResult, ideal: GrowthResult) -> list[FitTest]:
    """The ``growth_cost`` test: lookups at each worst moment of a growing table (just before a resize, and the
    final table), against the same replay with random values.

    Moments in tables of fewer than ``MIN_MOMENT_SLOTS`` slots are reported but not tested (too few regions).
    The effect is the largest relative excess of probes per lookup over those moments (``probe_cost_excess``).
    """
    pairs = [
        (mine, best)
        for mine, best in zip(observed.moments, ideal.moments, strict=True)
        if mine.slots >= MIN_MOMENT_SLOTS
    ]
    if not pairs:
        return []
    worst = _worst_cell(pairs)
    cell, search = worst[1], worst[3]
    details = {
        "table_kind": observed.kind,
        "load": round(cell.load, 6),
        "search": search,
        "slots": cell.slots,
        "moment": "final table" if cell is observed.moments[-1] else "just before a resize",
        "growth": observed.to_dict(),
        "ideal": {
            "moments": [{"slots": m.slots, "hit_mean": m.hit_mean, "miss_mean": m.miss_mean} for m in ideal.moments],
            "insert_probes": ideal.insert_probes,
            "rehash_probes": ideal.rehash_probes,
        },
    }
    method = "Welch t on region means at each worst moment against random values"
    return [_cost_test("growth_cost", worst, method, details)]


def order_tests(
    kind: str,
    policy: str,
    totals: dict[str, int],
    random_totals: list[int],
    worst_insertions: dict[str, int] | None = None,
) -> list[FitTest]:
    """The ``order_hazard`` test: total probes to build a growing table from the keys in each order, against
    random orders.

    Parameters
    ----------
    kind, policy : str
        Table kind and growth policy (``FACTOR@LOAD``).
    totals : dict
        Total probes (insertions and rehashes) per named order (``hashaudit.tables.growth.ORDERS`` but random).
    random_totals : list of int
        Totals of several random orders (the reference distribution; at least 3).
    worst_insertions : dict, optional
        The costliest single insertion (or rehash move) per named order, for the details.

    Returns
    -------
    list of FitTest
        One test. The effect ``order_cost_ratio`` is the costliest order's total over the mean random total;
        p-values come from a Student t prediction interval of the random totals (``len - 1`` degrees of freedom),
        Bonferroni over the orders.
    """
    r = len(random_totals)
    mean = float(np.mean(random_totals))
    sd = float(np.std(random_totals, ddof=1)) * math.sqrt(1 + 1 / r)
    p_up, p_low = [], []
    rows = {}
    for name, total in totals.items():
        t = (total - mean) / sd if sd > 0 else math.copysign(math.inf, total - mean) if total != mean else 0.0
        p_up.append(float(special.stdtr(r - 1, -t)))
        p_low.append(float(special.stdtr(r - 1, t)))
        rows[name] = {"total_probes": int(total), "ratio_to_random": total / mean}
        if worst_insertions is not None:
            rows[name]["worst_insertion"] = int(worst_insertions[name])
    worst = max(totals, key=lambda name: totals[name])
    ratio = totals[worst] / mean
    k = len(totals)
    effect = Effect("order_cost_ratio", ratio, float(totals[worst]), mean, "probes to build the table, all keys")
    details = {
        "table_kind": kind,
        "growth": policy,
        "worst_order": worst,
        "orders": rows,
        "random_orders": r,
        "random_mean": mean,
    }
    method = f"Student t prediction interval of {r} random orders, Bonferroni over {k} orders"
    t_worst = (totals[worst] - mean) / sd if sd > 0 else 0.0
    return [
        FitTest(
            "order_hazard",
            t_worst,
            mean,
            float(totals[worst]),
            min(1.0, k * min(p_up)),
            min(1.0, k * min(p_low)),
            method,
            effect,
            details,
        )
    ]


RANDOM_ORDERS = 8
ORDER_PROBE_LIMIT = 64  # an order replay stops past this many times the random orders' mean probes


def order_hazard(
    values: np.ndarray, width: int, kind: str, policy: GrowthPolicy, scheme: str, slots: int, seed: int
) -> FitTest:
    """Replay the keys in every order of ``insertion_orders`` (and ``RANDOM_ORDERS`` random ones) into a growing
    table and test the totals."""

    def work(order: np.ndarray, limit: int | None = None) -> tuple[int, int, bool]:
        replay = replay_growth(
            values, width, kind, policy, scheme, order=order, measure_moments=False, probe_limit=limit
        )
        return replay.insert_probes + replay.rehash_probes, replay.insert_worst, replay.stopped

    orders = insertion_orders(values, width, slots, scheme, seed)
    rng = np.random.default_rng([seed, len(values), 0x0D3F])
    random_runs = [work(rng.permutation(len(values)))[:2] for _ in range(RANDOM_ORDERS)]
    # an order far costlier than random is stopped early: its total is then a lower bound, and enough to judge
    limit = ORDER_PROBE_LIMIT * int(np.mean([total for total, _ in random_runs]))
    full = {name: work(order, limit) for name, order in orders.items() if name != "random"}
    runs = {name: (total, high) for name, (total, high, _) in full.items()}
    totals = {name: total for name, (total, _) in runs.items()}
    worst = {name: high for name, (_, high) in runs.items()}
    (test,) = order_tests(kind, policy.label, totals, [total for total, _ in random_runs], worst)
    test.details["random_worst_insertion"] = max(high for _, high in random_runs)
    test.details["stopped_orders"] = [name for name, (_, _, stopped) in full.items() if stopped]
    return test
