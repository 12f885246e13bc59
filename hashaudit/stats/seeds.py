"""Seed sensitivity of seeded hash functions: does a new seed really give a new function?

A seeded hash is meant to be a family of functions, one per seed. Two checks run the same distinct keys (a key
sample) through several seeds:

* ``seed_spread``: for every seed and table, the p-value of Pearson's χ² of the bucket counts (upper tail,
  ``hashaudit.stats.fit.bucket_tests``). Under a good family the seeds act like independent random functions, so
  each table's per-seed p-values are independent uniform draws. When the seed only relabels the output (for
  example it is XORed into a weak inner hash and the table takes the low bits, which XOR merely permutes), every
  seed gives the same skew and the p-values pile up near 0. A one-sided Kolmogorov–Smirnov test per table
  detects that; the spread of the chained lookup cost across seeds shows what it costs.
* ``seed_independent_collisions``: pairs of distinct keys whose full hash values are equal under *every* seed.
  For a family of independent random b-bit functions a pair survives S seeds with probability 2^-(b·S), so
  essentially none do. Pairs that survive collide whatever the seed, so an attacker who knows the function can
  craft keys that flood a table however its secret seed is chosen (Crosby & Wallach 2003; Aumasson, Bernstein &
  Boßlet 2012 found such collisions for widely used seeded non-cryptographic hashes). A keyed PRF such as
  SipHash (Aumasson & Bernstein 2012) is designed not to have them.

How the collisions are found
----------------------------
The keys are sorted by their hash value under the first seed and only groups of two or more equal values are
kept (the candidates). Each further seed refines the groups: candidates are sorted by (group, new value) and
again only groups of two or more are kept. The candidate set shrinks to (almost) nothing after one or two seeds
for a good family, so the search costs one sort of all the keys. When no table is requested, only the
candidates are hashed under the seeds after the first; otherwise every key is hashed anyway for the bucket
counts and the candidates' values are taken from there. Repeated keys would survive every seed: the surviving
keys are compared bytewise and a repeat is refused (the checks are about distinct keys).

References
----------
S. A. Crosby, D. S. Wallach, "Denial of service via algorithmic complexity attacks", USENIX Security 2003.
J.-P. Aumasson, D. J. Bernstein, "SipHash: a fast short-input PRF", INDOCRYPT 2012.
J.-P. Aumasson, D. J. Bernstein, M. Boßlet, "Hash-flooding DoS reloaded: attacks and defenses", 29th Chaos
Communication Congress (2012) (seed-independent collisions of seeded non-cryptographic hashes; from memory).
A. N. Kolmogorov (1933), N. V. Smirnov (1939): the one-sample Kolmogorov–Smirnov test;
Z. W. Birnbaum, F. H. Tingey, "One-sided confidence contours for probability distribution functions",
Ann. Math. Statist. 22 (1951) 592-596 (exact law of the one-sided statistic D+).
J. D. Habiger, E. A. Peña, "Randomised P-values and nonparametric procedures in multiple testing",
J. Nonparametric Statist. 23 (2011) 583-604 (randomised p-values of discrete tests are exactly uniform).
T. H. Cormen, C. E. Leiserson, R. L. Rivest, C. Stein, Introduction to Algorithms, 3rd ed. (2009), §5.4.1
(expected pairs with the same value: C(n, 2) / m).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from hashaudit.errors import UsageError
from hashaudit.keys.batch import KeyBatch
from hashaudit.stats._hooks import HashBatch
from hashaudit.stats.buckets import BucketCounts
from hashaudit.stats.outcome import Effect, FitTest
from hashaudit.stats.tails import colliding_pairs_test

DEFAULT_SEEDS: tuple[int, ...] = (1, 2, 3, 4, 5, 6, 7, 8)
LARGEST_GROUPS = 10  # group sizes shown in the collision details
RANDOMISATION_DOMAIN = 0x5EED_5A4D_0000_0001  # seeds the uniform draws of the randomised p-values
_ATOM_TOLERANCE = 1e-9  # below this, P(X = x) is rounding noise of a continuous law
_EXPECTED_D_GRID = 4001
CAUTION = (
    "collisions that survive every seed mean the seed does not protect against crafted keys: whoever knows the "
    "function can make keys that flood a table whatever its secret seed. Where keys may come from untrusted "
    "sources, use a keyed hash designed for it, such as SipHash (Aumasson & Bernstein 2012), and follow your "
    "security policy."
)
NO_PAIR_NOTE = (
    "no pair of these keys collides under every seed; this does not show that keys crafted against this function "
    "cannot be found. Where keys may come from untrusted sources, use a keyed hash designed for it, such as "
    "SipHash (Aumasson & Bernstein 2012), and follow your security policy."
)


@dataclass(frozen=True)
class SeedRuns:
    """One hash function run over the same distinct keys under several seeds.

    Attributes
    ----------
    hash_name : str
    width : int
        Output bits b (32, 64 or 128).
    seeded : bool
        False for functions without a seed: nothing was computed and ``seed_tests`` returns no test.
    keys : int
        Distinct keys n.
    seeds : tuple of int
        The seeds, in the order they were run.
    tables : tuple of (scheme, buckets)
    null_seed : int
        Seed of the simulated nulls of small tables (shared by every hash seed, so they are simulated once).
    chi_square : numpy.ndarray of float64, shape (seeds, tables)
        Pearson's χ² of each table under each seed.
    p_upper, p_lower : numpy.ndarray of float64, shape (seeds, tables)
        Its upper and lower tail p-values.
    lookup_cost : numpy.ndarray of float64, shape (seeds, tables)
        Mean probes of a successful lookup in a chained table, 1 + (colliding pairs) / n.
    ideal_lookup_cost : numpy.ndarray of float64, shape (tables,)
        The same for uniform hashing, 1 + (n - 1) / (2m).
    methods : tuple of str
        How each table's χ² p-values were computed (from the first seed; the same for every seed).
    group_sizes : numpy.ndarray of int64
        Sizes of the groups of keys whose full hash values are equal under every seed, largest first.
    candidates : tuple of int
        Keys still in a group of two or more after each seed (how the collision search narrowed).
    """

    hash_name: str
    width: int
    seeded: bool
    keys: int
    seeds: tuple[int, ...]
    tables: tuple[tuple[str, int], ...]
    null_seed: int
    chi_square: np.ndarray
    p_upper: np.ndarray
    p_lower: np.ndarray
    lookup_cost: np.ndarray
    ideal_lookup_cost: np.ndarray
    methods: tuple[str, ...]
    group_sizes: np.ndarray
    candidates: tuple[int, ...]

    @property
    def colliding_pairs(self) -> int:
        """Pairs of distinct keys with equal full hash values under every seed: Σ C(g, 2) over the groups."""
        return sum(math.comb(int(g), 2) for g in self.group_sizes)

    @property
    def keys_in_collisions(self) -> int:
        """Keys that share their full hash values, under every seed, with at least one other key."""
        return int(self.group_sizes.sum())

    @property
    def expected_pairs(self) -> float:
        """Pairs expected to collide under every one of S independent b-bit functions: C(n, 2) / 2^(b·S)."""
        return math.comb(self.keys, 2) / (1 << (self.width * len(self.seeds)))  # exact integers, rounded once


# ---------------------------------------------------------------------------------------------------------
# Helpers


def _check_seeds(seeds: Sequence[int]) -> tuple[int, ...]:
    checked = []
    for seed in seeds:
        if isinstance(seed, bool) or int(seed) != seed or seed < 0:
            raise UsageError(f"seeds must be non-negative integers, not {seed!r}")
        checked.append(int(seed))
    if len(checked) < 2:
        raise UsageError(f"seed sensitivity needs at least 2 seeds, not {len(checked)} ({checked})")
    repeated = sorted({s for s in checked if checked.count(s) > 1})
    if repeated:
        raise UsageError(f"the seeds must differ: {repeated} appear more than once")
    return tuple(checked)


def _rows(values: np.ndarray) -> np.ndarray:
    """Hash values as ``uint64[n, w]`` rows (w = 2 for 128-bit functions)."""
    return np.ascontiguousarray(values, dtype=np.uint64).reshape(len(values), 2 if values.ndim == 2 else 1)


def _refine(index: np.ndarray, labels: np.ndarray | None, rows: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Split the groups ``labels`` of keys ``index`` by their values ``rows``; keep groups of two or more.

    Returns the surviving key indices, sorted by (group, value), and their new group labels 0, 1, 2, ...
    """
    # np.lexsort sorts by its last key first: group, then high word, then low word
    sort_keys = [rows[:, w] for w in range(rows.shape[1])] + ([labels] if labels is not None else [])
    order = np.lexsort(sort_keys) if len(sort_keys) > 1 else np.argsort(sort_keys[0], kind="stable")
    sorted_rows = rows[order]
    changes = np.any(sorted_rows[1:] != sorted_rows[:-1], axis=1)
    if labels is not None:
        sorted_labels = labels[order]
        changes |= sorted_labels[1:] != sorted_labels[:-1]
    group = np.concatenate([[0], np.cumsum(changes)]) if len(order) else np.zeros(0, dtype=np.int64)
    sizes = np.bincount(group) if len(order) else np.zeros(0, dtype=np.int64)
    keep = sizes[group] >= 2
    kept_groups = group[keep]
    # compact labels: the rank of each surviving group among the survivors
    new_labels = (
        np.concatenate([[0], np.cumsum(kept_groups[1:] != kept_groups[:-1])]) if len(kept_groups) else group[:0]
    )
    return index[order[keep]], new_labels.astype(np.int64)


