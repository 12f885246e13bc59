"""Output-bit checks: is each bit of the hash value a fair coin, and are the bits pairwise independent?

``BitCounts`` is the mergeable accumulator: over the hash values of distinct keys it counts how many values
have bit j set (``ones``) and how many have bits i and j both set (``both``). ``bit_tests`` turns the counts
into two tests of fit against simple uniform hashing, under which the bits of the values of distinct keys
are independent fair coins:

* ``bit_bias``: per bit, z_j = (2·ones_j − n) / √n, the standardised binomial count; the statistic
  Σ z_j² is χ²(width) for large n. The worst bit gets an exact two-sided binomial p-value with a
  Bonferroni correction over the width bits.
* ``bit_correlation``: per pair i < j, the phi coefficient of the 2×2 table of the two bits and
  z_ij = φ_ij·√(n − 1). Given the margins, the count of values with both bits set is hypergeometric and
  z_ij is exactly that count standardised (mean 0, variance 1), which is why the factor is n − 1 and not n
  (the "N − 1" chi-square of Campbell 2007). The statistic Σ z_ij² is χ²(K) for large n, K the number of
  pairs whose phi is defined (a bit that never or always is set has no phi). Under the null the z_ij are
  pairwise uncorrelated and so are their squares, so the χ² law holds through its first two moments;
  the test module checks its size by simulation. The worst pair gets a Bonferroni-corrected p-value.

Both tests fail only in the upper tail (worse than random); the lower tail (more regular than random, e.g.
sequential integers through the identity) is informational. With fewer than ``EXACT_BELOW_KEYS`` keys the
χ² laws are poor: the null distributions are simulated from uniform values with a fixed seed, and the worst
pair's p-value comes from the exact hypergeometric law (Fisher's conditional test).

How the pair counts are made fast: values are taken 64 at a time and the 64 × 64 bit matrix of each
64-bit word is transposed (Warren's recursive block swap), so that word j of the transpose holds bit j of
the 64 values. Then ``both[i, j]`` grows by popcount(T_i AND T_j), one AND and one popcount for 64 values
per pair — every value is counted, no subsample. A block that is not full is padded with zero values, which
set no bit and so add nothing. Bits are numbered from the least significant; for 128-bit functions bits
0–63 are the low word and 64–127 the high word.

References
----------
H. S. Warren, Hacker's Delight, 2nd ed., Addison-Wesley 2012, §5-1 (population count) and §7-3
(transposing a bit matrix).
G. U. Yule, "On the methods of measuring association between two attributes", J. R. Statist. Soc. 75
(1912) 579-652 (the phi coefficient) — cited from memory.
A. Agresti, Categorical Data Analysis, 2nd ed., Wiley 2002, §2.4 and §3.5 (phi as √(χ²/n) of a 2×2 table;
Fisher's exact test, the hypergeometric law given the margins) — cited from memory.
I. Campbell, "Chi-squared and Fisher-Irwin tests of two-by-two tables with small sample recommendations",
Statistics in Medicine 26 (2007) 3661-3675 (the N − 1 chi-square) — cited from memory.
C. E. Bonferroni, "Teoria statistica delle classi e calcolo delle probabilità", 1936.
A. C. Davison, D. V. Hinkley, Bootstrap Methods and their Application, Cambridge 1997, §4.2 (Monte Carlo
p-values (1 + #{T* ≥ t}) / (S + 1)).
H. A. David, H. N. Nagaraja, Order Statistics, 3rd ed., Wiley 2003, §3.1 (E max = ∫ (1 − F(x)^k) dx).
"""

from __future__ import annotations

import hashaudit._numba_setup  # noqa: F401  (sets the numba cache folder before numba loads)

# isort: split

import math
from dataclasses import dataclass
from functools import lru_cache

import numpy as np
from numba import int64, njit, uint64

from hashaudit.errors import MergeError, UsageError
from hashaudit.stats._bitops import popcount
from hashaudit.stats._lazy import special
from hashaudit.stats.outcome import Effect, FitTest
from hashaudit.stats.tails import expected_max_abs_normal

WIDTHS = (32, 64, 128)
EXACT_BELOW_KEYS = 100  # below this many keys the nulls are simulated and the worst pair's p-value is exact
BIAS_DRAWS = 9999
PAIR_DRAWS = 999


# --------------------------------------------------------------------------------------------------------
# Kernel
# --------------------------------------------------------------------------------------------------------


