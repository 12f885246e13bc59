"""Neighbour families: keys one small change away from a sample of the user's own keys, and their checks.

Real key sets are full of near neighbours — the next order number, a user name typed in another case, the
same path under a longer prefix, a key with a separator appended — and weak hash functions fail on exactly
those: a function that adds bytes, reads only the low bytes, multiplies by a small constant or looks only at
the first bytes sends neighbours to the same or to adjacent buckets. A random sample of the keys hardly ever
holds two neighbours, so the bucket and collision checks on the whole set can miss the weakness that the next
batch of real keys will hit. This module derives, from a sample of the keys (a ``KeySample`` or any
``KeyBatch``), *families* of neighbours and tests how one hash function spreads each family.

Families (every one returns distinct keys, none of them a sample key; generation order is kept):

``counter``
    The last run of ASCII digits of a key is read as a counter: each sample key gives the next ``k`` values of
    its counter, written in the same width with leading zeros (``order-000123`` gives ``order-000124``,
    ``order-000125``, ...). A counter never widens: ``item-98`` gives ``item-99`` and stops. ``k`` is
    ``ceil(target / keys with digits)``. Empty when no key has a digit.
``one_char``
    For each key and each of its first ``positions`` and last ``positions`` byte positions, the byte plus one and
    the byte minus one. For a printable key (every byte in 0x20-0x7E) a change that leaves that range is skipped;
    for other keys, one that leaves 0-255.
``case``
    For each key and each of the same positions holding an ASCII letter, that letter with its case flipped
    (one position at a time). Empty when no key has a letter.
``shared_prefix``
    A long fixed prefix followed by each sample key's tail: the tail is the key after the sample's longest
    common prefix, and the prefix is that common prefix repeated (or, when the keys share no prefix, the first
    half of one sample key chosen by the seed, repeated), cut at 16, 32, 64, ... 1024 bytes — as many lengths as
    it takes to reach ``target`` keys.
``appended_byte``
    Each key with one byte appended; key i gets ``v = min(256, ceil(target / n))`` consecutive byte values
    (modulo 256) starting at ``(offset + i * v) mod 256``, so the values cycle through 0-255 across the sample;
    the offset is drawn from the seed.

Integer keys (``--key-format int``, integer columns read as 8-byte little-endian words) have families of their own,
made from the value rather than its bytes (a byte's ``+1`` in the last byte would be ``+2^56``); a key that is not
8 bytes long gives none:

``adjacent``
    The value plus one and minus one (modulo 2^64): the next and the previous id.
``stride``
    The value plus and minus each of ``STRIDES`` (2, 8, 64, 1000, 1024): ids allocated in steps, blocks of ids.
``bit_flip``
    The value with one of its 64 bits flipped.

A family generates at most ``CANDIDATE_BYTES`` (64 MiB) of candidate keys: when the sample keys are so long that
their neighbours would need more, only the leading sample keys give neighbours (a ``KeySample`` lists its keys in
random order, so these are a random subset). A family with more than ``target`` distinct new keys keeps a
uniform random subset of ``target`` of them (drawn from the seed, in generation order). The same sample, seed and
settings give the same families.

The test (``neighbour_tests``): for one hash function and each non-empty family, the family's keys are hashed
once; the colliding pairs in every requested table (``colliding_pairs`` of ``hashaudit.stats.fit``) and the
pairs with the same full hash value (``full_collisions`` of ``hashaudit.stats.collisions``) are the components,
and their p-values are combined by Bonferroni's inequality into one test per family, ``neighbour_<family>``.
Under uniform hashing the hash values of distinct keys are independent and uniform whatever the keys are, so
every component has its usual null law and the combined p-value is valid under any dependence between the
components.

References
----------
C. E. Bonferroni, "Teoria statistica delle classi e calcolo delle probabilità", Pubblicazioni del R. Istituto
Superiore di Scienze Economiche e Commerciali di Firenze 8 (1936) 3-62 (P(min p ≤ α/k) ≤ α).
D. E. Knuth, The Art of Computer Programming, vol. 3, 2nd ed. (1998), §6.4 (keys that are "clustered" —
sequences like ``PART1``, ``PART2``, ... — and why a hash must spread them).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from hashaudit.errors import UsageError
from hashaudit.keys.batch import KeyBatch
from hashaudit.stats import _hooks
from hashaudit.stats._hooks import Fingerprint, HashBatch
from hashaudit.stats._neighbour_kernels import (
    append_kernel,
    case_kernel,
    counter_kernel,
    first_occurrence_kernel,
    one_char_kernel,
    prefix_kernel,
)
from hashaudit.stats.buckets import BucketCounts
from hashaudit.stats.collisions import FullCollisions
from hashaudit.stats.outcome import FitTest
from hashaudit.stats.sample import KeySample

FAMILIES: tuple[str, ...] = ("counter", "one_char", "case", "shared_prefix", "appended_byte")
INTEGER_FAMILIES: tuple[str, ...] = ("adjacent", "stride", "bit_flip")
"""The families of integer keys (8-byte little-endian values), made from the value."""
ALL_FAMILIES: tuple[str, ...] = FAMILIES + INTEGER_FAMILIES
STRIDES: tuple[int, ...] = (2, 8, 64, 1000, 1024)
FAMILY_DESCRIPTIONS: dict[str, str] = {
    "counter": "the next values of the last run of digits, same width, zero-padded",
    "one_char": "one byte plus or minus one, in the first and last positions",
    "case": "the case of one ASCII letter flipped, in the first and last positions",
    "shared_prefix": "a long fixed prefix followed by each key's tail after the sample's common prefix",
    "appended_byte": "one byte appended, values cycling through 0-255",
    "adjacent": "the integer value plus or minus one",
    "stride": "the integer value plus or minus " + ", ".join(f"{s:,}" for s in STRIDES),
    "bit_flip": "one bit of the integer value flipped",
}
LENGTH_KEEPING: frozenset[str] = frozenset({"counter", "one_char", "case", *INTEGER_FAMILIES})
"""Families whose keys keep their sample key's length: the only ones that speak to a function of 8-byte integer
keys (``identity``, ``fibonacci``), which reads 8 bytes whatever the length."""
DEFAULT_TARGET = 50_000
DEFAULT_POSITIONS = 16
PREFIX_LENGTHS: tuple[int, ...] = (16, 32, 64, 128, 256, 512, 1024)
# Bytes of candidates one family may generate before repeats are dropped and the cap applies: only very long
# keys reach it (then only the first sample keys give neighbours; a KeySample is in random order).
CANDIDATE_BYTES = 64 << 20
# Mixed into the seed of the subsets and offsets, so a family's draws differ from the other seeded draws.
FAMILY_DOMAIN = 0x6661_6D69_6C69_6573  # "families"
SPARSE_FAMILY = 8  # a family with fewer keys than an eighth of the buckets is counted by its occupied buckets only


# ---------------------------------------------------------------------------------------------------------
# Helpers on KeyBatches


def _empty() -> KeyBatch:
    return KeyBatch(np.zeros(0, dtype=np.uint8), np.zeros(1, dtype=np.int64))


def _first_occurrences(batch: KeyBatch, fingerprint: Fingerprint) -> np.ndarray:
    """Boolean mask of the keys of a compact batch that no earlier key repeats."""
    prints = fingerprint(batch)
    order = np.argsort(prints, kind="stable").astype(np.int64)
    keep = np.zeros(len(batch), dtype=np.bool_)
    first_occurrence_kernel(batch.data, batch.offsets, prints, order, keep)
    return keep


def _new_keys(sample: KeyBatch, candidates: KeyBatch, fingerprint: Fingerprint) -> KeyBatch:
    """The candidates that are neither a sample key nor a repeat of an earlier candidate, in order."""
    if len(candidates) == 0:
        return candidates
    keep = _first_occurrences(KeyBatch.concat([sample, candidates]), fingerprint)[len(sample) :]
    return candidates.take(np.flatnonzero(keep))


def _rng(seed: int, family: str) -> np.random.Generator:
    return np.random.default_rng([int(seed), FAMILY_DOMAIN, ALL_FAMILIES.index(family)])


def _cap(keys: KeyBatch, target: int, rng: np.random.Generator) -> KeyBatch:
    """At most ``target`` keys: a uniform random subset, kept in generation order."""
    if len(keys) <= target:
        return keys
    chosen = np.sort(rng.choice(len(keys), size=target, replace=False))
    return keys.take(chosen)


def _run(  # type: ignore[no-untyped-def]
    kernel, batch: KeyBatch, keys_per_key: np.ndarray, bytes_per_key: np.ndarray, *args
) -> tuple[KeyBatch, int]:
    """Run a family kernel on the leading sample keys whose candidates fit in ``CANDIDATE_BYTES`` (all of them
    unless the keys are very long), given upper bounds of the candidates and bytes each key gives. Returns the
    candidates and the number of sample keys used."""
    total_bytes = np.cumsum(np.asarray(bytes_per_key, dtype=np.int64))
    used = int(np.searchsorted(total_bytes, CANDIDATE_BYTES, side="right"))
    if used == 0:
        return _empty(), 0
    out_data = np.empty(int(total_bytes[used - 1]), dtype=np.uint8)
    out_offsets = np.empty(int(np.sum(keys_per_key[:used])) + 1, dtype=np.int64)
    keys, written = kernel(batch.data, batch.offsets[: used + 1], *args, out_data, out_offsets)
    return KeyBatch(out_data[:written], out_offsets[: keys + 1]), used


def _window(lengths: np.ndarray, positions: int) -> np.ndarray:
    """Positions of each key inside the first and last ``positions`` bytes."""
    return np.minimum(lengths, 2 * positions)


def _longest_common_prefix(sample: KeyBatch) -> bytes:
    keys = sample.to_list()
    lo, hi = min(keys), max(keys)  # the common prefix of all keys is that of the smallest and largest
    n = 0
    while n < min(len(lo), len(hi)) and lo[n] == hi[n]:
        n += 1
    return lo[:n]


# ---------------------------------------------------------------------------------------------------------
# The families


def _counter(sample: KeyBatch, target: int, positions: int, rng: np.random.Generator) -> tuple[KeyBatch, int]:
    lengths = sample.lengths()
    has_digit = np.zeros(len(sample), dtype=np.bool_)
    digit = (sample.data >= 48) & (sample.data <= 57)
    if digit.any():
        owners = np.repeat(np.arange(len(sample)), lengths)
        has_digit[owners[digit]] = True
    with_digits = int(has_digit.sum())
    if with_digits == 0:
        return _empty(), 0
    steps = -(-target // with_digits)
    return _run(counter_kernel, sample, steps * has_digit, steps * lengths * has_digit, np.int64(steps))


def _one_char(sample: KeyBatch, target: int, positions: int, rng: np.random.Generator) -> tuple[KeyBatch, int]:
    lengths = sample.lengths()
    window = _window(lengths, positions)
    return _run(one_char_kernel, sample, 2 * window, 2 * window * lengths, np.int64(positions))


def _case(sample: KeyBatch, target: int, positions: int, rng: np.random.Generator) -> tuple[KeyBatch, int]:
    lengths = sample.lengths()
    window = _window(lengths, positions)
    return _run(case_kernel, sample, window, window * lengths, np.int64(positions))


def _appended_byte(sample: KeyBatch, target: int, positions: int, rng: np.random.Generator) -> tuple[KeyBatch, int]:
    n = len(sample)
    per_key = min(256, -(-target // n))
    offset = int(rng.integers(256))
    first_value = (offset + per_key * np.arange(n, dtype=np.int64)) % 256
    per = np.full(n, per_key, dtype=np.int64)
    return _run(append_kernel, sample, per, per * (sample.lengths() + 1), np.int64(per_key), first_value)


def _shared_prefix(sample: KeyBatch, target: int, positions: int, rng: np.random.Generator) -> tuple[KeyBatch, int]:
    n = len(sample)
    common = _longest_common_prefix(sample)
    base = common
    if not base:
        lengths = sample.lengths()
        nonempty = np.flatnonzero(lengths > 0)
        if len(nonempty) == 0:
            return _empty(), 0
        chosen = sample.key(int(nonempty[rng.integers(len(nonempty))]))
        base = chosen[: (len(chosen) + 1) // 2]
    longest = max(PREFIX_LENGTHS)
    prefix = np.frombuffer((base * (longest // len(base) + 1))[:longest], dtype=np.uint8).copy()
    chosen_lengths = []
    for length in PREFIX_LENGTHS:
        chosen_lengths.append(length)
        if n * len(chosen_lengths) >= target:
            break
    prefix_lengths = np.array(chosen_lengths, dtype=np.int64)
    count = np.full(n, len(prefix_lengths), dtype=np.int64)
    per_key_bytes = int(prefix_lengths.sum()) + count * (sample.lengths() - len(common))
    return _run(prefix_kernel, sample, count, per_key_bytes, np.int64(len(common)), prefix, prefix_lengths)


def _integer_values(sample: KeyBatch) -> np.ndarray:
    """The values of the sample's 8-byte keys, read as little-endian unsigned integers."""
    eight = np.flatnonzero(sample.lengths() == 8)
    if len(eight) == 0:
        return np.zeros(0, dtype=np.uint64)
    starts = sample.offsets[eight]
    rows = sample.data[starts[:, None] + np.arange(8)]
    return np.ascontiguousarray(rows).view("<u8").ravel().astype(np.uint64)


