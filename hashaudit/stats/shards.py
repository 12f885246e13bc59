"""Shards: balance of the distinct keys, keys moved when shards are added, and where the load comes from.

``ShardCounts`` streams: per shard, the distinct keys (what the hash decides) and the occurrences or summed
weights (what the system feels), plus how many distinct keys change shard from N to N+1 and to 2N shards.

Tests of fit:

``shard_balance``   the distinct keys per shard against the multinomial with the scheme's shares (for a ring,
                    the arcs the ring gives each shard, so its built-in unevenness is not blamed on the hash):
                    Pearson's chi-square over the shards, and the hottest shard over its expected maximum
``shard_movement``  distinct keys that change shard from N to N+1 shards, against the share an ideal hash moves
                    under the same scheme: 1/(N+1) for consistent schemes (the new shard's share), about N/(N+1)
                    for modulo; a binomial test. N to 2N is reported beside it.

References
----------
K. Pearson (1900), the chi-square test of goodness of fit (cited from memory); W. Feller, An Introduction to
Probability Theory and Its Applications, vol. 1 (multinomial occupancy); J. Lamping, E. Veach (2014) and
D. Karger et al. (1997) for the movement consistent schemes promise.
"""

from __future__ import annotations

import math

import numpy as np

from hashaudit.errors import MergeError
from hashaudit.stats._lazy import LazyModule
from hashaudit.stats.outcome import Effect, FitTest
from hashaudit.tables.shards import ShardLayout

stats = LazyModule("scipy.stats")
LISTED_SHARDS = 1024  # per-shard counts appear in the details up to this many shards


class _Loads:
    """Summed weights per cell, the same whatever the order of the additions: whole-number weights (and plain
    occurrence counts) add up exactly as integers; other weights add up as floats, whose last bits depend on the
    order, so the reports round figures made from them (``REPORT_DIGITS``)."""

    def __init__(self, cells: int) -> None:
        self.whole_ = np.zeros(cells, dtype=np.int64)
        self.fraction_ = np.zeros(cells, dtype=np.float64)

    def add(self, cell: np.ndarray, weights: np.ndarray | None) -> None:
        cells = len(self.whole_)
        if weights is None:
            self.whole_ += np.bincount(cell, minlength=cells)
            return
        whole = (weights == np.floor(weights)) & (weights < 2.0**53)
        if whole.all():
            self.whole_ += _int_bincount(cell, weights, cells)
        else:
            self.whole_ += _int_bincount(cell[whole], weights[whole], cells)
            self.fraction_ += np.bincount(cell[~whole], weights=weights[~whole], minlength=cells)

    def merge(self, other: _Loads) -> None:
        self.whole_ += other.whole_
        self.fraction_ += other.fraction_

    @property
    def total(self) -> np.ndarray:
        return self.whole_.astype(np.float64) + self.fraction_


def _int_bincount(cell: np.ndarray, weights: np.ndarray, cells: int) -> np.ndarray:
    """Sums of whole-number weights per cell, exactly (float sums of integers below 2^53 are exact)."""
    return np.rint(np.bincount(cell, weights=weights, minlength=cells)).astype(np.int64)


REPORT_DIGITS = 12


def rounded(x: float) -> float:
    """``x`` to ``REPORT_DIGITS`` significant digits: float sums in another order agree after it."""
    return float(f"{x:.{REPORT_DIGITS}g}")


