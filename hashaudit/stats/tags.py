"""``tag_bits``: false tag matches when a table keeps a few hash bits beside each slot.

Many hash tables store a short *tag* next to every entry — one byte, or seven bits and a flag, taken from the
hash value — and use other bits of the same value for the position. A lookup compares the tag of every entry in
the probed bucket (or group of slots) before it compares keys, so the cost of a lookup grows with the entries
that sit in its bucket *and* carry its tag without being its key: false tag matches. With an ideal hash the
position and the tag are uniform and independent, and a key meets on average (n - 1) / (m·2^t) other keys with
its bucket and its tag (m buckets, t tag bits). Tag bits that are not uniform on the user's keys, or that depend
on the position bits, raise that number; the bucket checks cannot see it, because they never look at the tag.

Counting needs one sort: every key becomes ``position·2^t + tag`` (below 2^48), the codes are sorted and the runs
of equal codes are the keys sharing a bucket and a tag. The pairs inside those runs are the colliding pairs of
a virtual table of m·2^t cells, so the birthday-problem moments and laws used elsewhere in hashaudit apply.

References
----------
T. H. Cormen, C. E. Leiserson, R. L. Rivest, C. Stein, Introduction to Algorithms, 3rd ed., MIT Press 2009,
§5.4.1 (expected number of pairs with the same birthday: C(n, 2) / m).
W. Feller, An Introduction to Probability Theory and Its Applications, vol. 1, 3rd ed., Wiley 1968, ch. II.3 (the
birthday problem).
R. Arratia, L. Goldstein, L. Gordon, "Two moments suffice for Poisson approximations: the Chen-Stein method",
Ann. Probab. 17 (1989) 9-25 (the Poisson law of the number of coincident pairs).
K. Pearson, "On the criterion that a given system of deviations from the probable in the case of a correlated
system of variables is such that it can be reasonably supposed to have arisen from random sampling",
Philosophical Magazine (5) 50 (1900) 157-175 (the chi-square test of goodness of fit; cited from memory).
"""

from __future__ import annotations

import hashaudit._numba_setup  # noqa: F401  (sets the numba cache folder before numba loads)

# isort: split

import math
import re
from dataclasses import dataclass

import numpy as np
from numba import njit, uint64

from hashaudit.errors import UsageError
from hashaudit.settings import SettingError
from hashaudit.stats._lazy import special
from hashaudit.stats.outcome import Effect, FitTest
from hashaudit.stats.tails import poisson_tails
from hashaudit.tables.schemes import bucket_index, check_scheme

__all__ = ["MAX_TAG_BITS", "TagLayout", "check_tag_layout", "parse_tag_bits", "tag_tests"]

MAX_TAG_BITS = 16
WIDTHS = (32, 64, 128)
# Below this load of the virtual table (keys per bucket-and-tag cell) the pairs take a Poisson law, above it
# the chi-square law of Pearson's statistic over the cells: the crossing point of their skewness errors.
POISSON_MAX_LOAD = 0.5
_OPTION_PATTERN = re.compile(r"([0-9]+)(?:@([0-9]+))?")


def parse_tag_bits(text: str) -> tuple[int, int | None]:
    """Read the ``--tag-bits N[@SHIFT]`` option: ``"7"`` gives ``(7, None)``, ``"8@56"`` gives ``(8, 56)``.

    Parameters
    ----------
    text : str
        N tag bits (1 to 16), optionally followed by ``@`` and the bit position of the lowest tag bit.

    Returns
    -------
    tuple of (int, int or None)
        The number of tag bits and the shift (``None``: the top bits of the hash value).

    Raises
    ------
    hashaudit.errors.UsageError
        When the text is not of that form or N is outside 1 to 16. Whether the shift fits the hash width is
        checked by :func:`tag_tests`, which knows the width.
    """
    match = _OPTION_PATTERN.fullmatch(text.strip()) if isinstance(text, str) else None
    if match is None:
        raise SettingError("tag_bits", f"{text!r} is not of the form N or N@SHIFT (e.g. 7 or 8@56)")
    tag_bits = int(match.group(1))
    if not 1 <= tag_bits <= MAX_TAG_BITS:
        raise SettingError("tag_bits", f"{text!r}: the number of tag bits must be 1 to {MAX_TAG_BITS}, not {tag_bits}")
    shift = match.group(2)
    return tag_bits, None if shift is None else int(shift)