def _integer_family(values: np.ndarray, deltas: np.ndarray, xor: bool) -> tuple[KeyBatch, int]:
    """Every value combined with every delta (added modulo 2^64, or XORed), value by value, as 8-byte keys."""
    if len(values) == 0:
        return _empty(), 0
    with np.errstate(over="ignore"):
        out = (values[:, None] ^ deltas[None, :]) if xor else (values[:, None] + deltas[None, :])
    return KeyBatch.from_uint64(out.ravel()), len(values)


def _adjacent(sample: KeyBatch, target: int, positions: int, rng: np.random.Generator) -> tuple[KeyBatch, int]:
    deltas = np.array([1, (1 << 64) - 1], dtype=np.uint64)  # +1 and -1 modulo 2^64
    return _integer_family(_integer_values(sample), deltas, xor=False)


def _stride(sample: KeyBatch, target: int, positions: int, rng: np.random.Generator) -> tuple[KeyBatch, int]:
    deltas = np.array([d for s in STRIDES for d in (s, (1 << 64) - s)], dtype=np.uint64)
    return _integer_family(_integer_values(sample), deltas, xor=False)


def _bit_flip(sample: KeyBatch, target: int, positions: int, rng: np.random.Generator) -> tuple[KeyBatch, int]:
    deltas = np.left_shift(np.uint64(1), np.arange(64, dtype=np.uint64))
    return _integer_family(_integer_values(sample), deltas, xor=True)