class ShardCounts:
    """Accumulator of one hash function's keys over N shards.

    Parameters
    ----------
    hash_name : str
    width : int
        Output width of the hash.
    layout : ShardLayout
    """

    def __init__(self, hash_name: str, width: int, layout: ShardLayout) -> None:
        self.hash_name = hash_name
        self.width = int(width)
        self.layout = layout
        self._next = layout.resized(layout.shards + 1)
        self._double = layout.resized(2 * layout.shards)
        self.distinct_ = np.zeros(layout.shards, dtype=np.int64)
        self._loads = _Loads(layout.shards)
        self.moved_next_ = 0
        self.moved_double_ = 0

    def update(self, values: np.ndarray) -> ShardCounts:
        """Add distinct keys' hash values (the balance and movement checks)."""
        here = self.layout.assign(values, self.width)
        self.distinct_ += np.bincount(here, minlength=self.layout.shards)
        self.moved_next_ += int(np.count_nonzero(self._next.assign(values, self.width) != here))
        self.moved_double_ += int(np.count_nonzero(self._double.assign(values, self.width) != here))
        return self

    def add_load(self, values: np.ndarray, weights: np.ndarray | None = None) -> ShardCounts:
        """Add every occurrence's hash value, weighted when ``weights`` is given (the load the shards feel)."""
        self._loads.add(self.layout.assign(values, self.width), weights)
        return self

    @property
    def load_(self) -> np.ndarray:
        """Load per shard: occurrences, or summed weights."""
        return self._loads.total

    def merge(self, other: ShardCounts) -> ShardCounts:
        """Add another accumulator of the same hash and layout."""
        if not isinstance(other, ShardCounts) or (other.hash_name, other.layout) != (self.hash_name, self.layout):
            raise MergeError("cannot merge shard counts of another hash or layout")
        self.distinct_ += other.distinct_
        self._loads.merge(other._loads)
        self.moved_next_ += other.moved_next_
        self.moved_double_ += other.moved_double_
        return self


class BucketLoads:
    """The load (occurrences, or summed weights) per bucket of one table, beside its distinct-key counts.

    Parameters
    ----------
    scheme : str
    buckets : int
    width : int
    """

    def __init__(self, scheme: str, buckets: int, width: int) -> None:
        self.scheme, self.buckets, self.width = scheme, int(buckets), int(width)
        self._loads = _Loads(self.buckets)

    def add_load(self, values: np.ndarray, weights: np.ndarray | None = None) -> BucketLoads:
        """Add every occurrence's hash value (weighted when ``weights`` is given)."""
        from hashaudit.tables.schemes import bucket_index

        self._loads.add(bucket_index(values, self.scheme, self.buckets, self.width).astype(np.int64), weights)
        return self

    @property
    def load_(self) -> np.ndarray:
        """Load per bucket: occurrences, or summed weights."""
        return self._loads.total

    def merge(self, other: BucketLoads) -> BucketLoads:
        """Add another table's loads (same scheme and size)."""
        if not isinstance(other, BucketLoads) or (other.scheme, other.buckets) != (self.scheme, self.buckets):
            raise MergeError("cannot merge bucket loads of another table")
        self._loads.merge(other._loads)
        return self

    def hottest(self, top: int) -> list[tuple[int, float, float]]:
        """The ``top`` buckets by load: (bucket, load, share of all load), heaviest first."""
        load = self.load_
        total = float(load.sum())
        order = np.lexsort((np.arange(self.buckets), -load))[:top]
        return [(int(b), rounded(load[b]), rounded(load[b] / total) if total else 0.0) for b in order]


def _expected_max_ratio(shares: np.ndarray, n: int) -> float:
    """Expected max over shards of count / (n · share) for an ideal hash."""
    if np.allclose(shares, shares[0]):
        from hashaudit.stats.maxload import expected_max_load

        return expected_max_load(len(shares), n) / (n / len(shares))
    # unequal shares: the largest of N nearly independent normal ratios (Blom's plotting position for the maximum)
    z = float(stats.norm.ppf((len(shares) - 0.375) / (len(shares) + 0.25)))
    return 1.0 + z * float(np.sqrt((1 - shares) / (n * shares)).max())