def _check_distinct(keys: KeyBatch, survivors: np.ndarray) -> None:
    """Refuse repeated keys (they are among the survivors: a key collides with itself under every seed)."""
    surviving = keys.take(survivors).to_list()
    repeats = len(surviving) - len(set(surviving))
    if repeats:
        raise UsageError(
            f"seed sensitivity needs distinct keys, but {repeats} keys are repeats; take a KeySample or remove "
            "repeated keys first"
        )


# ---------------------------------------------------------------------------------------------------------
# The runs


def seed_runs(
    hash_batch: HashBatch,
    width: int,
    keys: KeyBatch,
    tables: Sequence[tuple[str, int]],
    seeds: Sequence[int] = DEFAULT_SEEDS,
    null_seed: int = 0,
    seeded: bool = True,
    name: str = "",
) -> SeedRuns:
    """Hash the same distinct keys under every seed; count them into every table; find the pairs of keys whose
    full hash values are equal under every seed.

    Parameters
    ----------
    hash_batch : callable
        The hash function, ``(batch, seed) -> uint64[n]`` (``uint64[n, 2]``, low word first, for 128 bits), such
        as ``HashSpec.hash_batch``.
    width : int
        Its output bits b (32, 64 or 128).
    keys : KeyBatch
        Distinct keys (for example ``KeySample.keys()``); a repeated key raises ``UsageError``.
    tables : sequence of (scheme, buckets)
        Tables whose χ² p-value and lookup cost are recorded for every seed; may be empty (collisions only).
    seeds : sequence of int, default (1, ..., 8)
        At least two distinct non-negative seeds. They should differ in the bits the function uses (a 32-bit seed
        such as MurmurHash3's is taken modulo 2^32, so 1 and 2^32 + 1 would be the same seed).
    null_seed : int, default 0
        Seed of the simulated null distributions of small tables (``bucket_tests``).
    seeded : bool, default True
        Whether the function takes a seed; for an unseeded one nothing is computed.
    name : str, default ""
        The hash function's name, recorded in the result.

    Returns
    -------
    SeedRuns

    Notes
    -----
    Memory: the hash values of one seed at a time (8 or 16 bytes per key) plus the candidate indices. Time: one
    hash of every key per seed when tables are requested, else one hash of every key and then of the candidates
    only; one sort of all the keys; one ``bucket_tests`` per (seed, table).
    """
    seeds = _check_seeds(seeds)
    tables = tuple((str(scheme), int(m)) for scheme, m in tables)
    n, t_count = len(keys), len(tables)
    if not seeded:
        empty = np.zeros((0, t_count))
        nothing = (empty, empty.copy(), empty.copy(), empty.copy(), np.zeros(t_count))
        return SeedRuns(name, width, False, n, seeds, tables, null_seed, *nothing, (), np.zeros(0, dtype=np.int64), ())
    from hashaudit.stats.fit import bucket_tests  # imports scipy

    chi_square = np.zeros((len(seeds), t_count))
    p_upper = np.ones((len(seeds), t_count))
    p_lower = np.ones((len(seeds), t_count))
    lookup_cost = np.ones((len(seeds), t_count))
    ideal = np.ones(t_count)
    methods: list[str] = []
    index = np.arange(n, dtype=np.int64)
    labels: np.ndarray | None = None
    candidates: list[int] = []
    for i, seed in enumerate(seeds):
        values: np.ndarray | None = None
        if tables or i == 0:
            values = hash_batch(keys, seed)
        for t, (scheme, m) in enumerate(tables):
            assert values is not None
            counts = BucketCounts(name, seed, scheme, m, width).update(values).result()
            chi = next(
                (
                    test
                    for test in bucket_tests(counts, seed=null_seed, with_max_load=False)
                    if test.name == "chi_square"
                ),
                None,
            )
            if chi is None:  # no keys: nothing to test
                continue
            chi_square[i, t], p_upper[i, t], p_lower[i, t] = chi.statistic, chi.p_upper, chi.p_lower
            lookup_cost[i, t], ideal[t] = chi.effect.observed, chi.effect.ideal
            if i == 0:
                methods.append(chi.method)
        if i == 0 or len(index):
            if values is None:
                rows = _rows(hash_batch(keys.take(index), seed))
            else:
                rows = _rows(values if i == 0 else values[index])
            index, labels = _refine(index, labels, rows)
        candidates.append(len(index))
    if len(index):
        _check_distinct(keys, index)
    group_sizes = np.sort(np.bincount(labels))[::-1].astype(np.int64) if labels is not None and len(labels) else None
    if group_sizes is None:
        group_sizes = np.zeros(0, dtype=np.int64)
    for array in (chi_square, p_upper, p_lower, lookup_cost, ideal, group_sizes):
        array.setflags(write=False)
    return SeedRuns(
        name,
        width,
        True,
        n,
        seeds,
        tables,
        int(null_seed),
        chi_square,
        p_upper,
        p_lower,
        lookup_cost,
        ideal,
        tuple(methods),
        group_sizes,
        tuple(candidates),
    )