_GENERATORS = {
    "counter": _counter,
    "one_char": _one_char,
    "case": _case,
    "shared_prefix": _shared_prefix,
    "appended_byte": _appended_byte,
    "adjacent": _adjacent,
    "stride": _stride,
    "bit_flip": _bit_flip,
}


@dataclass(frozen=True, eq=False)
class NeighbourFamily:
    """The keys of one neighbour family.

    Attributes
    ----------
    name : str
        One of ``FAMILIES`` or ``INTEGER_FAMILIES``.
    keys : KeyBatch
        Distinct keys, none of them a sample key, in generation order (may be empty).
    sample_keys : int
        Distinct sample keys (none of them is in the family).
    source_keys : int
        Sample keys whose neighbours were generated: all of them, unless the keys are so long that their
        candidates would pass ``CANDIDATE_BYTES`` (then the leading ones).
    candidates : int
        Distinct new keys before the cap at ``target``.
    seed, target, positions : int
        The settings it was generated with.
    """

    name: str
    keys: KeyBatch
    sample_keys: int
    source_keys: int
    candidates: int
    seed: int
    target: int
    positions: int

    def __len__(self) -> int:
        return len(self.keys)

    @property
    def description(self) -> str:
        """One line on the transformation."""
        return FAMILY_DESCRIPTIONS[self.name]


