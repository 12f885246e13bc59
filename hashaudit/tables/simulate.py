"""Simulated hash tables: replay hash values into the table designs people run and measure what lookups cost.

Five organisations, each filled in the order the values are given and measured at a grid of load factors:

``chaining``    separate chaining, new keys appended to their bucket's list
``linear``      linear probing (first come, first served)
``quadratic``   quadratic probing with triangular steps h, h+1, h+3, h+6, ... (visits every slot of a power-of-two
                table)
``double``      double hashing: the step comes from the upper half of the hash value (bits 32-63 of a 64-bit
                value, 16-31 of a 32-bit one), made odd for a power-of-two table or taken in [1, m-1] for a prime
                one
``robin-hood``  linear probing where an arriving key takes the slot of a resident closer to its home, and a
                lookup stops as soon as it passes a resident closer to its home than the probe is to the key's

Probes are counted the usual way: a successful search costs one probe per slot (or list entry) examined up to and
including the key; an unsuccessful one one per slot examined up to the empty slot that ends it (for chaining, the
list's length, or 1 for an empty list). Successful costs are over every key in the table; unsuccessful ones over
every possible home slot (a lookup of a random absent key), or a fixed, evenly spread sample of 2^20 of them in
larger tables; for double hashing the absent key's step is drawn by a seeded generator.

The expected costs under uniform hashing are in :func:`hashaudit.stats.theory.expected_probes`.

References
----------
D. E. Knuth, The Art of Computer Programming, vol. 3, 2nd ed., §6.4 (Algorithms C, L and D; quadratic and
triangular probing in exercises 6.4-20 and 6.4-21, from memory).
P. Celis, P.-A. Larson, J. I. Munro, "Robin Hood hashing", FOCS 1985.
"""

from __future__ import annotations

import hashaudit._numba_setup  # noqa: F401

# isort: split

from dataclasses import asdict, dataclass, field
from functools import lru_cache

import numpy as np
from numba import njit, uint64

from hashaudit.errors import UsageError
from hashaudit.tables.schemes import bucket_index, is_power_of_two
from hashaudit.tables.sizes import is_prime

TABLE_KINDS = ("chaining", "linear", "quadratic", "double", "robin-hood")
DEFAULT_LOADS = (0.25, 0.5, 0.75, 0.9, 0.95)
MISS_STARTS = 1 << 20  # unsuccessful lookups measured from at most this many home slots
HISTOGRAM_BINS = 1 << 16  # probe counts from here on share the last bin (the mean and maximum stay exact)
REGIONS = 64  # the table is cut into at most this many runs of slots, whose mean costs give the sampling error
REGION_SLOTS = 256  # ...each at least this long: shorter runs are not independent under linear probing near full
# load (measured: 32-slot regions gave p <= 0.01 in 11 % of null runs of 2^11-slot tables; 256-slot ones 1 %)


