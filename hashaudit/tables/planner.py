"""Capacity planning: the table size and maximum load factor that meet a lookup-cost or collision target.

Targets:

``mean-hit=X`` / ``mean-miss=X``  mean probes of a successful / unsuccessful search at most X
``p99-hit=X`` / ``p99-miss=X``    99th percentile of probes at most X
``no-collision=P``                probability that no two keys share a bucket at least P (a table of m slots)

Mean targets are solved on the classic formulas (Knuth, TAOCP vol. 3 §6.4, :func:`expected_probes`) where one
exists; percentiles, and Robin Hood misses, on seeded simulations with random values (an ideal hash) over a grid
of load factors. A size is then the smallest table of the chosen family (powers of two, primes, or any) that keeps
the keys at or below that load. Given the hash values of real keys, the recommended design is also simulated with
them, so theory, ideal and measured figures can be read side by side. The width of the hash itself has a birthday
bound too: how many keys before two of them more likely than not share the whole value.
"""

from __future__ import annotations

import functools
import math
import re
from dataclasses import dataclass

import numpy as np

from hashaudit.errors import UsageError
from hashaudit.tables.simulate import TABLE_KINDS, simulate
from hashaudit.tables.sizes import prime_above

TARGETS = ("mean-hit", "mean-miss", "p99-hit", "p99-miss", "no-collision")
SIZE_FAMILIES = ("pow2", "prime", "any")
GRID = tuple(round(0.05 * i, 2) for i in range(1, 20))  # 0.05 … 0.95
CHAINING_GRID = (*GRID, 1.0, 1.25, 1.5, 2.0, 3.0, 4.0)
SIM_SLOTS = 1 << 16


@dataclass(frozen=True)
class Target:
    """A planning target: ``name`` from ``TARGETS`` and its bound."""

    name: str
    value: float


def parse_target(text: str) -> Target:
    """``NAME=VALUE``, e.g. ``mean-miss=4`` or ``no-collision=0.99``."""
    match = re.fullmatch(r"\s*([a-z0-9-]+)\s*=\s*([0-9.eE+-]+)\s*", text)
    if not match or match.group(1) not in TARGETS:
        raise UsageError(f"--target takes NAME=VALUE with NAME one of {', '.join(TARGETS)}, not {text!r}")
    try:
        value = float(match.group(2))
    except ValueError:
        raise UsageError(f"--target {text!r}: {match.group(2)!r} is not a number") from None
    name = match.group(1)
    if name == "no-collision" and not 0 < value < 1:
        raise UsageError(f"--target no-collision takes a probability between 0 and 1, not {value}")
    if name != "no-collision" and not value >= 1:
        raise UsageError(f"--target {name} takes a number of probes of at least 1, not {value}")
    return Target(name, value)


def _formula(kind: str, search: str, load: float) -> float | None:
    from hashaudit.stats.theory import expected_probes

    if kind == "robin-hood":
        return expected_probes(load)["linear"]["hit"] if search == "hit" else None
    return expected_probes(load)[kind][search]


@functools.lru_cache(maxsize=32)
def ideal_curve(kind: str, seed: int = 0) -> tuple[tuple[float, float, float, float, float], ...]:
    """(load, mean hit, p99 hit, mean miss, p99 miss) of random values over the load grid, in ``SIM_SLOTS``
    slots (seeded; cached)."""
    loads = CHAINING_GRID if kind == "chaining" else GRID
    rng = np.random.default_rng([seed, SIM_SLOTS, sum(map(ord, kind))])
    values = rng.integers(0, 2**64 - 1, size=int(max(loads) * SIM_SLOTS), dtype=np.uint64, endpoint=True)
    cells = simulate(values, 64, kind, SIM_SLOTS, "mask", loads)
    return tuple((c.load, c.hit_mean, c.hit_p99, c.miss_mean, c.miss_p99) for c in cells)


def max_load(kind: str, target: Target, seed: int = 0) -> tuple[float, str]:
    """The largest load factor whose cost meets ``target``, and how it was found (``formula`` or
    ``simulation``). Zero when even the emptiest table misses the target."""
    if kind not in TABLE_KINDS:
        raise UsageError(f"unknown table kind {kind!r}; choose from {', '.join(TABLE_KINDS)}")
    if target.name == "no-collision":
        raise UsageError("no-collision is a target on the table size, not on the load factor")
    stat, search = target.name.split("-")
    if stat == "mean" and _formula(kind, search, 0.5) is not None:
        top = 64.0 if kind == "chaining" else 1.0
        low, high = 0.0, top
        for _ in range(80):  # every formula grows with the load: bisection
            mid = (low + high) / 2
            cost = _formula(kind, search, mid)
            if cost is not None and cost <= target.value:
                low = mid
            else:
                high = mid
        return low, "formula"
    column = {"mean-hit": 1, "p99-hit": 2, "mean-miss": 3, "p99-miss": 4}[target.name]
    best = 0.0
    for row in ideal_curve(kind, seed):
        if row[column] <= target.value:
            best = row[0]
        else:
            break
    return best, "simulation"