@njit(cache=True, nogil=True)
def _transpose64(rows):  # pragma: no cover - compiled
    """Transpose a 64 × 64 bit matrix in place (Hacker's Delight §7-3): bit 63 − c of row k moves to bit
    63 − k of row c, so afterwards row c holds bit 63 − c of every input row."""
    j = 32
    mask = uint64(0x00000000FFFFFFFF)
    while j != 0:
        k = 0
        while k < 64:
            t = (rows[k] ^ (rows[k + j] >> uint64(j))) & mask
            rows[k] ^= t
            rows[k + j] ^= t << uint64(j)
            k = (k + j + 1) & ~j
        j >>= 1
        mask ^= mask << uint64(j)


@njit(cache=True, nogil=True)
def _pair_count_kernel(values, width, counts):  # pragma: no cover - compiled
    """Add to ``counts[i, j]`` (i <= j < width) how many rows of ``values`` (uint64[n, words]) have bits i and
    j both set; the diagonal counts the rows with bit i set."""
    n = values.shape[0]
    words = values.shape[1]
    block = np.zeros(64, dtype=np.uint64)
    planes = np.zeros(64 * words, dtype=np.uint64)
    for start in range(0, n, 64):
        filled = min(64, n - start)
        for w in range(words):
            for k in range(filled):
                block[k] = values[start + k, w]
            for k in range(filled, 64):
                block[k] = uint64(0)
            _transpose64(block)
            for c in range(64):
                planes[64 * w + 63 - c] = block[c]
        for a in range(width):
            plane_a = planes[a]
            for b in range(a, width):
                counts[a, b] += int64(popcount(plane_a & planes[b]))


def _as_values(hashes: np.ndarray, width: int) -> np.ndarray:
    """Check a batch of hash values against ``width`` and return it as C-contiguous uint64[n, words]."""
    array = np.asarray(hashes)
    if array.dtype.kind != "u":
        raise UsageError(f"hash values must be unsigned integers (uint64), not {array.dtype}")
    expected = "uint64[n, 2]" if width == 128 else "uint64[n]"
    if (width == 128) != (array.ndim == 2) or array.ndim not in (1, 2) or (array.ndim == 2 and array.shape[1] != 2):
        raise UsageError(f"{width}-bit hash values must have the shape {expected}, not {array.shape}")
    values = np.ascontiguousarray(array, dtype=np.uint64).reshape(len(array), 2 if width == 128 else 1)
    if width == 32 and values.size:
        top = int(values.max())
        if top >> 32:
            raise UsageError(f"32-bit hash values must be below 2^32; got {top:#x}")
    return values


# --------------------------------------------------------------------------------------------------------
# Accumulator
# --------------------------------------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class BitCountsResult:
    """What a ``BitCounts`` accumulator learned.

    Attributes
    ----------
    hash_name, seed, width : the settings the counts belong to.
    keys : int
        Hash values counted (n).
    ones : numpy.ndarray of int64, shape (width,)
        ``ones[j]``: values with bit j set (bit 0 is the least significant).
    both : numpy.ndarray of int64, shape (width, width)
        ``both[i, j]``: values with bits i and j both set; symmetric, with ``both[j, j] == ones[j]``.
    """

    hash_name: str
    seed: int
    width: int
    keys: int
    ones: np.ndarray
    both: np.ndarray