def balance_tests(counts: ShardCounts) -> list[FitTest]:
    """``shard_balance``: distinct keys per shard against the scheme's shares (see the module notes)."""
    n = int(counts.distinct_.sum())
    shards = counts.layout.shards
    if n == 0 or shards < 2:
        return []
    shares = counts.layout.shares(counts.width)
    expected = n * shares
    observed = counts.distinct_.astype(np.float64)
    chi2 = float(((observed - expected) ** 2 / expected).sum())
    p_upper = float(stats.chi2.sf(chi2, shards - 1))
    p_lower = float(stats.chi2.cdf(chi2, shards - 1))
    ratios = observed / expected
    hottest = int(np.argmax(ratios))
    ideal_ratio = _expected_max_ratio(shares, n)
    mean = n / shards
    details: dict = {
        "shards": shards,
        "shard_scheme": counts.layout.scheme,
        "hottest_shard": hottest,
        "hottest_keys": int(observed[hottest]),
        "hottest_share": float(observed[hottest] / n),
        "hottest_over_mean": float(observed.max() / mean),
        "coefficient_of_variation": float(observed.std() / mean),
        "ideal_coefficient_of_variation": float(np.sqrt(((1 - shares) / (n * shares)).mean())),
        "expected_shares_max_over_mean": float(shares.max() * shards),
    }
    if counts.layout.scheme == "ring":
        details["vnodes"] = counts.layout.vnodes
        details["ring_share_cv"] = float(shares.std() * shards)
        details["ring_share_cv_theory"] = 1 / math.sqrt(counts.layout.vnodes)  # arcs of V points: Gamma(V) sums
    if shards <= LISTED_SHARDS:
        details["keys_per_shard"] = counts.distinct_.tolist()
        load = counts.load_
        if float(load.sum()) > 0:  # what each shard feels: every occurrence, or the summed weights
            details["load_per_shard"] = [rounded(float(x)) for x in load]
    effect = Effect(
        "shard_imbalance",
        float(ratios.max() / ideal_ratio - 1),
        float(ratios.max()),
        ideal_ratio,
        "hottest shard's keys over its expected share",
    )
    method = f"Pearson chi-square over {shards} shards (df {shards - 1}) against the scheme's shares"
    return [FitTest("shard_balance", chi2, float(shards - 1), chi2, p_upper, p_lower, method, effect, details)]


def movement_tests(counts: ShardCounts) -> list[FitTest]:
    """``shard_movement``: distinct keys that change shard from N to N+1, against an ideal hash under the scheme."""
    n = int(counts.distinct_.sum())
    if n == 0:
        return []
    layout = counts.layout
    ideal_next = _ideal_moved(layout, layout.shards + 1)
    ideal_double = _ideal_moved(layout, 2 * layout.shards)
    moved = counts.moved_next_
    p_upper = float(stats.binom.sf(moved - 1, n, ideal_next)) if ideal_next < 1 else 1.0
    p_lower = float(stats.binom.cdf(moved, n, ideal_next)) if ideal_next > 0 else 1.0
    observed = moved / n
    details = {
        "shards": layout.shards,
        "shard_scheme": layout.scheme,
        "moved_to_next": moved,
        "moved_fraction_to_next": observed,
        "ideal_fraction_to_next": ideal_next,
        "least_possible_to_next": 1 / (layout.shards + 1),
        "moved_to_double": counts.moved_double_,
        "moved_fraction_to_double": counts.moved_double_ / n,
        "ideal_fraction_to_double": ideal_double,
    }
    effect = Effect(
        "movement_excess",
        (observed - ideal_next) / ideal_next if ideal_next > 0 else 0.0,
        observed,
        ideal_next,
        f"share of keys that move from {layout.shards} to {layout.shards + 1} shards",
    )
    method = "binomial test of the keys that move against an ideal hash under the same scheme"
    return [
        FitTest("shard_movement", float(moved), n * ideal_next, float(moved), p_upper, p_lower, method, effect, details)
    ]