# ---------------------------------------------------------------------------------------------------------
# Tests of fit


def randomised_p_values(p_upper: np.ndarray, p_lower: np.ndarray, uniforms: np.ndarray) -> np.ndarray:
    """Upper-tail p-values made exactly uniform under the null when the statistic's law is discrete.

    With P(X ≥ x) = ``p_upper`` and P(X ≤ x) = ``p_lower``, the atom is P(X = x) = p_upper + p_lower - 1 and the
    randomised p-value is P(X > x) + V·P(X = x) = p_upper - (1 - V)·P(X = x) for V uniform on [0, 1)
    (Habiger & Peña 2011). For a continuous law the atom is 0 and the p-value is ``p_upper`` unchanged.

    Parameters
    ----------
    p_upper, p_lower : numpy.ndarray of float
    uniforms : numpy.ndarray of float
        V, same shape, uniform on [0, 1).

    Returns
    -------
    numpy.ndarray of float64
    """
    atom = np.asarray(p_upper, dtype=np.float64) + np.asarray(p_lower, dtype=np.float64) - 1.0
    atom = np.where(atom > _ATOM_TOLERANCE, atom, 0.0)
    return np.clip(p_upper - (1.0 - np.asarray(uniforms)) * atom, 0.0, 1.0)


def expected_ks_plus(samples: int) -> float:
    """E D+ of the one-sided Kolmogorov–Smirnov statistic of ``samples`` uniform draws: the integral of its
    survival function (Birnbaum & Tingey 1951, as ``scipy.stats.ksone``) by the trapezoidal rule on 4001 points."""
    from scipy import stats

    d = np.linspace(0.0, 1.0, _EXPECTED_D_GRID)
    return float(np.trapezoid(stats.ksone.sf(d, samples), d))