class BitCounts:
    """Per-bit and per-pair counts of set bits over the hash values of one hash function and seed.

    Follows the accumulator contract of the project: ``update(hashes)`` adds a batch of hash values,
    ``merge(other)`` adds another accumulator's counts (associative and commutative), ``result()`` returns a
    frozen ``BitCountsResult``. Every value is counted exactly, so results do not depend on batch
    boundaries. Feed it the values of distinct keys (DESIGN.md, "Judge the hash on distinct keys").

    Parameters
    ----------
    hash_name : str
    seed : int
    width : {32, 64, 128}
        Output width of the hash in bits; 32-bit values must be below 2^32, 128-bit values come as
        ``uint64[n, 2]`` (low word, high word).

    Raises
    ------
    hashaudit.errors.UsageError
        For another width, and from ``update`` for values that do not fit the width or have the wrong shape.

    References
    ----------
    H. S. Warren, Hacker's Delight, 2nd ed., 2012, §5-1 and §7-3 (popcount and the bit-matrix transpose the
    pair counts are built on).
    """

    def __init__(self, hash_name: str, seed: int, width: int) -> None:
        if isinstance(width, bool) or width not in WIDTHS:
            raise UsageError(f"hash width must be 32, 64 or 128, not {width!r}")
        self.hash_name = hash_name
        self.seed = int(seed)
        self.width = int(width)
        self.pairs_ = np.zeros((self.width, self.width), dtype=np.int64)  # upper triangle, diagonal = ones
        self.keys_seen_ = 0

    def settings(self) -> tuple[str, int, int]:
        """The settings two accumulators must share to be merged."""
        return (self.hash_name, self.seed, self.width)

    def update(self, hashes: np.ndarray) -> BitCounts:
        """Count a batch of hash values (``uint64[n]``, or ``uint64[n, 2]`` for 128-bit functions)."""
        values = _as_values(hashes, self.width)
        if len(values):
            _pair_count_kernel(values, self.width, self.pairs_)
        self.keys_seen_ += len(values)
        return self

    def merge(self, other: BitCounts) -> BitCounts:
        """Add ``other``'s counts to this accumulator (in place); settings must match."""
        if not isinstance(other, BitCounts) or other.settings() != self.settings():
            theirs = other.settings() if isinstance(other, BitCounts) else type(other).__name__
            raise MergeError(f"cannot merge bit counts {theirs} into {self.settings()}: settings differ")
        self.pairs_ += other.pairs_
        self.keys_seen_ += other.keys_seen_
        return self

    def copy(self) -> BitCounts:
        """An independent copy."""
        twin = BitCounts(*self.settings())
        twin.pairs_ = self.pairs_.copy()
        twin.keys_seen_ = self.keys_seen_
        return twin

    def result(self) -> BitCountsResult:
        """The counts so far, frozen."""
        upper = np.triu(self.pairs_)
        both = upper + upper.T - np.diag(np.diag(upper))
        ones = np.diag(both).copy()
        both.setflags(write=False)
        ones.setflags(write=False)
        return BitCountsResult(self.hash_name, self.seed, self.width, self.keys_seen_, ones, both)

    def __eq__(self, other: object) -> bool:
        if not isinstance(other, BitCounts):
            return NotImplemented
        return (
            self.settings() == other.settings()
            and self.keys_seen_ == other.keys_seen_
            and bool(np.array_equal(self.pairs_, other.pairs_))
        )

    def __repr__(self) -> str:
        return f"BitCounts({self.hash_name!r}, seed={self.seed}, width={self.width}, keys={self.keys_seen_})"


# --------------------------------------------------------------------------------------------------------
# Tests of fit
# --------------------------------------------------------------------------------------------------------


def _monte_carlo_p(null: np.ndarray, observed: float) -> tuple[float, float]:
    """Upper and lower Monte Carlo p-values, (1 + #as extreme) / (S + 1) (Davison & Hinkley 1997, §4.2)."""
    tol = 1e-9 * max(1.0, abs(observed))
    upper = (1 + int(np.count_nonzero(null >= observed - tol))) / (len(null) + 1)
    lower = (1 + int(np.count_nonzero(null <= observed + tol))) / (len(null) + 1)
    return upper, lower


def _binomial_two_sided(ones: int, keys: int) -> float:
    """Exact two-sided p-value of ``ones`` successes in ``keys`` fair coin flips (doubling the smaller tail)."""
    lower = float(special.bdtr(ones, keys, 0.5))  # P(X <= ones)
    upper = float(special.bdtrc(ones - 1, keys, 0.5)) if ones > 0 else 1.0  # P(X >= ones)
    return min(1.0, 2.0 * min(lower, upper))


def _log_choose(n: int, k: np.ndarray | int) -> np.ndarray:
    """log C(n, k), elementwise over ``k``."""
    k = np.asarray(k, dtype=np.float64)
    return special.gammaln(n + 1.0) - special.gammaln(k + 1.0) - special.gammaln(n - k + 1.0)


def _hypergeometric_two_sided(both: int, keys: int, ones_i: int, ones_j: int) -> float:
    """Exact two-sided p-value of the 2×2 table given its margins (Fisher's test, doubling the smaller tail)."""
    support = np.arange(max(0, ones_i + ones_j - keys), min(ones_i, ones_j) + 1)
    log_pmf = _log_choose(ones_i, support) + _log_choose(keys - ones_i, ones_j - support) - _log_choose(keys, ones_j)
    pmf = np.exp(log_pmf)
    lower = float(pmf[support <= both].sum())
    upper = float(pmf[support >= both].sum())
    return min(1.0, 2.0 * min(lower, upper))