def _distinct_sample(sample: KeyBatch | KeySample, fingerprint: Fingerprint) -> KeyBatch:
    """The distinct keys of a sample, compact, at their first occurrences (weights play no part)."""
    batch = sample.keys() if isinstance(sample, KeySample) else KeyBatch(sample.data, sample.offsets).compact()
    if len(batch) == 0:
        return batch
    keep = _first_occurrences(batch, fingerprint)
    return batch if keep.all() else batch.take(np.flatnonzero(keep))


def _check_settings(seed: int, target: int, positions: int, names: Sequence[str]) -> None:
    if int(seed) != seed or seed < 0:
        raise UsageError(f"the neighbour seed must be a non-negative integer, not {seed!r}")
    if int(target) != target or target < 1:
        raise UsageError(f"the neighbour family size must be a positive integer, not {target!r}")
    if int(positions) != positions or positions < 1:
        raise UsageError(f"the neighbour positions must be a positive integer, not {positions!r}")
    for name in names:
        if name not in ALL_FAMILIES:
            raise UsageError(f"unknown neighbour family {name!r}; choose from {', '.join(ALL_FAMILIES)}")


def neighbour_family(
    name: str,
    sample: KeyBatch | KeySample,
    *,
    seed: int = 0,
    target: int = DEFAULT_TARGET,
    positions: int = DEFAULT_POSITIONS,
    fingerprint: Fingerprint | None = None,
) -> NeighbourFamily:
    """One neighbour family of a key sample (see the module notes for the transformations).

    Parameters
    ----------
    name : {"counter", "one_char", "case", "shared_prefix", "appended_byte", "adjacent", "stride", "bit_flip"}
        The last three are the families of integer keys (8-byte little-endian values).
    sample : KeyBatch or KeySample
        The keys the neighbours are derived from; repeated keys count once.
    seed : int, default 0
        Seed of the random choices (the subset kept when there are more than ``target`` keys, the appended
        byte offset, the key whose half is the shared prefix when the keys share none). Record it.
    target : int, default 50 000
        Largest family size; ``counter`` and ``appended_byte`` also size their steps from it.
    positions : int, default 16
        ``one_char`` and ``case`` change the first and the last ``positions`` bytes of each key.
    fingerprint : callable, optional
        ``batch -> uint64[n]``, a fixed-seed fingerprint that finds repeated keys (every match is confirmed
        bytewise); default ``hashaudit.hashes.fingerprint.dedup_fingerprints``.

    Returns
    -------
    NeighbourFamily
    """
    _check_settings(seed, target, positions, [name])
    dedup = _hooks.resolve(_hooks.DEDUP, fingerprint)
    return _family(name, _distinct_sample(sample, dedup), int(seed), int(target), int(positions), dedup)