def table_size(keys: int, load: float, family: str) -> int:
    """The smallest table of ``family`` holding ``keys`` at load at most ``load``."""
    if family not in SIZE_FAMILIES:
        raise UsageError(f"--sizes takes one of {', '.join(SIZE_FAMILIES)}, not {family!r}")
    need = max(1, math.ceil(keys / load))
    if family == "pow2":
        return 1 << (need - 1).bit_length()
    if family == "prime":
        return prime_above(need)
    return need


def slots_for_no_collision(keys: int, probability: float, family: str) -> int:
    """The smallest table of ``family`` in which ``keys`` collide nowhere with at least ``probability``."""
    from hashaudit.stats.theory import log_p_no_collision

    goal = math.log(probability)
    low, high = max(keys, 1), max(keys, 1)
    while log_p_no_collision(high, keys) < goal:
        low, high = high, high * 2
    while low < high:  # the probability grows with the table
        mid = (low + high) // 2
        if log_p_no_collision(mid, keys) >= goal:
            high = mid
        else:
            low = mid + 1
    if family == "any":
        return high
    return table_size(high, 1.0, family)


def recommend(
    keys: int,
    kind: str,
    target: Target,
    family: str = "pow2",
    width: int | None = None,
    values: np.ndarray | None = None,
    value_width: int = 64,
    seed: int = 0,
) -> dict:
    """Recommend a table for ``keys`` keys; JSON-able.

    Parameters
    ----------
    keys : int
        Number of (distinct) keys.
    kind : str
        Table organisation (``TABLE_KINDS``).
    target : Target
    family : {"pow2", "prime", "any"}
        Which table sizes to choose from.
    width : int, optional
        Output width of the hash in bits, for the birthday bound of the whole value.
    values : numpy.ndarray of uint64, optional
        Hash values of the first distinct keys of a real source, to simulate the recommended design with.
    value_width : int
        Width of those values.
    seed : int
        Seed of the simulations with random values.
    """
    from hashaudit.stats.theory import expected_probes, keys_for_even_odds, p_no_collision

    if keys < 1:
        raise UsageError(f"the plan needs at least one key, not {keys}")
    out: dict = {"keys": keys, "table_kind": kind, "target": {"name": target.name, "value": target.value}}
    if target.name == "no-collision":
        slots = slots_for_no_collision(keys, target.value, family)
        out.update({"slots": slots, "load": keys / slots, "max_load": None, "found_by": "formula"})
    else:
        limit, how = max_load(kind, target, seed)
        if limit <= 0:
            raise UsageError(f"no load factor meets {target.name}={target.value:g} for {kind} tables")
        slots = table_size(keys, limit, family)
        out.update({"slots": slots, "load": keys / slots, "max_load": limit, "found_by": how})
    load = out["load"]
    if kind != "chaining" and load >= 1:
        raise UsageError(f"{keys:,} keys do not fit in {slots:,} slots of an open-addressing table")
    theory = expected_probes(load)
    out["theory"] = {
        "hit": _formula(kind, "hit", load) if kind != "robin-hood" else theory["linear"]["hit"],
        "miss": _formula(kind, "miss", load),
        "p_no_collision": p_no_collision(slots, keys),
    }
    sim_slots = min(slots, SIM_SLOTS) if family == "pow2" or slots <= SIM_SLOTS else SIM_SLOTS
    if kind == "quadratic" and sim_slots & (sim_slots - 1):
        sim_slots = SIM_SLOTS
    rng = np.random.default_rng([seed, sim_slots, 0x91A])
    ideal = simulate(
        rng.integers(0, 2**64 - 1, size=int(load * sim_slots), dtype=np.uint64, endpoint=True),
        64,
        kind,
        sim_slots,
        "mask" if sim_slots & (sim_slots - 1) == 0 else "mod",
        (load,),
    )
    out["ideal"] = _cell_dict(ideal[0], sim_slots) if ideal else None
    out["measured"] = None
    if values is not None and len(values):
        measured_slots = slots
        while int(load * measured_slots) > len(values) and measured_slots > 1024:
            measured_slots //= 2  # keep the load; the slots the real keys can fill
        if kind in ("quadratic", "double") and measured_slots & (measured_slots - 1):
            measured_slots = 1 << (measured_slots.bit_length() - 1)
        scheme = "mask" if measured_slots & (measured_slots - 1) == 0 else "mod"
        cells = simulate(values, value_width, kind, measured_slots, scheme, (load,))
        out["measured"] = _cell_dict(cells[0], measured_slots) if cells else None
    if width is not None:
        out["hash_width"] = {
            "bits": width,
            "keys_for_even_odds": keys_for_even_odds(2.0**width),
            "p_no_full_collision": p_no_collision(2.0**width, keys),
        }
    return out


def _cell_dict(cell, slots: int) -> dict:  # type: ignore[no-untyped-def]
    return {
        "slots": slots,
        "keys": cell.keys,
        "hit_mean": cell.hit_mean,
        "hit_p99": cell.hit_p99,
        "miss_mean": cell.miss_mean,
        "miss_p99": cell.miss_p99,
    }