def _pair_z(ones: np.ndarray, both: np.ndarray, keys: int) -> tuple[np.ndarray, np.ndarray]:
    """z_ij = φ_ij·√(n − 1) over the upper triangle (0 elsewhere) and the mask of pairs whose φ is defined."""
    share = ones.astype(np.float64) / keys
    spread = share * (1.0 - share)
    width = len(ones)
    defined = np.triu((spread[:, None] > 0) & (spread[None, :] > 0), k=1)
    cov = both.astype(np.float64) / keys - share[:, None] * share[None, :]
    denominator = np.sqrt(spread[:, None] * spread[None, :])
    z = np.zeros((width, width))
    z[defined] = cov[defined] / denominator[defined] * math.sqrt(keys - 1.0)
    return z, defined


@lru_cache(maxsize=32)
def _simulated_bias_null(keys: int, width: int, seed: int) -> tuple[np.ndarray, float]:
    """Σ (2·ones_j − n)² of BIAS_DRAWS sets of ``width`` fair bits on ``keys`` values, and the mean of the
    largest |ones_j / n − 1/2|."""
    rng = np.random.default_rng([seed, keys, width, 1])
    ones = rng.binomial(keys, 0.5, size=(BIAS_DRAWS, width)).astype(np.int64)
    deviation = 2 * ones - keys
    return (deviation * deviation).sum(axis=1), float((np.abs(deviation).max(axis=1) / (2.0 * keys)).mean())


@lru_cache(maxsize=32)
def _simulated_pair_null(keys: int, width: int, seed: int) -> tuple[np.ndarray, float]:
    """The pair statistic of PAIR_DRAWS sets of ``keys`` uniform ``width``-bit values, and the mean of the
    largest |φ| (0 when no φ is defined)."""
    rng = np.random.default_rng([seed, keys, width, 2])
    words = 2 if width == 128 else 1
    high = 2**32 if width == 32 else 2**64
    statistics = np.empty(PAIR_DRAWS)
    largest = np.empty(PAIR_DRAWS)
    for draw in range(PAIR_DRAWS):
        values = rng.integers(0, high, size=(keys, words), dtype=np.uint64)
        counts = np.zeros((width, width), dtype=np.int64)
        _pair_count_kernel(values, width, counts)
        upper = np.triu(counts)
        z, _ = _pair_z(np.diag(upper), upper + upper.T, keys)
        statistics[draw] = float(np.sum(z * z))
        largest[draw] = float(np.abs(z).max()) / math.sqrt(keys - 1.0) if keys > 1 else 0.0
    return statistics, float(largest.mean())


def _bias_test(result: BitCountsResult, seed: int) -> FitTest:
    n, width = result.keys, result.width
    deviation = 2 * result.ones.astype(np.int64) - n  # exact integers: 2·ones − n
    squares = int(np.sum(deviation * deviation))  # n · Σ z_j²
    statistic = squares / n
    worst = int(np.argmax(np.abs(deviation)))
    observed_max = abs(int(deviation[worst])) / (2.0 * n)
    if n < EXACT_BELOW_KEYS:
        null, ideal = _simulated_bias_null(n, width, seed)
        p_upper, p_lower = _monte_carlo_p(null, float(squares))
        method = f"simulated binomial null ({BIAS_DRAWS} draws, seed {seed})"
    else:
        p_upper, p_lower = float(special.chdtrc(width, statistic)), float(special.chdtr(width, statistic))
        ideal = expected_max_abs_normal(width) / (2.0 * math.sqrt(n))
        method = f"chi-square with {width} degrees of freedom (sum of squared per-bit z-scores)"
    worst_p = min(1.0, width * _binomial_two_sided(int(result.ones[worst]), n))
    effect = Effect(
        "bit_bias_max",
        observed_max,
        observed_max,
        ideal,
        "largest deviation of a bit's share of ones from 1/2",
    )
    details = {
        "keys": n,
        "degrees_of_freedom": width,
        "worst_bit": worst,
        "worst_bit_ones_fraction": float(result.ones[worst]) / n,
        "worst_bit_p_bonferroni": worst_p,
    }
    return FitTest("bit_bias", statistic, float(width), statistic, p_upper, p_lower, method, effect, details)