def _family(
    name: str, sample: KeyBatch, seed: int, target: int, positions: int, fingerprint: Fingerprint
) -> NeighbourFamily:
    rng = _rng(seed, name)
    if len(sample) == 0:
        empty = _empty()
        return NeighbourFamily(name, empty, 0, 0, 0, seed, target, positions)
    candidates, used = _GENERATORS[name](sample, target, positions, rng)
    fresh = _new_keys(sample, candidates, fingerprint)
    return NeighbourFamily(name, _cap(fresh, target, rng), len(sample), used, len(fresh), seed, target, positions)


def neighbour_families(
    sample: KeyBatch | KeySample,
    *,
    seed: int = 0,
    target: int = DEFAULT_TARGET,
    positions: int = DEFAULT_POSITIONS,
    names: Sequence[str] | None = None,
    fingerprint: Fingerprint | None = None,
    integers: bool = False,
) -> list[NeighbourFamily]:
    """Every requested neighbour family of a key sample, in the order of ``names`` (empty ones included).

    Parameters are those of :func:`neighbour_family`; ``names`` selects the families: by default ``FAMILIES``,
    or ``INTEGER_FAMILIES`` when ``integers`` (the keys are 8-byte little-endian integers).
    """
    if names is None:
        names = INTEGER_FAMILIES if integers else FAMILIES
    _check_settings(seed, target, positions, names)
    dedup = _hooks.resolve(_hooks.DEDUP, fingerprint)
    distinct = _distinct_sample(sample, dedup)
    return [_family(name, distinct, int(seed), int(target), int(positions), dedup) for name in dict.fromkeys(names)]