@dataclass(frozen=True)
class TagLayout:
    """Where the tag sits in the hash value, and what the position scheme leaves of its independence.

    Attributes
    ----------
    tag_bits, tag_shift : int
        The tag is ``(h >> tag_shift) & (2^tag_bits - 1)``.
    bits : int
        Width of the value the bits refer to, ``min(width, 64)``.
    scheme_excess_bound : float
        Largest relative excess of false tag matches that the scheme itself gives an ideal hash (0 when the
        position and the tag are exactly independent; see :func:`tag_tests`, Notes).
    """

    tag_bits: int
    tag_shift: int
    bits: int
    scheme_excess_bound: float


def _whole(value: object, name: str) -> int:
    """``value`` as an int if it is a whole number (not a bool), else UsageError."""
    if isinstance(value, bool | np.bool_) or not isinstance(value, int | np.integer):
        raise UsageError(f"{name} must be a whole number, not {value!r}")
    return int(value)


def _fixed_bits(scheme: str, buckets: int, bits: int) -> tuple[int, int] | None:
    """Half-open range of hash bits that the position fixes (``None`` when it fixes none)."""
    if buckets <= 1:
        return None
    if scheme == "mask":
        return 0, buckets.bit_length() - 1
    if scheme == "high":
        return bits - (buckets.bit_length() - 1), bits
    if scheme == "mod":
        # h mod m determines h mod 2^v when 2^v divides m
        trailing_zeros = (buckets & -buckets).bit_length() - 1
        return (0, trailing_zeros) if trailing_zeros else None
    # range is monotone in h: the position fixes the top ceil(log2 m) bits up to one step at a bucket boundary
    return bits - (buckets - 1).bit_length(), bits


def _tag_periods(scheme: str, buckets: int, bits: int, tag_bits: int, tag_shift: int) -> float:
    """r of the Notes of :func:`tag_tests`: how many times the tag pattern repeats inside one bucket (``inf`` when
    the scheme leaves position and tag exactly independent)."""
    odd_part = buckets >> ((buckets & -buckets).bit_length() - 1)
    if scheme in ("mask", "high") or odd_part == 1:
        return math.inf
    free_above = 2.0 ** (bits - tag_shift - tag_bits)
    if scheme == "range":
        return free_above / buckets
    fixed_low = buckets.bit_length() - odd_part.bit_length()
    return max(2.0 ** (tag_shift - fixed_low), free_above) / odd_part


def _layout_problem(scheme: str, buckets: int, bits: int, tag_bits: int, tag_shift: int) -> str | None:
    """Why this tag cannot be tested against an ideal hash with this scheme, or ``None``."""
    if tag_shift + tag_bits > bits:
        return f"do not fit in a {bits}-bit hash value"
    fixed = _fixed_bits(scheme, buckets, bits)
    if fixed is not None and tag_shift < fixed[1] and tag_shift + tag_bits > fixed[0]:
        return f"overlap the bits {fixed[0]}..{fixed[1] - 1} that --scheme {scheme} fixes with {buckets} buckets"
    if _tag_periods(scheme, buckets, bits, tag_bits, tag_shift) < 1.0:
        return f"are nearly fixed by the position: --scheme {scheme} with {buckets} buckets leaves too few bits free"
    return None


def _shift_ranges(shifts: list[int]) -> str:
    """``[0, 1, 2, 7]`` as ``"0-2, 7"``."""
    ranges: list[list[int]] = []
    for shift in shifts:
        if ranges and shift == ranges[-1][1] + 1:
            ranges[-1][1] = shift
        else:
            ranges.append([shift, shift])
    return ", ".join(str(a) if a == b else f"{a}-{b}" for a, b in ranges)