def region_count(slots: int) -> int:
    """How many regions a table of ``slots`` slots is cut into for its batch means."""
    return max(2, min(REGIONS, slots // REGION_SLOTS))


def kind_fits(kind: str, slots: int) -> str | None:
    """Why ``kind`` cannot run in a table of ``slots`` slots, or None when it can."""
    if kind not in TABLE_KINDS:
        raise UsageError(f"unknown table kind {kind!r}; choose from {', '.join(TABLE_KINDS)}")
    if kind == "quadratic" and not is_power_of_two(slots):
        return "triangular probing reaches every slot only in a power-of-two table"
    if kind == "double" and not (is_power_of_two(slots) or is_prime(slots)):
        return "double hashing reaches every slot only in a power-of-two or prime table"
    return None


# ------------------------------------------------------------------------------------------------------------
# kernels (each inserts keys order[start:stop] and returns the probes spent and the largest insertion)
# ------------------------------------------------------------------------------------------------------------


@njit(cache=True, nogil=True)
def _insert_chaining(homes, order, start, stop, lengths, cost):  # pragma: no cover - compiled
    total = 0
    worst = 0
    for j in range(start, stop):
        i = order[j]
        b = homes[i]
        lengths[b] += 1
        c = lengths[b]
        cost[i] = c
        total += c
        if c > worst:
            worst = c
    return total, worst


@njit(cache=True, nogil=True)
def _insert_linear(homes, order, start, stop, slots, cost):  # pragma: no cover - compiled
    m = slots.shape[0]
    total = 0
    worst = 0
    for j in range(start, stop):
        i = order[j]
        p = homes[i]
        c = 1
        while slots[p] >= 0:
            p += 1
            if p == m:
                p = 0
            c += 1
        slots[p] = i
        cost[i] = c
        total += c
        if c > worst:
            worst = c
    return total, worst


@njit(cache=True, nogil=True)
def _insert_robin_hood(homes, order, start, stop, slots):  # pragma: no cover - compiled
    m = slots.shape[0]
    total = 0
    worst = 0
    for j in range(start, stop):
        i = order[j]
        current = i
        p = homes[i]
        d = 0
        c = 1
        while True:
            resident = slots[p]
            if resident < 0:
                slots[p] = current
                break
            rd = p - homes[resident]
            if rd < 0:
                rd += m
            if rd < d:  # the resident is closer to home: the arriving key takes its slot
                slots[p] = current
                current = resident
                d = rd
            p += 1
            if p == m:
                p = 0
            d += 1
            c += 1
        total += c
        if c > worst:
            worst = c
    return total, worst


@njit(cache=True, nogil=True)
def _insert_quadratic(homes, order, start, stop, slots, cost):  # pragma: no cover - compiled
    mask = slots.shape[0] - 1
    total = 0
    worst = 0
    for j in range(start, stop):
        i = order[j]
        p = homes[i]
        c = 1
        while slots[p] >= 0:
            p = (p + c) & mask  # triangular: the c-th step moves c slots on
            c += 1
        slots[p] = i
        cost[i] = c
        total += c
        if c > worst:
            worst = c
    return total, worst


@njit(cache=True, nogil=True)
def _insert_double(homes, steps, order, start, stop, slots, cost):  # pragma: no cover - compiled
    m = slots.shape[0]
    total = 0
    worst = 0
    for j in range(start, stop):
        i = order[j]
        p = homes[i]
        s = steps[i]
        c = 1
        while slots[p] >= 0:
            p += s
            if p >= m:
                p -= m
            c += 1
        slots[p] = i
        cost[i] = c
        total += c
        if c > worst:
            worst = c
    return total, worst


@njit(cache=True, nogil=True)
def _robin_hood_hits(homes, slots, hist, regions):  # pragma: no cover - compiled
    m = slots.shape[0]
    for p in range(m):
        resident = slots[p]
        if resident >= 0:
            d = p - homes[resident]
            if d < 0:
                d += m
            hist[min(d + 1, hist.shape[0] - 1)] += 1
            regions[homes[resident] * regions.shape[0] // m] += d + 1


@njit(cache=True, nogil=True)
def _misses_chaining(lengths, stride, hist, regions):  # pragma: no cover - compiled
    worst = 0
    m = lengths.shape[0]
    for b in range(0, m, stride):
        c = max(lengths[b], 1)
        hist[min(c, hist.shape[0] - 1)] += 1
        worst = max(worst, c)
        regions[b * regions.shape[0] // m] += c
    return worst


@njit(cache=True, nogil=True)
def _misses_linear(slots, stride, hist, regions):  # pragma: no cover - compiled
    """From every ``stride``-th slot: probes to the first empty slot, included (one backward scan)."""
    worst = 0
    m = slots.shape[0]
    empty = 0
    while slots[empty] >= 0:
        empty += 1
    run = 0
    p = empty
    for _ in range(m):
        p -= 1
        if p < 0:
            p += m
        if slots[p] >= 0:
            run += 1
        else:
            run = 0
        if p % stride == 0:
            hist[min(run + 1, hist.shape[0] - 1)] += 1
            worst = max(worst, run + 1)
            regions[p * regions.shape[0] // m] += run + 1
    return worst


@njit(cache=True, nogil=True)
def _misses_robin_hood(homes, slots, stride, hist, regions):  # pragma: no cover - compiled
    worst = 0
    m = slots.shape[0]
    for s in range(0, m, stride):
        p = s
        d = 0
        c = 1
        while True:
            resident = slots[p]
            if resident < 0:
                break
            rd = p - homes[resident]
            if rd < 0:
                rd += m
            if rd < d:
                break
            p += 1
            if p == m:
                p = 0
            d += 1
            c += 1
        hist[min(c, hist.shape[0] - 1)] += 1
        worst = max(worst, c)
        regions[s * regions.shape[0] // m] += c
    return worst


@njit(cache=True, nogil=True)
def _misses_quadratic(slots, stride, hist, regions):  # pragma: no cover - compiled
    worst = 0
    m = slots.shape[0]
    mask = m - 1
    for s in range(0, slots.shape[0], stride):
        p = s
        c = 1
        while slots[p] >= 0:
            p = (p + c) & mask
            c += 1
        hist[min(c, hist.shape[0] - 1)] += 1
        worst = max(worst, c)
        regions[s * regions.shape[0] // m] += c
    return worst


@njit(cache=True, nogil=True)
def _splitmix(x):  # pragma: no cover - compiled
    z = x + uint64(0x9E3779B97F4A7C15)
    z = (z ^ (z >> uint64(30))) * uint64(0xBF58476D1CE4E5B9)
    z = (z ^ (z >> uint64(27))) * uint64(0x94D049BB133111EB)
    return z ^ (z >> uint64(31))


@njit(cache=True, nogil=True)
def _misses_double(slots, stride, power_of_two, hist, regions):  # pragma: no cover - compiled
    """Absent keys start at every ``stride``-th slot with a step from SplitMix64 of the slot (fixed sequence)."""
    worst = 0
    m = slots.shape[0]
    for s in range(0, m, stride):
        r = _splitmix(uint64(s))
        if power_of_two:
            step = np.int64((r | uint64(1)) & uint64(m - 1))
        else:
            step = np.int64(uint64(1) + r % uint64(m - 1))
        p = s
        c = 1
        while slots[p] >= 0:
            p += step
            if p >= m:
                p -= m
            c += 1
        hist[min(c, hist.shape[0] - 1)] += 1
        worst = max(worst, c)
        regions[s * regions.shape[0] // m] += c
    return worst


# ------------------------------------------------------------------------------------------------------------
# driver
# ------------------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class ProbeCell:
    """What lookups cost in one table at one load factor.

    Attributes
    ----------
    kind : str
    load : float
        Keys over slots (the grid value; ``keys`` = floor(load × slots)).
    keys, slots : int
    hit_mean, hit_p99, hit_max : float
        Probes of a successful search, over every key in the table.
    miss_mean, miss_p99, miss_max : float
        Probes of an unsuccessful search, over the measured home slots.
    insert_probes : int
        Probes spent inserting every key so far (a measure of the work of building the table).
    insert_worst : int
        The costliest single insertion so far.
    hit_regions, miss_regions : numpy.ndarray
        Mean cost per region of ``region_count(slots)`` equal runs of home slots: nearly independent batch means (a cluster
        rarely crosses a region's edge), from which tests of fit take the sampling error of the means.
    """

    kind: str
    load: float
    keys: int
    slots: int
    hit_mean: float
    hit_p99: float
    hit_max: float
    miss_mean: float
    miss_p99: float
    miss_max: float
    insert_probes: int
    insert_worst: int
    hit_regions: np.ndarray = field(repr=False, compare=False, default_factory=lambda: np.zeros(0))
    miss_regions: np.ndarray = field(repr=False, compare=False, default_factory=lambda: np.zeros(0))

    def to_dict(self) -> dict:
        """JSON-able form (without the per-region means)."""
        return {k: v for k, v in asdict(self).items() if not k.endswith("_regions")}


def _summary(hist: np.ndarray, total: float, worst: float) -> tuple[float, float, float]:
    """Mean, 99th percentile and maximum of probe counts: ``hist[c]`` lookups cost c probes (the last bin holds
    every cost from there on), ``total`` is the exact sum of the costs and ``worst`` the exact maximum."""
    count = int(hist.sum())
    if count == 0:
        return float("nan"), float("nan"), float("nan")
    p99 = float(np.searchsorted(np.cumsum(hist), 0.99 * count))
    return total / count, p99, worst


def new_table(kind: str, slots: int) -> np.ndarray:
    """An empty table: chain lengths for chaining, else slots holding key indices (-1 = empty)."""
    return np.zeros(slots, dtype=np.int64) if kind == "chaining" else np.full(slots, -1, dtype=np.int64)


def insert_keys(
    kind: str,
    homes: np.ndarray,
    steps: np.ndarray,
    order: np.ndarray,
    start: int,
    stop: int,
    table: np.ndarray,
    cost: np.ndarray,
) -> tuple[int, int]:
    """Insert keys ``order[start:stop]`` (indices into ``homes``, ``steps`` and ``cost``); returns the probes spent
    and the costliest insertion. ``cost[i]`` becomes key i's successful-search cost (not for Robin Hood, whose keys
    move: see ``hit_histogram``)."""
    if kind == "chaining":
        spent, high = _insert_chaining(homes, order, start, stop, table, cost)
    elif kind == "linear":
        spent, high = _insert_linear(homes, order, start, stop, table, cost)
    elif kind == "robin-hood":
        spent, high = _insert_robin_hood(homes, order, start, stop, table)
    elif kind == "quadratic":
        spent, high = _insert_quadratic(homes, order, start, stop, table, cost)
    else:
        spent, high = _insert_double(homes, steps, order, start, stop, table, cost)
    return int(spent), int(high)


def double_steps(values: np.ndarray, width: int, slots: int) -> np.ndarray:
    """The double-hashing step of every value: from the upper half of the value, odd for a power-of-two table and
    in [1, m-1] for a prime one."""
    upper = values >> np.uint64(min(width, 64) // 2)
    if is_power_of_two(slots):
        return ((upper | np.uint64(1)) & np.uint64(slots - 1)).astype(np.int64)
    return (np.uint64(1) + upper % np.uint64(slots - 1)).astype(np.int64)


@lru_cache(maxsize=256)
def _starts_per_region(slots: int, stride: int, regions: int) -> np.ndarray:
    """How many of the unsuccessful lookups' start slots (every ``stride``-th) fall in each region."""
    starts = np.bincount(np.arange(0, slots, stride) * regions // slots, minlength=regions)
    starts.setflags(write=False)
    return starts


def measure(
    kind: str,
    load: float,
    homes: np.ndarray,
    table: np.ndarray,
    cost: np.ndarray,
    present: np.ndarray | slice,
    insert_probes: int = 0,
    insert_worst: int = 0,
    home_regions: np.ndarray | None = None,
) -> ProbeCell:
    """Lookup costs in a filled table; ``present`` are the indices of the keys in it (a slice for the first keys
    of ``homes``). ``home_regions``, when given, is ``homes * region_count(m) // m``, computed once for the
    measures of one table."""
    slots = len(table)
    stride = max(1, slots // MISS_STARTS)
    regions = region_count(slots)
    present_cost = cost[present]
    region_of_home = home_regions[present] if home_regions is not None else homes[present] * regions // slots
    keys_per_region = np.bincount(region_of_home, minlength=regions)
    bins = min(slots + 2, HISTOGRAM_BINS)
    if kind == "robin-hood":
        hits = np.zeros(bins, dtype=np.int64)
        hit_sums = np.zeros(regions, dtype=np.int64)
        _robin_hood_hits(homes, table, hits, hit_sums)
    else:
        hits = np.bincount(present_cost)
        hit_sums = np.bincount(region_of_home, weights=present_cost, minlength=regions)
    misses = np.zeros(bins, dtype=np.int64)
    miss_sums = np.zeros(regions, dtype=np.int64)
    if kind == "chaining":
        miss_worst = _misses_chaining(table, stride, misses, miss_sums)
    elif kind == "linear":
        miss_worst = _misses_linear(table, stride, misses, miss_sums)
    elif kind == "robin-hood":
        miss_worst = _misses_robin_hood(homes, table, stride, misses, miss_sums)
    elif kind == "quadratic":
        miss_worst = _misses_quadratic(table, stride, misses, miss_sums)
    else:
        miss_worst = _misses_double(table, stride, is_power_of_two(slots), misses, miss_sums)
    starts_per_region = _starts_per_region(slots, stride, regions)
    if kind == "robin-hood":
        occupied = np.flatnonzero(table >= 0)
        hit_worst = float(((occupied - homes[table[occupied]]) % slots).max() + 1) if len(occupied) else 0.0
    else:
        hit_worst = float(present_cost.max()) if len(present_cost) else 0.0
    hit_mean, hit_p99, hit_max = _summary(hits, float(hit_sums.sum()), hit_worst)
    miss_mean, miss_p99, miss_max = _summary(misses, float(miss_sums.sum()), float(miss_worst))
    with np.errstate(invalid="ignore", divide="ignore"):
        hit_regions = hit_sums / keys_per_region
        miss_regions = miss_sums / starts_per_region
    return ProbeCell(
        kind,
        load,
        len(present_cost),
        slots,
        hit_mean,
        hit_p99,
        hit_max,
        miss_mean,
        miss_p99,
        miss_max,
        insert_probes,
        insert_worst,
        hit_regions,
        miss_regions,
    )


def simulate(
    values: np.ndarray,
    width: int,
    kind: str,
    slots: int,
    scheme: str,
    loads: tuple[float, ...] = DEFAULT_LOADS,
) -> list[ProbeCell]:
    """Insert ``values`` (in their order) into a table of ``slots`` slots and measure lookups at every load.

    Parameters
    ----------
    values : numpy.ndarray of uint64
        Hash values of distinct keys, in insertion order; at least floor(max(loads) × slots) of them are used.
    width : int
        Output width of the hash (32, 64 or 128; 128-bit values are given by their low word).
    kind : str
        One of ``TABLE_KINDS``.
    slots : int
        Table size m (power of two for ``quadratic``; power of two or prime for ``double``).
    scheme : str
        How a value picks its home slot (``mask``, ``high``, ``mod``, ``range``).
    loads : tuple of float
        Load factors in (0, 1) for open addressing (chaining takes any positive value), increasing.

    Returns
    -------
    list of ProbeCell, one per load that the values can fill.
    """
    why = kind_fits(kind, slots)
    if why is not None:
        raise UsageError(f"{kind} in {slots:,} slots: {why}")
    if list(loads) != sorted(loads) or any(x <= 0 for x in loads):
        raise UsageError(f"loads must be positive and increasing, not {loads}")
    if kind != "chaining" and any(x >= 1 for x in loads):
        raise UsageError(f"{kind}: an open-addressing table holds at most one key per slot; loads must be below 1")
    targets = [int(load * slots) for load in loads]
    usable = [(load, n) for load, n in zip(loads, targets, strict=True) if 0 < n <= len(values)]
    if not usable:
        return []
    values = np.ascontiguousarray(values[: usable[-1][1]], dtype=np.uint64)
    homes = bucket_index(values, scheme, slots, width).astype(np.int64)
    cost = np.zeros(len(values), dtype=np.int64)
    table = new_table(kind, slots)
    steps = double_steps(values, width, slots) if kind == "double" else np.zeros(0, dtype=np.int64)
    order = np.arange(len(values), dtype=np.int64)
    cells = []
    done = 0
    probes = 0
    worst = 0
    regions = region_count(slots)
    home_regions = homes * regions // slots  # once for every load's measure
    for load, n in usable:
        spent, high = insert_keys(kind, homes, steps, order, done, n, table, cost)
        done = n
        probes += spent
        worst = max(worst, high)
        cells.append(measure(kind, load, homes, table, cost, slice(0, n), probes, worst, home_regions))
    return cells