def _spread_test(runs: SeedRuns) -> FitTest:
    from scipy import stats

    s_count, t_count = runs.p_upper.shape
    rng = np.random.default_rng([RANDOMISATION_DOMAIN, runs.null_seed])
    p = randomised_p_values(runs.p_upper, runs.p_lower, rng.random((s_count, t_count)))
    excess = runs.lookup_cost / runs.ideal_lookup_cost - 1.0
    per_table: list[dict[str, Any]] = []
    ks_upper, ks_lower, ks_plus = [], [], []
    for t, (scheme, m) in enumerate(runs.tables):
        greater = stats.kstest(p[:, t], "uniform", alternative="greater")  # data stochastically smaller
        less = stats.kstest(p[:, t], "uniform", alternative="less")
        ks_upper.append(float(greater.pvalue))
        ks_lower.append(float(less.pvalue))
        ks_plus.append(float(greater.statistic))
        cost = runs.lookup_cost[:, t]
        per_table.append(
            {
                "scheme": scheme,
                "buckets": m,
                "method": runs.methods[t],
                "p_values": [float(x) for x in p[:, t]],
                # a seed that only relabels the buckets (XOR into a masked output) gives the same counts every time
                "same_chi_square_every_seed": bool(np.all(runs.chi_square[:, t] == runs.chi_square[0, t])),
                "ks_statistic": float(greater.statistic),
                "ks_p_upper": float(greater.pvalue),
                "ks_p_lower": float(less.pvalue),
                "all_small_p": float(p[:, t].max()) ** s_count,
                "lookup_cost": {
                    "min": float(cost.min()),
                    "median": float(np.median(cost)),
                    "max": float(cost.max()),
                },
                "ideal_lookup_cost": float(runs.ideal_lookup_cost[t]),
                "lookup_cost_excess_median": float(np.median(excess[:, t])),
            }
        )
    worst = int(np.argmin(ks_upper))
    costly = int(np.argmax(np.median(excess, axis=0)))
    # median of cost / ideal - 1 over seeds = median(cost) / ideal - 1: the effect and its two numbers agree
    effect = Effect(
        "lookup_cost_excess",
        float(np.median(excess[:, costly])),
        float(np.median(runs.lookup_cost[:, costly])),
        float(runs.ideal_lookup_cost[costly]),
        "probes per successful chained lookup (median over seeds, worst table)",
    )
    details: dict[str, Any] = {
        "seeds": list(runs.seeds),
        "keys": runs.keys,
        "tables": per_table,
        "worst_table": {"scheme": runs.tables[worst][0], "buckets": runs.tables[worst][1]},
        "costliest_table": {"scheme": runs.tables[costly][0], "buckets": runs.tables[costly][1]},
    }
    method = (
        f"one-sided Kolmogorov-Smirnov test of the {s_count} per-seed upper-tail p-values of Pearson's chi-square "
        "(randomised where the null law is discrete) against the uniform law, per table; p_upper (p-values pile up "
        f"near 0) and p_lower (near 1) are the smallest over the {t_count} tables times {t_count} (Bonferroni)"
    )
    return FitTest(
        "seed_spread",
        ks_plus[worst],
        expected_ks_plus(s_count),
        ks_plus[worst],
        min(1.0, t_count * min(ks_upper)),
        min(1.0, t_count * min(ks_lower)),
        method,
        effect,
        details,
    )