def check_tag_layout(width: int, scheme: str, buckets: int, tag_bits: int, tag_shift: int | None = None) -> TagLayout:
    """Check a tag layout before any key is hashed, and resolve the default shift.

    Parameters
    ----------
    width : {32, 64, 128}
        Output width of the hash in bits; bit positions refer to a ``min(width, 64)``-bit value.
    scheme : {"mod", "mask", "high", "range"}
    buckets : int
        Table size m.
    tag_bits : int
        Number of tag bits t, 1 to 16.
    tag_shift : int, optional
        Bit position s of the lowest tag bit; default ``min(width, 64) - t`` (the top bits).

    Returns
    -------
    TagLayout

    Raises
    ------
    hashaudit.errors.UsageError
        For an unknown width or scheme, a table size the scheme cannot use, t outside 1 to 16, tag bits that do
        not fit in the value, tag bits that overlap the bits the position fixes (the low log2 m bits for
        ``mask``, the top log2 m bits for ``high``, the top ceil(log2 m) bits for ``range``, the low v bits for
        ``mod`` when 2^v divides m) or, for ``mod``, a table so large that the position leaves the tag nearly
        fixed (r < 1 in the Notes of :func:`tag_tests`). The message lists the shifts that would work.
    """
    if width not in WIDTHS:
        raise UsageError(f"hash width must be 32, 64 or 128, not {width!r}")
    check_scheme(scheme, buckets)
    m = int(buckets)
    t = _whole(tag_bits, "tag_bits")
    if not 1 <= t <= MAX_TAG_BITS:
        raise SettingError("tag_bits", f"{t}: the number of tag bits must be 1 to {MAX_TAG_BITS}")
    bits = min(width, 64)
    s = bits - t if tag_shift is None else _whole(tag_shift, "tag_shift")
    if s < 0:
        raise SettingError("tag_bits", f"{t}@{s}: SHIFT must be 0 or more")
    problem = _layout_problem(scheme, m, bits, t, s)
    if problem is not None:
        usable = [shift for shift in range(bits - t + 1) if _layout_problem(scheme, m, bits, t, shift) is None]
        hint = f"SHIFT {_shift_ranges(usable)} would do" if usable else "no SHIFT works; use fewer tag bits or buckets"
        raise SettingError("tag_bits", f"{t}@{s}: the tag bits {s}..{s + t - 1} {problem} ({hint})")
    periods = _tag_periods(scheme, m, bits, t, s)
    values_per_bucket = 2.0**bits / m
    bound = 0.0
    if math.isfinite(periods):
        # uneven tags inside a bucket, times the uneven bucket sizes (floor or ceil of 2^bits / m values)
        within, between = 0.25 / periods**2, 0.25 / values_per_bucket**2
        bound = within + between + within * between
    return TagLayout(t, s, bits, bound)


@njit(cache=True, nogil=True)
def _pairs_kernel(sorted_codes, tag_bits):  # pragma: no cover - compiled
    """(pairs of equal codes, pairs of equal codes >> tag_bits) in sorted codes: the keys sharing a bucket and a
    tag, and those sharing a bucket."""
    shift = uint64(tag_bits)
    same_cell = 0
    same_bucket = 0
    cell_run = 0
    bucket_run = 0
    for i in range(1, sorted_codes.shape[0]):
        if sorted_codes[i] == sorted_codes[i - 1]:
            cell_run += 1
            same_cell += cell_run
        else:
            cell_run = 0
        if (sorted_codes[i] >> shift) == (sorted_codes[i - 1] >> shift):
            bucket_run += 1
            same_bucket += bucket_run
        else:
            bucket_run = 0
    return same_cell, same_bucket