def _correlation_test(result: BitCountsResult, seed: int) -> FitTest:
    n, width = result.keys, result.width
    all_pairs = width * (width - 1) // 2
    z, defined = _pair_z(result.ones, result.both, n)
    defined_pairs = int(np.count_nonzero(defined))
    statistic = float(np.sum(z * z))
    worst_pair: tuple[int, int] | None = None
    worst_phi = 0.0
    worst_p = 1.0
    if defined_pairs:
        flat = int(np.argmax(np.abs(z)))
        i, j = divmod(flat, width)
        worst_pair = (i, j)
        worst_phi = float(z[i, j]) / math.sqrt(n - 1.0)
        if n < EXACT_BELOW_KEYS:
            pair_p = _hypergeometric_two_sided(int(result.both[i, j]), n, int(result.ones[i]), int(result.ones[j]))
        else:
            pair_p = float(special.erfc(abs(float(z[i, j])) / math.sqrt(2.0)))
        worst_p = min(1.0, defined_pairs * pair_p)
    if n < EXACT_BELOW_KEYS:
        null, ideal = _simulated_pair_null(n, width, seed)
        p_upper, p_lower = _monte_carlo_p(null, statistic)
        method = f"simulated uniform null ({PAIR_DRAWS} draws, seed {seed})"
    elif defined_pairs:
        p_upper = float(special.chdtrc(defined_pairs, statistic))
        p_lower = float(special.chdtr(defined_pairs, statistic))
        # the pairs are pairwise uncorrelated under the null; treating them as independent for the maximum
        ideal = expected_max_abs_normal(defined_pairs) / math.sqrt(n - 1.0)
        method = f"chi-square with {defined_pairs} degrees of freedom (sum of (n - 1)·phi^2 over bit pairs)"
    else:
        p_upper = p_lower = 1.0
        ideal = 0.0
        method = "no bit pair has a defined phi (every bit is constant)"
    effect = Effect(
        "bit_correlation_max",
        abs(worst_phi),
        abs(worst_phi),
        ideal,
        "largest absolute phi coefficient between two bits",
    )
    details = {
        "keys": n,
        "degrees_of_freedom": defined_pairs,
        "undefined_pairs": all_pairs - defined_pairs,
        "worst_pair": worst_pair,
        "worst_pair_phi": worst_phi,
        "worst_pair_p_bonferroni": worst_p,
    }
    return FitTest(
        "bit_correlation", statistic, float(defined_pairs), statistic, p_upper, p_lower, method, effect, details
    )


def bit_tests(result: BitCountsResult, seed: int = 0) -> list[FitTest]:
    """The output-bit tests of fit: ``bit_bias`` and ``bit_correlation``.

    Parameters
    ----------
    result : BitCountsResult
        Bit counts over the hash values of distinct keys.
    seed : int
        Seed of the simulated nulls used below ``EXACT_BELOW_KEYS`` keys (recorded in each test's ``method``).

    Returns
    -------
    list of FitTest
        Empty when no key was counted. Otherwise two tests:

        ``bit_bias``
            statistic Σ_j z_j² with z_j = (2·ones_j − n)/√n, expected ``width``; ``p_upper`` / ``p_lower`` from
            χ²(width) (sf / cdf). Details: ``worst_bit`` (largest |ones_j/n − 1/2|, the lowest index on
            ties), ``worst_bit_ones_fraction``, ``worst_bit_p_bonferroni`` (exact two-sided binomial p-value
            times ``width``, at most 1). Effect ``bit_bias_max``: the largest |ones_j/n − 1/2| against its
            expectation under the null, E max_j |Z_j| / (2√n).
        ``bit_correlation``
            statistic Σ_{i<j} (n − 1)·φ_ij², expected K (pairs with a defined φ); ``p_upper`` / ``p_lower`` from
            χ²(K). Details: ``worst_pair`` (i, j) with i < j, ``worst_pair_phi`` (signed),
            ``worst_pair_p_bonferroni`` (normal, or exact hypergeometric for few keys, times K),
            ``undefined_pairs``. Effect ``bit_correlation_max``: the largest |φ| against
            E max |Z| / √(n − 1) over K pairs.

    References
    ----------
    Agresti, Categorical Data Analysis, 2nd ed., 2002, §2.4, §3.5 (phi, Fisher's exact test);
    Campbell, Statistics in Medicine 26 (2007) 3661-3675 (N − 1 chi-square); David & Nagaraja, Order
    Statistics, 3rd ed., 2003, §3.1; Davison & Hinkley 1997, §4.2 (Monte Carlo p-values).
    """
    if result.keys == 0:
        return []
    return [_bias_test(result, seed), _correlation_test(result, seed)]