# ---------------------------------------------------------------------------------------------------------
# The test


def _table_label(scheme: str | None, buckets: int | None) -> str:
    """``mask 2^16`` for powers of two, ``mod 65521`` otherwise, ``full value`` for no table."""
    if scheme is None or buckets is None:
        return "full value"
    if buckets > 1 and buckets & (buckets - 1) == 0:
        return f"{scheme} 2^{buckets.bit_length() - 1}"
    return f"{scheme} {buckets}"


def _combine(family: NeighbourFamily, components: list[tuple[str | None, int | None, FitTest]]) -> FitTest:
    k = len(components)
    # the worst component: smallest upper p-value, then the largest effect, then the first
    worst_index = min(range(k), key=lambda i: (components[i][2].p_upper, -components[i][2].effect.value, i))
    worst_scheme, worst_buckets, worst = components[worst_index]
    label = _table_label(worst_scheme, worst_buckets)
    p_upper = bonferroni([test.p_upper for *_, test in components])
    p_lower = bonferroni([test.p_lower for *_, test in components])
    method = (
        f"Bonferroni combination of {k} tests (colliding pairs in each table and full-value collisions): "
        f"{k} × the smallest p-value of each tail, capped at 1; worst: {label}, {worst.method}"
    )
    details = {
        "family": family.name,
        "transformation": family.description,
        "family_keys": len(family),
        "sample_keys": family.sample_keys,
        "source_keys": family.source_keys,
        "neighbour_seed": family.seed,
        "worst": label,
        "worst_scheme": worst_scheme,
        "worst_buckets": worst_buckets,
        "worst_check": worst.name,
        "components": [
            {
                "table": _table_label(scheme, buckets),
                "check": test.name,
                "p_upper": test.p_upper,
                "p_lower": test.p_lower,
                "effect": test.effect.value,
            }
            for scheme, buckets, test in components
        ],
    }
    return FitTest(
        f"neighbour_{family.name}",
        worst.statistic,
        worst.expected,
        worst.observed,
        p_upper,
        p_lower,
        method,
        worst.effect,
        details,
    )