def tag_tests(
    values: np.ndarray, width: int, scheme: str, buckets: int, tag_bits: int, tag_shift: int | None = None
) -> list[FitTest]:
    """The ``tag_bits`` test: false tag matches per lookup against an ideal hash.

    Parameters
    ----------
    values : numpy.ndarray of uint64
        Hash values of *distinct* keys: ``uint64[n]`` (for 128-bit functions the low 64-bit word, or
        ``uint64[n, 2]`` rows of which the low word is used). For 32-bit functions only the low 32 bits count.
    width : {32, 64, 128}
        Output width of the hash in bits; bit positions refer to a ``min(width, 64)``-bit value.
    scheme : {"mod", "mask", "high", "range"}
        How the position is taken from the hash value (:func:`hashaudit.tables.schemes.bucket_index`).
    buckets : int
        Table size m (buckets, or groups of slots probed together).
    tag_bits : int
        Number of tag bits t, 1 to 16.
    tag_shift : int, optional
        Bit position s of the lowest tag bit; the tag is ``(h >> s) & (2^t - 1)``. Default: the top t bits,
        ``min(width, 64) - t``.

    Returns
    -------
    list of FitTest
        One test named ``tag_bits`` (none when ``values`` is empty). ``statistic`` and ``observed`` are the false
        tag matches per lookup F = (1/n) Σ c(c - 1) over the groups of c keys sharing a bucket and a tag (for
        each key, the other keys with its position and its tag); ``expected`` is (n - 1) / (m·2^t). ``p_upper``
        and ``p_lower`` are the tails of the number P = nF/2 of pairs sharing bucket and tag (see Notes;
        ``method`` names the law). The effect ``tag_match_excess`` is (F - ideal) / max(ideal, 1/n): 0.5 means
        half as many false tag matches again as an ideal hash gives. ``details`` holds plain numbers only:

        ``tag_bits``, ``tag_shift``, ``buckets``, ``scheme``, ``width``, ``keys``
            The layout tested.
        ``same_tag_pairs``, ``expected_same_tag_pairs``, ``z_score``
            P, its ideal mean C(n, 2) / (m·2^t) and (P - mean) / standard deviation.
        ``scheme_excess_bound``
            Largest relative excess the scheme itself gives an ideal hash (0 for ``mask`` and ``high``, for m a
            power of two, and whenever position and tag are exactly independent; see Notes).
        ``tag_uniformity_p``
            Pearson's chi-square test of the 2^t tag counts against the uniform law, upper tail (2^t - 1
            degrees of freedom).
        ``worst_tag``, ``worst_tag_share``, ``ideal_tag_share``
            The most frequent tag (the smallest on ties), its share of the keys, and 1 / 2^t.
        ``dependence_ratio``
            P over the pairs expected if tags were drawn independently of the position with the observed tag
            frequencies: Σ_b C(c_b, 2) · Σ_g p_g² (c_b keys in bucket b, p_g the share of tag g). Above 1 the
            tag depends on the position; ``None`` when no two keys share a bucket (then P = 0 too).
        ``false_matches_given_marginals``
            The false tag matches per lookup those independent tags would give, 2 Σ_b C(c_b, 2) Σ_g p_g² / n.
            Its distance from ``expected`` is the cost of uneven buckets and uneven tags; the distance from it to
            ``observed`` is the cost of the dependence.

    Raises
    ------
    hashaudit.errors.UsageError
        For a layout that :func:`check_tag_layout` refuses.

    Notes
    -----
    Under uniform hashing the pair (position, tag) of a key is uniform over m' = m·2^t cells, so P is the
    number of colliding pairs of n keys in m' buckets: mean μ = C(n, 2)/m' and variance C(n, 2)(1/m')(1 - 1/m')
    (:func:`hashaudit.stats.theory.var_colliding_pairs`). Its third cumulant, from the same pairwise
    independent indicators (only the triangles of pairs have a non-zero joint cumulant; derived here, and
    checked against simulated tables), is C(n, 2) p(1 - p)(1 - 2p) + 6 C(n, 3) p²(1 - p) with p = 1/m', about
    μ(1 + 2λ) at load λ = n/m'. A Poisson law has third cumulant μ, the χ²(m' - 1) law of Pearson's statistic
    over the cells (P is an affine function of it: X² = 2m'P/n + m' - n) about 2λμ, and a normal law none.
    The Poisson law is therefore used while λ < 0.5 (the usual case: a table with a few keys per bucket and a
    7-bit tag has λ near 0.01) and the chi-square law above; each is closer than a normal law on its side.

    *What the scheme itself costs.* With ``mask`` and ``high`` (and ``mod`` or ``range`` with m a power of two)
    position and tag are exactly independent once they do not overlap. With ``mod`` or ``range`` and any other
    m they are not quite: ``range`` maps a run of about 2^W/m consecutive values to a bucket, and tag bits
    below the position bits repeat r = 2^(W - s - t)/m times in that run, so when r is not whole some tags get
    one repetition more than others; ``mod`` with m = 2^v·u (u odd) does the same with
    r = max(2^(s - v), 2^(W - s - t))/u. Each bucket then holds the tags with probabilities that make the
    chance of two keys sharing a tag larger by frac(r)(1 - frac(r))/r² ≤ 1/(4r²) (derived here; exact counts
    over sampled buckets and simulated tables agree: 12 % at r = 4/3, 0.2 % at r = 32/3), and bucket sizes
    that differ by one value add at most 1/(4(2^W/m)²). That bound is ``scheme_excess_bound``; ``p_upper`` is
    computed as if the ideal mean were μ(1 + bound), so the scheme's own share never makes a hash fail (a
    64-bit hash with ``mod`` and the default top tag has a bound below 10^-14). ``expected`` and the effect
    stay against the fully independent ideal.

    References
    ----------
    Cormen et al., Introduction to Algorithms, 3rd ed., §5.4.1 (C(n, 2) / m colliding pairs); Feller, vol. 1,
    ch. II.3 (the birthday problem); R. Arratia, L. Goldstein, L. Gordon, Ann. Probab. 17 (1989) 9-25 (Poisson
    law of the pairs); K. Pearson, Phil. Mag. (5) 50 (1900) 157-175 (chi-square goodness of fit).
    """
    # theory imports scipy when it loads; it is needed only once the keys have been hashed
    from hashaudit.stats import theory

    layout = check_tag_layout(width, scheme, buckets, tag_bits, tag_shift)
    m, t, s, bits = int(buckets), layout.tag_bits, layout.tag_shift, layout.bits
    hashes = np.asarray(values)
    if hashes.ndim == 2:  # 128-bit rows (low, high): tables use the low word
        hashes = hashes[:, 0]
    hashes = np.ascontiguousarray(hashes, dtype=np.uint64)
    if bits == 32:
        hashes = hashes & np.uint64(0xFFFFFFFF)
    n = len(hashes)
    if n == 0:
        return []

    tag_count = 1 << t
    tags = (hashes >> np.uint64(s)) & np.uint64(tag_count - 1)
    codes = bucket_index(hashes, scheme, m, bits) << np.uint64(t)
    codes |= tags
    codes.sort()
    pair_counts = _pairs_kernel(codes, t)
    del codes
    same_tag_pairs, bucket_pairs = int(pair_counts[0]), int(pair_counts[1])

    tag_counts = np.bincount(tags.astype(np.int64), minlength=tag_count)
    tag_shares = tag_counts / n
    marginal_pairs = bucket_pairs * float(np.dot(tag_shares, tag_shares))
    expected_per_tag = n / tag_count
    uniformity_x2 = float(np.sum((tag_counts - expected_per_tag) ** 2) / expected_per_tag)
    worst_tag = int(np.argmax(tag_counts))

    cells = m * tag_count
    load = n / cells
    expected_pairs = theory.expected_colliding_pairs(cells, n)
    variance = theory.var_colliding_pairs(cells, n)
    bound = layout.scheme_excess_bound
    # bounds below 1e-9 (every 64-bit hash with the default top tag) change no p-value worth printing
    allowance = f"; upper tail allows {bound:.2g} relative excess from the scheme" if bound > 1e-9 else ""
    if load < POISSON_MAX_LOAD:
        p_upper = poisson_tails(same_tag_pairs, expected_pairs * (1.0 + bound))[0]
        p_lower = poisson_tails(same_tag_pairs, expected_pairs)[1]
        method = f"Poisson law of the pairs sharing bucket and tag (load {load:.3g} per cell{allowance})"
    else:

        def pearson(pairs: float) -> float:
            return 2.0 * cells * pairs / n + cells - n

        p_upper = float(special.chdtrc(cells - 1, pearson(same_tag_pairs - bound * expected_pairs)))
        p_lower = float(special.chdtr(cells - 1, pearson(same_tag_pairs)))
        method = (
            f"chi-square with {cells - 1} degrees of freedom (pairs sharing bucket and tag are an affine function "
            f"of X^2 over the m·2^t cells; load {load:.3g}{allowance})"
        )

    observed = 2.0 * same_tag_pairs / n
    ideal = (n - 1) / cells
    effect = Effect(
        "tag_match_excess", (observed - ideal) / max(ideal, 1.0 / n), observed, ideal, "false tag matches per lookup"
    )
    details = {
        "tag_bits": t,
        "tag_shift": s,
        "buckets": m,
        "scheme": scheme,
        "width": int(width),
        "keys": n,
        "same_tag_pairs": same_tag_pairs,
        "expected_same_tag_pairs": expected_pairs,
        "z_score": (same_tag_pairs - expected_pairs) / math.sqrt(variance) if variance > 0 else 0.0,
        "scheme_excess_bound": bound,
        "tag_uniformity_p": float(special.chdtrc(tag_count - 1, uniformity_x2)),
        "worst_tag": worst_tag,
        "worst_tag_share": float(tag_shares[worst_tag]),
        "ideal_tag_share": 1.0 / tag_count,
        "dependence_ratio": same_tag_pairs / marginal_pairs if marginal_pairs > 0 else None,
        "false_matches_given_marginals": 2.0 * marginal_pairs / n,
    }
    return [FitTest("tag_bits", observed, ideal, observed, p_upper, p_lower, method, effect, details)]