def _ideal_moved(layout: ShardLayout, shards: int) -> float:
    """Share of uniformly random hash values that change shard from ``layout`` to ``shards`` shards."""
    exact = layout.ideal_moved(shards) if hasattr(layout, "ideal_moved") else None
    if exact is not None:  # a placement rule of a real system knows its own
        return float(exact)
    if layout.scheme == "mod":
        a, b = layout.shards, shards
        if b % a == 0:  # h keeps its shard when h mod b < a
            return 1 - a / b
        if math.gcd(a, b) == 1:  # over a period a·b, h mod a = h mod b only for h < min(a, b)
            return 1 - min(a, b) / (a * b)
        h = np.arange(a * b // math.gcd(a, b), dtype=np.int64)  # small in practice: count over one period
        return float(np.mean(h % a != h % b))
    # jump, rendezvous and the ring move exactly the keys that land on the new shards (on the ring, the old
    # points stay, so a key moves only when a new shard's point comes first)
    return float(layout.resized(shards).shares()[layout.shards :].sum())


def _max_ratio_quantile(shares: np.ndarray, n: int, q: float = 0.99) -> float:
    """The q-quantile of max over shards of count / (n · share) for an ideal hash."""
    if np.allclose(shares, shares[0]):
        from hashaudit.stats.maxload import max_load_quantile

        return max_load_quantile(len(shares), n, q) / (n / len(shares))
    z = float(stats.norm.ppf(q ** (1 / len(shares))))  # nearly independent normal ratios
    return 1.0 + z * float(np.sqrt((1 - shares) / (n * shares)).max())


HEAVY_SHARE = 0.01  # a key is heavy when it alone carries this share of a shard's fair load


def attribute_load(counts: ShardCounts, heavy: list[tuple[bytes, float, int]], total_load: float) -> dict:
    """Where the hottest shard's load comes from: a few heavy keys, or the hash placing too many keys there.

    Parameters
    ----------
    counts : ShardCounts
        With both the distinct keys and the load per shard.
    heavy : list of (key, load, shard)
        The heaviest keys (from ``HeavyKeys``), their load (a lower bound) and their shard under this hash; only
        those carrying at least ``HEAVY_SHARE`` of a shard's fair load count as heavy.
    total_load : float
        Occurrences (or summed weight) of the whole input.

    Returns
    -------
    dict (JSON-able, no key bytes): the hottest shard by load, its share and fair share, the points of share its
    heavy keys explain, the share it would have without them, its share of distinct keys, and the largest share
    of distinct keys an ideal hash gives its fullest shard in 99 cases out of 100.
    """
    shares = counts.layout.shares(counts.width)
    heavy = [h for h in heavy if h[1] >= HEAVY_SHARE * total_load * float(shares.min())]
    load = counts.load_
    n = int(counts.distinct_.sum())
    hottest = int(np.argmax(load / (total_load * shares)))
    load_share = float(load[hottest] / total_load)
    mine = [(w, s) for _, w, s in heavy if s == hottest]
    heavy_here = float(sum(w for w, _ in mine))
    heavy_all = float(sum(w for _, w, _ in heavy))
    rest = total_load - heavy_all
    # without the heavy keys; when they carry (nearly) all the load, nothing is left to share out
    without = min(1.0, max(0.0, (float(load[hottest]) - heavy_here) / rest)) if rest > 1e-9 * total_load else 0.0
    distinct_share = float(counts.distinct_[hottest] / n) if n else 0.0
    ideal_ratio = _max_ratio_quantile(shares, n) if n else 1.0
    return {
        "shards": counts.layout.shards,
        "shard_scheme": counts.layout.scheme,
        "hottest_shard": hottest,
        "load_share": rounded(load_share),
        "fair_share": float(shares[hottest]),
        "heavy_keys_on_shard": len(mine),
        "heavy_load_on_shard": rounded(heavy_here),
        "heaviest_key_share": rounded(max((w for w, _ in mine), default=0.0) / total_load),
        "points_from_heavy_keys": rounded(max(0.0, load_share - without)),
        "share_without_heavy_keys": rounded(without),
        "distinct_share": distinct_share,
        "ideal_max_distinct_share": float(shares[hottest] * ideal_ratio),
        "total_load": rounded(total_load),
    }