def neighbour_tests(
    hash_batch: HashBatch,
    width: int,
    families: Sequence[NeighbourFamily],
    tables: Sequence[tuple[str, int]],
    seed: int = 0,
    seeded: bool = True,
    integer_keys: bool = False,
    name: str = "",
) -> list[tuple[str, FitTest]]:
    """One test of fit per non-empty neighbour family, for one hash function.

    Parameters
    ----------
    hash_batch : callable
        The hash function, ``(batch, seed) -> uint64[n]`` (``uint64[n, 2]``, low word first, for 128 bits), such
        as ``HashSpec.hash_batch``.
    width : int
        Its output bits (32, 64 or 128).
    families : sequence of NeighbourFamily
        From :func:`neighbour_families`.
    tables : sequence of (scheme, buckets)
        The tables of the audit. Every one is tested on every family, even when it has many more buckets than
        the family has keys (the colliding-pairs test handles sparse tables).
    seed : int, default 0
        Seed of the hash (when it takes one) and of the simulated nulls of small tables, as in the audit.
    seeded : bool, default True
        Whether the function takes a seed; an unseeded one is called with seed 0.
    integer_keys : bool, default False
        A function of 8-byte integer keys (it reads 8 bytes whatever the length): only the families that keep
        their keys' length (``LENGTH_KEEPING``) are tested.
    name : str, default ""
        The hash function's name, given to the accumulators (it appears in their error messages).

    Returns
    -------
    list of (family name, FitTest)
        The test ``neighbour_<family>``. Its components are ``colliding_pairs`` at each table and
        ``full_collisions``; ``p_upper`` is min(1, k · min p_upper) over the k components and ``p_lower`` the
        same over the lower tails (Bonferroni); ``statistic``, ``expected``, ``observed`` and ``effect`` are
        those of the worst component (smallest ``p_upper``), so its effect name (``lookup_cost_excess`` for a
        table, ``collision_excess`` for the full value) picks the threshold. ``details`` names the family, its
        size, the worst component (``worst``: ``mask 2^16`` or ``full value``, with ``worst_scheme`` and
        ``worst_buckets``, None for the full value) and every component's p-values and effect.

    References
    ----------
    C. E. Bonferroni (1936), see the module notes.
    """
    from hashaudit.stats.collisions import collision_tests
    from hashaudit.stats.fit import occupied_bucket_tests, occupied_counts

    hash_seed = seed if seeded else 0
    out: list[tuple[str, FitTest]] = []
    for family in families:
        if len(family) == 0 or (integer_keys and family.name not in LENGTH_KEEPING):
            continue
        values = hash_batch(family.keys, hash_seed)
        components: list[tuple[str | None, int | None, FitTest]] = []
        for scheme, buckets in tables:
            if len(values) * SPARSE_FAMILY < buckets:  # a few keys in a large table: no count per bucket
                occupied = occupied_counts(values, scheme, int(buckets), width)
            else:
                counts = BucketCounts(name, seed, scheme, int(buckets), width).update(values).result()
                occupied = counts.counts[counts.counts > 0]
            tests = occupied_bucket_tests(occupied, len(values), int(buckets), seed=seed, with_max_load=False)
            pairs = next(t for t in tests if t.name == "colliding_pairs")
            components.append((scheme, int(buckets), pairs))
        with FullCollisions(name, seed, width) as collisions:
            collisions.update(values)
            (full,) = collision_tests(collisions.result())
        components.append((None, None, full))
        out.append((family.name, _combine(family, components)))
    return out


def bonferroni(p_values: Sequence[float]) -> float:
    """min(1, k · min p) over k p-values: a valid p-value for "at least one null is false" under any
    dependence (Bonferroni 1936); 1 for no p-values."""
    if not p_values:
        return 1.0
    return min(1.0, len(p_values) * min(p_values))


__all__ = [
    "ALL_FAMILIES",
    "DEFAULT_POSITIONS",
    "DEFAULT_TARGET",
    "FAMILIES",
    "FAMILY_DESCRIPTIONS",
    "INTEGER_FAMILIES",
    "STRIDES",
    "NeighbourFamily",
    "bonferroni",
    "neighbour_families",
    "neighbour_family",
    "neighbour_tests",
]