def _collision_test(runs: SeedRuns) -> FitTest:
    observed = runs.colliding_pairs
    details: dict[str, Any] = {
        "width": runs.width,
        "seeds": list(runs.seeds),
        "distinct_keys": runs.keys,
        "colliding_pairs": observed,
        "groups": len(runs.group_sizes),
        "keys_in_collisions": runs.keys_in_collisions,
        "largest_groups": [int(g) for g in runs.group_sizes[:LARGEST_GROUPS]],
        "candidates_after_each_seed": list(runs.candidates),
    }
    details["caution" if observed else "note"] = CAUTION if observed else NO_PAIR_NOTE
    method = (
        f"Poisson law of the pairs of distinct keys colliding under all {len(runs.seeds)} seeds, mean "
        f"C(n, 2) / 2^({runs.width}·{len(runs.seeds)}) for independent seeds"
    )
    counted = "pairs of distinct keys with equal full hash values under every seed"
    return colliding_pairs_test("seed_independent_collisions", observed, runs.expected_pairs, counted, method, details)


def seed_tests(runs: SeedRuns) -> list[FitTest]:
    """The ``seed_spread`` and ``seed_independent_collisions`` tests of one function's seed runs.

    ``seed_spread`` (only when tables were counted): for every table, the S per-seed upper-tail p-values of
    Pearson's χ² — randomised where their null law is discrete (Poisson or simulated), so that they are exactly
    uniform under a family of independent random functions — are compared with the uniform law by a one-sided
    Kolmogorov–Smirnov test. ``p_upper`` is for "the p-values pile up near 0" (every seed skews the table; the
    alternative that they are stochastically smaller than uniform, ``scipy.stats.kstest(..., alternative=
    "greater")``), ``p_lower`` for "they pile up near 1" (every seed gives a table more even than random:
    informational); each is the smallest over the tables times the number of tables (Bonferroni). The statistic
    is D+ of the table with the smallest p_upper, its expectation that of D+ for S uniform draws. The effect
    ``lookup_cost_excess`` is the median over the seeds of the relative excess lookup cost of the table whose
    median is largest, so the bucket threshold applies. ``details`` has, per table, the p-values, both KS
    p-values, the probability that S uniform p-values are all below the largest one seen (``all_small_p``) and
    the min / median / max lookup cost over the seeds.

    ``seed_independent_collisions``: the number of pairs of distinct keys with equal full hash values under every
    seed, against a Poisson law with mean C(n, 2) / 2^(b·S) (independent seeds). The effect ``collision_excess``
    is (observed - expected) / max(expected, 1), so the full-collision threshold applies. ``details`` gives the
    group sizes (never a key) and a ``caution`` when pairs survive (a ``note`` otherwise).

    Parameters
    ----------
    runs : SeedRuns

    Returns
    -------
    list of FitTest
        Empty for an unseeded function (the check does not apply) or when there are no keys.

    References
    ----------
    Z. W. Birnbaum, F. H. Tingey, Ann. Math. Statist. 22 (1951) 592-596; J. D. Habiger, E. A. Peña,
    J. Nonparametric Statist. 23 (2011) 583-604; S. A. Crosby, D. S. Wallach, USENIX Security 2003;
    J.-P. Aumasson, D. J. Bernstein, INDOCRYPT 2012.
    """
    if not runs.seeded or runs.keys == 0:
        return []
    tests = [_spread_test(runs)] if runs.tables else []
    tests.append(_collision_test(runs))
    return tests
