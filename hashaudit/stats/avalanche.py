"""Avalanche and bit independence of a hash function on a sample of the user's own keys.

Two checks from the design of block ciphers, applied to the keys a system really hashes:

* **strict avalanche criterion** (``avalanche``): flipping one input bit flips every output bit with
  probability 1/2 (Webster & Tavares 1985). For every sample key and every bit of its first ``max_bytes``
  bytes, the key with that bit flipped is hashed; the flip probability of every (input bit, output bit) cell is
  estimated from the XOR of the two hashes.
* **bit independence criterion** (``bit_independence``): over the same flips, two output bits flip
  independently of each other (Webster & Tavares 1985), measured by the phi coefficient of their flip
  indicators.

The keys come from ``KeySample`` (``hashaudit.stats.sample``, also importable from here), a bottom-k sample:
every key gets a priority from a keyed PRF (SipHash-2-4 under a key derived from the sample seed) and the ``size``
distinct keys with the smallest priorities are kept. The sample is therefore a uniform sample of the distinct
keys, depends only on the set of keys and the seed (never on batch boundaries or order), and two samples merge
exactly into the sample of the union (Cohen & Kaplan 2007).

Under an ideal (random) hash the XOR of the hashes of two distinct keys is uniform. The flips of one cell are
then independent — except when both a key and its flipped neighbour are in the sample (sequential ids make
this common): the pair would be counted twice with the same XOR, doubling the variance of its cell. Each such
unordered pair is counted once, from the key whose bit is 0.

References
----------
A. F. Webster, S. E. Tavares, "On the design of S-boxes", CRYPTO '85, LNCS 218 (1986) 523-534.
E. Cohen, H. Kaplan, "Summarizing data using bottom-k sketches", PODC 2007, 225-234.
J.-P. Aumasson, D. J. Bernstein, "SipHash: a fast short-input PRF", INDOCRYPT 2012.
K. Pearson, "On the criterion that a given system of deviations ...", Phil. Mag. 50 (1900) 157-175
(chi-square; N·phi² is Pearson's statistic of a 2 x 2 table).
C. E. Bonferroni, "Teoria statistica delle classi e calcolo delle probabilità" (1936) (worst-cell correction).
"""

from __future__ import annotations

import hashaudit._numba_setup  # noqa: F401

# isort: split

import math
from collections.abc import Iterator
from dataclasses import dataclass
from typing import Any

import numpy as np
from numba import njit, uint64

from hashaudit.errors import UsageError
from hashaudit.keys.batch import KeyBatch
from hashaudit.stats import _hooks
from hashaudit.stats._bitops import popcount
from hashaudit.stats._hooks import Fingerprint, HashBatch
from hashaudit.stats._lazy import special
from hashaudit.stats.bits import _pair_z, _transpose64
from hashaudit.stats.outcome import Effect, FitTest
from hashaudit.stats.sample import DEFAULT_SAMPLE_SIZE, KeySample, _bottom_k, _key_compare
from hashaudit.stats.tails import expected_max_abs_normal

DEFAULT_MAX_BYTES = 16
MIN_TRIALS_FOR_EFFECT = 30  # cells with fewer trials have too coarse a flip probability to enter the effect
# Up to this many candidate flips the flips are kept with the keys at their two ends, and both tests take their null
# law from simulated ideal hashes of those keys (FlipGraph): the chi-square laws need many flips, and few sample keys
# close to each other (one-byte keys, say) share neighbours, whose flips are then not independent.
EXACT_BELOW_FLIPS = 1024
NULL_DRAWS = 999
# Flips hashed at once: bounds memory for long keys (bytes) and keeps the bit columns of the pair counts in cache.
FLIP_CHUNK_FLIPS = 1 << 16
FLIP_CHUNK_BYTES = 1 << 25
_EXPECTED_MAX_GRID = 4001


# ---------------------------------------------------------------------------------------------------------
# Kernels


@njit(cache=True, nogil=True)
def _flip_kernel(data, offsets, max_bytes, out_data, out_offsets, input_bit, parent):  # pragma: no cover - compiled
    """Every single-bit flip of the first min(len, max_bytes) bytes of every key: bit b of byte j is input bit 8j+b."""
    position = 0
    f = 0
    out_offsets[0] = 0
    for k in range(offsets.shape[0] - 1):
        s = offsets[k]
        length = offsets[k + 1] - s
        m = min(length, max_bytes)
        for j in range(m):
            for b in range(8):
                for t in range(length):
                    out_data[position + t] = data[s + t]
                out_data[position + j] ^= np.uint8(1 << b)
                input_bit[f] = 8 * j + b
                parent[f] = k
                position += length
                f += 1
                out_offsets[f] = position


@njit(cache=True, nogil=True)
def _member_kernel(
    s_data, s_offsets, s_order, s_fingerprints, f_data, f_offsets, f_fingerprints, f_position, out
):  # pragma: no cover - compiled
    """``out[f]``: flipped key f is one of the sample keys (fingerprint match confirmed bytewise)."""
    total = s_fingerprints.shape[0]
    for f in range(f_fingerprints.shape[0]):
        out[f] = False
        p = f_position[f]
        fs = f_offsets[f]
        fl = f_offsets[f + 1] - fs
        while p < total and s_fingerprints[p] == f_fingerprints[f]:
            k = s_order[p]
            ks = s_offsets[k]
            if _key_compare(f_data, fs, fl, s_data, ks, s_offsets[k + 1] - ks) == 0:
                out[f] = True
                break
            p += 1


@njit(cache=True, nogil=True)
def _accumulate_kernel(original, flipped, parent, input_bit, keep, width, counts, columns):  # pragma: no cover
    """XOR each kept flip's hash with its key's hash; count, per (input bit, output bit), how often the output bit
    flipped, and set bit ``kept`` of ``columns[j]`` (zeros on entry) when output bit j flipped. Returns the number
    of kept flips.

    The differences of 64 kept flips at a time are transposed as a 64 × 64 bit matrix, so that each output bit's
    column word is written once, rather than one bit at a time at 64 places apart in memory (17-28 times faster on
    a chunk of 65,536 flips: ``bench/bench_avalanche_kernel.py``, 2026-12-03)."""
    words = original.shape[1]
    block = np.zeros((words, 64), dtype=np.uint64)
    kept = 0
    for f in range(flipped.shape[0]):
        if not keep[f]:
            continue
        row = input_bit[f]
        i = kept & 63
        for w in range(words):
            d = original[parent[f], w] ^ flipped[f, w]
            top = min(64, width - 64 * w)
            for j in range(top):
                # branch-free: an output bit flips about half the time, so a branch on it would mispredict often
                counts[row, 64 * w + j] += np.int64((d >> uint64(j)) & uint64(1))
            block[w, 63 - i] = d
        kept += 1
        if i == 63:
            _columns_of_block(block, width, columns, (kept - 1) >> 6)
    rest = kept & 63
    if rest:
        for i in range(rest, 64):
            for w in range(words):
                block[w, 63 - i] = 0
        _columns_of_block(block, width, columns, kept >> 6)
    return kept


@njit(cache=True, nogil=True)
def _columns_of_block(block, width, columns, slot):  # pragma: no cover - compiled
    """``columns[j, slot]``: bit i set when output bit j of the block's flip i flipped (flip i's differences are in
    ``block[w, 63 - i]``; the block is transposed in place)."""
    for w in range(block.shape[0]):
        rows = block[w]
        _transpose64(rows)  # row c now holds bit 63 - c of every difference, flip i's at bit i
        top = min(64, width - 64 * w)
        for j in range(top):
            columns[64 * w + j, slot] = rows[63 - j]


@njit(cache=True, nogil=True)
def _pair_kernel(columns, used_words, pair_counts):  # pragma: no cover - compiled
    """``pair_counts[j, k] += popcount(columns[j] & columns[k])`` for j <= k, mirrored below the diagonal."""
    width = columns.shape[0]
    for j in range(width):
        for k in range(j, width):
            total = uint64(0)
            for t in range(used_words):
                total += popcount(columns[j, t] & columns[k, t])
            pair_counts[j, k] += total
            if k != j:
                pair_counts[k, j] += total


# ---------------------------------------------------------------------------------------------------------
# Flips and the avalanche matrix


def _flips(sample: KeyBatch, max_bytes: int) -> tuple[KeyBatch, np.ndarray, np.ndarray]:
    lengths = np.diff(sample.offsets)
    flips_per_key = 8 * np.minimum(lengths, max_bytes)
    total_flips = int(flips_per_key.sum())
    total_bytes = int(np.dot(flips_per_key, lengths))
    out_data = np.empty(total_bytes, dtype=np.uint8)
    out_offsets = np.empty(total_flips + 1, dtype=np.int64)
    input_bit = np.empty(total_flips, dtype=np.int64)
    parent = np.empty(total_flips, dtype=np.int64)
    _flip_kernel(sample.data, sample.offsets, max_bytes, out_data, out_offsets, input_bit, parent)
    return KeyBatch(out_data, out_offsets), input_bit, parent


def _check_max_bytes(max_bytes: int) -> int:
    if int(max_bytes) != max_bytes or max_bytes < 1:
        raise UsageError(
            f"max_bytes (input bytes whose bits are flipped) must be a positive integer, not {max_bytes!r}"
        )
    return int(max_bytes)


def flip_batch(sample: KeyBatch, max_bytes: int = DEFAULT_MAX_BYTES) -> tuple[KeyBatch, np.ndarray]:
    """Every single-bit flip of the first bytes of every key.

    Parameters
    ----------
    sample : KeyBatch
        The keys.
    max_bytes : int, default 16
        Only bits of the first ``min(len(key), max_bytes)`` bytes are flipped.

    Returns
    -------
    flips : KeyBatch
        Key by key, byte by byte, bit by bit (least significant first): bit b of byte j flipped. Empty keys
        contribute nothing.
    input_bit : numpy.ndarray of int64
        For every flip, the input bit flipped, ``8 * j + b``.
    """
    flips, input_bit, _ = _flips(sample, _check_max_bytes(max_bytes))
    return flips, input_bit


@dataclass(frozen=True, eq=False)
class FlipGraph:
    """The counted flips of a small sample, with the keys at their two ends (kept up to ``EXACT_BELOW_FLIPS``).

    Attributes
    ----------
    xors : numpy.ndarray of uint64, shape (flips, words)
        The XOR of the two hashes of every counted flip (``words`` = 2 for 128-bit functions).
    ends : numpy.ndarray of int64, shape (flips, 2)
        The two keys of every flip, numbered 0 .. ``vertices`` − 1 (sample keys first, then the distinct flipped
        keys that are not sample keys).
    input_bit : numpy.ndarray of int64, shape (flips,)
        The input bit each flip flipped.
    vertices : int
        Distinct keys at the ends of the flips.
    """

    xors: np.ndarray
    ends: np.ndarray
    input_bit: np.ndarray
    vertices: int


@dataclass(frozen=True)
class AvalancheResult:
    """Flip counts of one hash function on one key sample.

    Attributes
    ----------
    hash_name : str
    hash_seed : int
        Seed of the audited hash.
    sample_seed : int or None
        Seed of the ``KeySample`` the keys came from (None when a plain ``KeyBatch`` was given).
    width : int
        Output bits w (32, 64 or 128; for 128 the low word holds bits 0-63).
    max_bytes : int
        Input bytes flipped per key; there are ``8 * max_bytes`` input bits.
    keys : int
        Distinct sample keys.
    flips : int
        Flips counted (each unordered pair of sample keys one bit apart counted once).
    pairs_counted_once : int
        Flips skipped because the flipped key is itself a sample key whose flip gives back the same pair.
    trials : numpy.ndarray of int64, shape (8 * max_bytes,)
        S_i: flips counted for input bit i.
    flip_counts : numpy.ndarray of int64, shape (8 * max_bytes, w)
        How often output bit j flipped when input bit i was flipped.
    pair_counts : numpy.ndarray of int64, shape (w, w)
        Over all counted flips, how often output bits j and k both flipped (the diagonal: how often bit j
        flipped).
    graph : FlipGraph or None
        The flips and their keys, when there were at most ``EXACT_BELOW_FLIPS`` candidate flips (the tests then
        simulate their null laws); None otherwise.
    """

    hash_name: str
    hash_seed: int
    sample_seed: int | None
    width: int
    max_bytes: int
    keys: int
    flips: int
    pairs_counted_once: int
    trials: np.ndarray
    flip_counts: np.ndarray
    pair_counts: np.ndarray
    graph: FlipGraph | None = None

    def flip_probability(self) -> np.ndarray:
        """P(output bit j flips | input bit i flipped); NaN for input bits no key has."""
        with np.errstate(invalid="ignore", divide="ignore"):
            return np.where(self.trials[:, None] > 0, self.flip_counts / np.maximum(self.trials, 1)[:, None], np.nan)


def _distinct(batch: KeyBatch, fingerprint: Fingerprint) -> KeyBatch:
    """The distinct keys of ``batch``, each at its first occurrence, in batch order."""
    return batch.take(np.sort(_bottom_k(batch, fingerprint(batch), len(batch))))


def _chunks(sample: KeyBatch, max_bytes: int) -> list[tuple[int, int]]:
    """Ranges of sample keys whose flips fit the chunk budgets (at least one key each)."""
    lengths = np.diff(sample.offsets)
    flips = 8 * np.minimum(lengths, max_bytes)
    cost = np.maximum(flips / FLIP_CHUNK_FLIPS, flips * lengths / FLIP_CHUNK_BYTES)
    chunk_id = np.floor(np.cumsum(cost) - cost).astype(np.int64)
    starts = np.concatenate([[0], np.flatnonzero(np.diff(chunk_id)) + 1])
    stops = np.concatenate([starts[1:], [len(sample)]])
    return [(int(a), int(b)) for a, b in zip(starts, stops, strict=True)]


def _as_words(hashes: np.ndarray) -> np.ndarray:
    return np.ascontiguousarray(hashes.reshape(len(hashes), -1), dtype=np.uint64)


@dataclass(frozen=True, eq=False)
class _FlipChunk:
    """One chunk of flipped keys: the flips, which input bit each flips and of which sample key, which are counted
    (``keep``: not a pair already counted from the other end) and, for a small sample, the sample key each lands on
    (or -1) with its 64-bit fingerprint."""

    flips: KeyBatch
    input_bit: np.ndarray
    parent: np.ndarray
    keep: np.ndarray
    trials: np.ndarray
    landing: np.ndarray | None
    fingerprints: np.ndarray | None


@dataclass(frozen=True, eq=False)
class AvalancheFlips:
    """The flipped keys of a sample, which of them land on sample keys, and which are counted: the work of an
    avalanche matrix that does not depend on the hash function (``avalanche_flips``), made once and shared by every
    hash of an audit when it fits ``SHARED_FLIPS_BYTES``, else made again chunk by chunk for each."""

    keys: KeyBatch
    sample_seed: int | None
    max_bytes: int
    small: bool
    member: Fingerprint
    kept: tuple[_FlipChunk, ...] | None

    def chunks(self) -> Iterator[_FlipChunk]:
        """The chunks, kept or made now."""
        if self.kept is not None:
            yield from self.kept
        else:
            yield from _flip_chunks(self.keys, self.max_bytes, self.small, self.member)


SHARED_FLIPS_BYTES = 48 << 20  # flips kept for every hash up to this size (4,096 16-byte keys: about 21 MiB)


def avalanche_flips(
    sample: KeySample | KeyBatch,
    max_bytes: int = DEFAULT_MAX_BYTES,
    *,
    fingerprint: Fingerprint | None = None,
    share: bool = True,
) -> AvalancheFlips:
    """The hash-independent part of ``avalanche_matrix`` for ``sample``: pass it to several calls (one per hash
    function) to make it once. With ``share`` (and within ``SHARED_FLIPS_BYTES``) the flips are made now and kept;
    otherwise each use makes them again, chunk by chunk."""
    max_bytes = _check_max_bytes(max_bytes)
    member = _hooks.resolve(_hooks.MEMBER, fingerprint)
    sample_seed = sample.seed if isinstance(sample, KeySample) else None
    keys = sample.keys() if isinstance(sample, KeySample) else _distinct(sample, member)
    flipped_bits = 8 * np.minimum(keys.lengths(), max_bytes)
    small = 0 < int(np.sum(flipped_bits)) <= EXACT_BELOW_FLIPS
    # the flipped keys' bytes, and per flip its offset, input bit, parent (8 bytes each) and mark (1 byte)
    size = int(np.dot(flipped_bits, keys.lengths())) + 25 * int(np.sum(flipped_bits))
    kept = None
    if share and size <= SHARED_FLIPS_BYTES:
        kept = tuple(_flip_chunks(keys, max_bytes, small, member))
    return AvalancheFlips(keys, sample_seed, max_bytes, small, member, kept)


def _flip_chunks(keys: KeyBatch, max_bytes: int, small: bool, member: Fingerprint) -> Iterator[_FlipChunk]:
    if not len(keys):
        return
    input_bits = 8 * max_bytes
    fingerprints = member(keys)
    member_order = np.argsort(fingerprints, kind="stable").astype(np.int64)
    member_sorted = fingerprints[member_order]
    for start, stop in _chunks(keys, max_bytes):
        part = keys.slice(start, stop)
        flips, input_bit, parent = _flips(part, max_bytes)
        if len(flips) == 0:
            continue
        parent += start
        flip_fingerprints = member(flips)
        position = np.searchsorted(member_sorted, flip_fingerprints, side="left").astype(np.int64)
        in_sample = np.empty(len(flips), dtype=np.bool_)
        _member_kernel(
            keys.data,
            keys.offsets,
            member_order,
            member_sorted,
            flips.data,
            flips.offsets,
            flip_fingerprints,
            position,
            in_sample,
        )
        # bit value of the flipped input bit in the original key: 1 means the neighbour owns the pair
        byte = keys.data[keys.offsets[parent] + input_bit // 8]
        bit_was_set = ((byte >> (input_bit % 8).astype(np.uint8)) & 1).astype(np.bool_)
        keep = ~(in_sample & bit_was_set)
        trials = np.bincount(input_bit[keep], minlength=input_bits)
        landing = None
        if small:
            # the sample key a flip lands on (a fingerprint match, confirmed bytewise above), or -1
            landing = np.where(in_sample, member_order[np.minimum(position, len(keys) - 1)], -1)
        yield _FlipChunk(flips, input_bit, parent, keep, trials, landing, flip_fingerprints if small else None)


def avalanche_matrix(
    hash_batch: HashBatch,
    width: int,
    sample: KeySample | KeyBatch,
    seed: int = 0,
    max_bytes: int = DEFAULT_MAX_BYTES,
    name: str = "",
    *,
    fingerprint: Fingerprint | None = None,
    flips: AvalancheFlips | None = None,
) -> AvalancheResult:
    """Flip counts of every (input bit, output bit) cell, and co-flip counts of every pair of output bits.

    Parameters
    ----------
    hash_batch : callable
        The hash function, ``(batch, seed) -> uint64[n]`` (``uint64[n, 2]``, low word first, for 128 bits), such
        as ``HashSpec.hash_batch``.
    width : int
        Its output bits (32, 64 or 128); all of them are used.
    sample : KeySample or KeyBatch
        The keys (repeated keys of a ``KeyBatch`` are counted once).
    seed : int, default 0
        Seed of the hash function.
    max_bytes : int, default 16
        Bits of the first ``max_bytes`` bytes of each key are flipped.
    name : str, default ""
        The hash function's name, recorded in the result.
    fingerprint : callable, optional
        ``batch -> uint64[n]``, a fixed-seed fingerprint telling whether a flipped key is a sample key (every
        match is confirmed bytewise); default ``hashaudit.hashes.fingerprint.member_fingerprints``.
    flips : AvalancheFlips, optional
        ``avalanche_flips(sample, max_bytes)``, made once for several hash functions; ``sample`` and
        ``fingerprint`` are then its own.

    Returns
    -------
    AvalancheResult

    Notes
    -----
    Hashes are computed with ``hash_batch`` over whole batches of flipped keys. When the flipped key is itself in
    the sample, the unordered pair is counted once (from the key whose flipped bit is 0), so that the flips of a
    cell stay independent under an ideal hash.

    References
    ----------
    A. F. Webster, S. E. Tavares, "On the design of S-boxes", CRYPTO '85, LNCS 218 (1986) 523-534.
    """
    max_bytes = _check_max_bytes(max_bytes)
    if width not in (32, 64, 128):
        raise UsageError(f"hash {name!r}: width must be 32, 64 or 128, not {width!r}")
    if flips is None:
        flips = avalanche_flips(sample, max_bytes, fingerprint=fingerprint, share=False)
    elif flips.max_bytes != max_bytes:
        raise UsageError(f"flips of the first {flips.max_bytes} bytes given for max_bytes {max_bytes}")
    keys = flips.keys
    input_bits = 8 * max_bytes
    flip_counts = np.zeros((input_bits, width), dtype=np.int64)
    pair_counts = np.zeros((width, width), dtype=np.int64)
    trials = np.zeros(input_bits, dtype=np.int64)
    counted = skipped = 0
    kept_parts: list[tuple[np.ndarray, ...]] = []
    if len(keys):
        original = _as_words(hash_batch(keys, seed))
        for chunk in flips.chunks():
            parent, input_bit, keep = chunk.parent, chunk.input_bit, chunk.keep
            flipped = _as_words(hash_batch(chunk.flips, seed))
            columns = np.zeros((width, (len(chunk.flips) + 63) // 64), dtype=np.uint64)
            kept = _accumulate_kernel(original, flipped, parent, input_bit, keep, width, flip_counts, columns)
            _pair_kernel(columns, (kept + 63) // 64, pair_counts)
            trials += chunk.trials
            counted += kept
            skipped += len(chunk.flips) - kept
            if chunk.landing is not None and chunk.fingerprints is not None:
                kept_parts.append(
                    (
                        (original[parent] ^ flipped)[keep],
                        parent[keep],
                        chunk.landing[keep],
                        chunk.fingerprints[keep],
                        input_bit[keep],
                    )
                )
    graph = _flip_graph(kept_parts, len(keys), width) if flips.small and kept_parts else None
    for array in (trials, flip_counts, pair_counts):
        array.setflags(write=False)
    return AvalancheResult(
        name,
        int(seed),
        flips.sample_seed,
        width,
        max_bytes,
        len(keys),
        counted,
        skipped,
        trials,
        flip_counts,
        pair_counts,
        graph,
    )


def _flip_graph(parts: list[tuple[np.ndarray, ...]], sample_keys: int, width: int) -> FlipGraph:
    """The counted flips of a small sample as a graph on keys: sample keys first, then the other flipped keys
    (told apart by their 64-bit fingerprints)."""
    xors, parent, landing, prints, input_bit = (np.concatenate(column) for column in zip(*parts, strict=True))
    outside = landing < 0
    distinct, number = np.unique(prints[outside], return_inverse=True)
    other = landing.copy()
    other[outside] = sample_keys + number
    ends = np.stack([parent, other], axis=1).astype(np.int64)
    words = np.ascontiguousarray(xors, dtype=np.uint64)
    bits = input_bit.astype(np.int64)
    for array in (words, ends, bits):
        array.setflags(write=False)
    return FlipGraph(words, ends, bits, sample_keys + len(distinct))


@dataclass(frozen=True, eq=False)
class _GraphNull:
    """Both tests' statistics on the flips of a small sample, observed and under ``NULL_DRAWS`` ideal hashes."""

    avalanche: float
    avalanche_null: np.ndarray
    pairs: float
    pairs_null: np.ndarray
    largest_z: float
    largest_z_null: np.ndarray
    draws: int
    seed: int


@njit(cache=True, nogil=True)
def _flip_statistics_kernel(xors, cell, trials, width, planes, block, out):  # pragma: no cover - compiled
    """The avalanche chi-square, Σ (N − 1)·φ² over the output-bit pairs and the largest |z| of one set of flips
    (``xors``: uint64[N, words]; ``cell``: each flip's input-bit row in ``trials``), into ``out[0:3]``."""
    n = xors.shape[0]
    words = xors.shape[1]
    blocks = (n + 63) // 64
    counts = np.zeros((trials.shape[0], width), dtype=np.int64)
    for f in range(n):
        for w in range(words):
            top = min(64, width - 64 * w)
            value = xors[f, w]
            for j in range(top):
                if (value >> uint64(j)) & uint64(1):
                    counts[cell[f], 64 * w + j] += 1
    for b in range(blocks):
        filled = min(64, n - 64 * b)
        for w in range(words):
            for k in range(filled):
                block[k] = xors[64 * b + k, w]
            for k in range(filled, 64):
                block[k] = uint64(0)
            _transpose64(block)
            for c in range(64):
                planes[64 * w + 63 - c, b] = block[c]
    avalanche = 0.0
    for r in range(trials.shape[0]):
        for j in range(width):
            d = 2.0 * counts[r, j] - trials[r]
            avalanche += d * d / trials[r]
    ones = np.zeros(width, dtype=np.int64)
    for a in range(width):
        total = 0
        for b in range(blocks):
            total += popcount(planes[a, b])
        ones[a] = total
    pairs = 0.0
    largest = 0.0
    scale = math.sqrt(n - 1.0) if n > 1 else 0.0
    for a in range(width):
        share_a = ones[a] / n
        spread_a = share_a * (1.0 - share_a)
        if spread_a <= 0.0:
            continue
        for c in range(a + 1, width):
            share_c = ones[c] / n
            spread_c = share_c * (1.0 - share_c)
            if spread_c <= 0.0:
                continue
            both = 0
            for b in range(blocks):
                both += popcount(planes[a, b] & planes[c, b])
            z = (both / n - share_a * share_c) / math.sqrt(spread_a * spread_c) * scale
            pairs += z * z
            largest = max(largest, abs(z))
    out[0] = avalanche
    out[1] = pairs
    out[2] = largest


@njit(cache=True, nogil=True)
def _graph_null_kernel(values, ends, cell, trials, width, out):  # pragma: no cover - compiled
    """``_flip_statistics_kernel`` for each draw of key values (``values``: uint64[draws, vertices, words]), a
    flip's XOR being the XOR of the values of its two keys."""
    n = ends.shape[0]
    words = values.shape[2]
    xors = np.empty((n, words), dtype=np.uint64)
    planes = np.zeros((64 * words, (n + 63) // 64), dtype=np.uint64)
    block = np.zeros(64, dtype=np.uint64)
    for d in range(values.shape[0]):
        for f in range(n):
            for w in range(words):
                xors[f, w] = values[d, ends[f, 0], w] ^ values[d, ends[f, 1], w]
        _flip_statistics_kernel(xors, cell, trials, width, planes, block, out[d])


def _graph_null(result: AvalancheResult) -> _GraphNull:
    """Simulate ideal hashes of the keys of the flip graph: an independent uniform ``width``-bit value per key, a
    flip's XOR the XOR of its two keys' values. This is the exact null law of both statistics, whatever keys
    share neighbours (Davison & Hinkley 1997, §4.2, for the Monte Carlo p-values)."""
    graph = result.graph
    assert graph is not None
    width = result.width
    n = len(graph.input_bit)
    rows, cell = np.unique(graph.input_bit, return_inverse=True)
    trials = np.bincount(cell, minlength=len(rows)).astype(np.int64)
    cell = cell.astype(np.int64)
    seed = int(result.sample_seed or 0)
    rng = np.random.default_rng([seed, n, graph.vertices, width, 0x5AC])
    words = graph.xors.shape[1]
    top = np.uint64(0xFFFF_FFFF) if width == 32 else np.uint64(0xFFFF_FFFF_FFFF_FFFF)
    observed = np.zeros(3)
    planes = np.zeros((64 * words, (n + 63) // 64), dtype=np.uint64)
    _flip_statistics_kernel(graph.xors, cell, trials, width, planes, np.zeros(64, dtype=np.uint64), observed)
    simulated = np.empty((NULL_DRAWS, 3))
    step = max(1, (1 << 21) // max(1, graph.vertices * words))  # draws per block: about 16 MiB of key values
    ends = np.ascontiguousarray(graph.ends)
    for start in range(0, NULL_DRAWS, step):
        stop = min(NULL_DRAWS, start + step)
        values = rng.integers(0, 1 << 64, size=(stop - start, graph.vertices, words), dtype=np.uint64) & top
        _graph_null_kernel(values, ends, cell, trials, width, simulated[start:stop])
    return _GraphNull(
        float(observed[0]),
        simulated[:, 0],
        float(observed[1]),
        simulated[:, 1],
        float(observed[2]),
        simulated[:, 2],
        NULL_DRAWS,
        seed,
    )


def _monte_carlo_p(null: np.ndarray, observed: float) -> tuple[float, float]:
    """Upper and lower Monte Carlo p-values, (1 + #as extreme) / (S + 1) (Davison & Hinkley 1997, §4.2)."""
    tol = 1e-9 * max(1.0, abs(observed))
    upper = (1 + int(np.count_nonzero(null >= observed - tol))) / (len(null) + 1)
    lower = (1 + int(np.count_nonzero(null <= observed + tol))) / (len(null) + 1)
    return upper, lower


# ---------------------------------------------------------------------------------------------------------
# Tests of fit


def expected_max_bias(trials: np.ndarray) -> float:
    """E max |X_c / S_c - 1/2| over independent cells c with X_c ~ Binomial(S_c, 1/2).

    Parameters
    ----------
    trials : numpy.ndarray of int
        S_c for every cell (positive).

    Returns
    -------
    float
        The integral of P(max > t) over t, by the trapezoidal rule on a grid of 4001 points (its error is below
        the grid step, about 1e-4 of the upper limit); each cell's law is the exact binomial.
    """
    trials = np.asarray(trials, dtype=np.int64)
    if len(trials) == 0:
        return 0.0
    values, multiplicity = np.unique(trials, return_counts=True)
    # beyond t_high every cell is within t with probability 1 - 1e-15 or more (normal tail of the smallest S)
    t_high = min(0.5, (math.sqrt(2.0 * math.log(2.0 * len(trials))) + 8.0) / (2.0 * math.sqrt(values[0])))
    t = np.linspace(0.0, t_high, _EXPECTED_MAX_GRID)
    log_cdf = np.zeros_like(t)
    for s, count in zip(values.tolist(), multiplicity.tolist(), strict=True):
        k = np.arange(s + 1, dtype=np.float64)
        pmf = np.exp(
            special.gammaln(s + 1.0) - special.gammaln(k + 1.0) - special.gammaln(s - k + 1.0) - s * math.log(2)
        )
        cdf = np.concatenate([[0.0], np.cumsum(pmf)])  # cdf[k + 1] = P(X <= k)
        low = np.ceil(s / 2.0 - t * s - 1e-9).astype(np.int64)
        high = np.floor(s / 2.0 + t * s + 1e-9).astype(np.int64)
        inside = np.clip(cdf[np.clip(high, -1, s) + 1] - cdf[np.clip(low, 0, s + 1)], 1e-300, 1.0)
        log_cdf += count * np.log(inside)
    return float(np.trapezoid(-np.expm1(log_cdf), t))


def _binomial_two_sided(successes: np.ndarray, trials: np.ndarray) -> np.ndarray:
    """Two-sided exact binomial p-value at 1/2: twice the smaller tail, capped at 1."""
    lower = special.bdtr(successes, trials, 0.5)
    upper = np.where(successes > 0, special.bdtrc(np.maximum(successes - 1, 0), trials, 0.5), 1.0)
    return np.minimum(1.0, 2.0 * np.minimum(lower, upper))


def _avalanche_test(result: AvalancheResult, null: _GraphNull | None) -> FitTest:
    rows = np.flatnonzero(result.trials > 0)
    trials = result.trials[rows][:, None].astype(np.float64)
    counts = result.flip_counts[rows].astype(np.float64)
    cells = counts.size
    z_squared = (2.0 * counts - trials) ** 2 / trials
    chi2 = float(z_squared.sum())
    if null is None:
        p_chi = (float(special.chdtrc(cells, chi2)), float(special.chdtr(cells, chi2)))
        aggregate = f"against chi-square with {cells} degrees of freedom"
    else:
        p_chi = _monte_carlo_p(null.avalanche_null, chi2)
        aggregate = f"against its law under {null.draws} simulated ideal hashes of the same keys (seed {null.seed})"
    trials_grid = np.broadcast_to(result.trials[rows][:, None], counts.shape)
    cell_p = _binomial_two_sided(result.flip_counts[rows], trials_grid)
    worst = int(np.lexsort(((-z_squared).ravel(), cell_p.ravel()))[0])
    worst_row, worst_bit = divmod(worst, result.width)
    worst_p = min(1.0, float(cell_p.ravel()[worst]) * cells)
    bias = np.abs(counts / trials - 0.5)
    enough = result.trials[rows] >= MIN_TRIALS_FOR_EFFECT
    observed_bias = float(bias[enough].max()) if enough.any() else 0.0
    ideal_bias = expected_max_bias(np.repeat(result.trials[rows][enough], result.width))
    effect = Effect(
        "avalanche_bias_max",
        observed_bias,
        observed_bias,
        ideal_bias,
        f"largest |P(output bit flips) - 1/2| over cells with at least {MIN_TRIALS_FOR_EFFECT} flips",
    )
    details: dict[str, Any] = {
        "cells": cells,
        "degrees_of_freedom": cells,
        "chi_square_p_upper": p_chi[0],
        "worst_input_bit": int(rows[worst_row]),
        "worst_output_bit": worst_bit,
        "worst_flip_probability": float(
            result.flip_counts[rows[worst_row], worst_bit] / result.trials[rows[worst_row]]
        ),
        "worst_trials": int(result.trials[rows[worst_row]]),
        "worst_p_bonferroni": worst_p,
        "effect_cells": int(enough.sum()) * result.width,
        **_common_details(result),
    }
    method = (
        f"sum of z^2 over {cells} (input bit, output bit) cells {aggregate}, "
        "and the worst cell by an exact two-sided binomial test with Bonferroni correction; p_upper is the smaller "
        "of the two p-values times 2 (Bonferroni)"
    )
    p_upper = min(1.0, 2.0 * min(p_chi[0], worst_p))
    return FitTest("avalanche", chi2, float(cells), chi2, p_upper, p_chi[1], method, effect, details)


def _bit_independence_test(result: AvalancheResult, null: _GraphNull | None) -> FitTest:
    if null is not None:
        return _bit_independence_simulated(result, null)
    n = float(result.flips)
    flipped = np.diag(result.pair_counts).astype(np.float64)
    j, k = np.triu_indices(result.width, 1)
    both = result.pair_counts[j, k].astype(np.float64)
    variance = flipped * (n - flipped)
    denominator = variance[j] * variance[k]
    valid = denominator > 0
    phi = np.zeros(len(j))
    phi[valid] = (n * both[valid] - flipped[j[valid]] * flipped[k[valid]]) / np.sqrt(denominator[valid])
    pairs = int(valid.sum())
    chi2 = float(n * np.dot(phi, phi))
    if pairs:
        p_chi = (float(special.chdtrc(pairs, chi2)), float(special.chdtr(pairs, chi2)))
        worst = int(np.argmax(np.abs(phi)))
        worst_p = min(1.0, float(special.chdtrc(1, n * phi[worst] ** 2)) * pairs)
    else:
        p_chi, worst, worst_p = (1.0, 1.0), 0, 1.0
    observed = float(abs(phi[worst])) if len(phi) else 0.0
    effect = Effect(
        "bit_independence_max",
        observed,
        observed,
        expected_max_abs_normal(pairs) / math.sqrt(n) if n > 0 else 0.0,
        "largest |correlation| (phi) between the flips of two output bits",
    )
    details: dict[str, Any] = {
        "pairs": pairs,
        "degrees_of_freedom": pairs,
        "degenerate_pairs": len(j) - pairs,
        "chi_square_p_upper": p_chi[0],
        "worst_output_bits": [int(j[worst]), int(k[worst])] if len(j) else [],
        "worst_phi": float(phi[worst]) if len(phi) else 0.0,
        "worst_p_bonferroni": worst_p,
        **_common_details(result),
    }
    method = (
        f"N * phi^2 summed over {pairs} pairs of output bits against chi-square with {pairs} degrees of freedom, "
        "and the worst pair (chi-square with 1 degree of freedom) with Bonferroni correction; p_upper is the "
        "smaller of the two p-values times 2 (Bonferroni)"
    )
    p_upper = min(1.0, 2.0 * min(p_chi[0], worst_p))
    return FitTest("bit_independence", chi2, float(pairs), chi2, p_upper, p_chi[1], method, effect, details)


def _bit_independence_simulated(result: AvalancheResult, null: _GraphNull) -> FitTest:
    """``bit_independence`` on few flips: Σ (N − 1)·φ² (the "N − 1" chi-square of Campbell 2007, whose mean is
    exact) and the largest |φ|, both against their simulated laws, so the worst pair needs no Bonferroni factor."""
    n = result.flips
    z, defined = _pair_z(np.diag(result.pair_counts), result.pair_counts, n)
    pairs = int(np.count_nonzero(defined))
    width = result.width
    scale = math.sqrt(n - 1.0) if n > 1 else 1.0
    if pairs:
        flat = int(np.argmax(np.abs(z)))
        j, k = divmod(flat, width)
        phi = float(z[j, k]) / scale
        p_chi = _monte_carlo_p(null.pairs_null, null.pairs)
        worst_p = _monte_carlo_p(null.largest_z_null, null.largest_z)[0]
    else:
        j, k, phi, p_chi, worst_p = 0, 1, 0.0, (1.0, 1.0), 1.0
    effect = Effect(
        "bit_independence_max",
        abs(phi),
        abs(phi),
        float(null.largest_z_null.mean()) / scale,
        "largest |correlation| (phi) between the flips of two output bits",
    )
    details: dict[str, Any] = {
        "pairs": pairs,
        "degrees_of_freedom": pairs,
        "degenerate_pairs": width * (width - 1) // 2 - pairs,
        "chi_square_p_upper": p_chi[0],
        "worst_output_bits": [j, k],
        "worst_phi": phi,
        "worst_p_bonferroni": worst_p,
        "simulated_draws": null.draws,
        **_common_details(result),
    }
    method = (
        f"(N - 1) * phi^2 summed over {pairs} pairs of output bits, and the largest |phi|, each against its law "
        f"under {null.draws} simulated ideal hashes of the same keys (seed {null.seed}); p_upper is the smaller of "
        "the two p-values times 2 (Bonferroni)"
    )
    p_upper = min(1.0, 2.0 * min(p_chi[0], worst_p))
    statistic = null.pairs
    return FitTest("bit_independence", statistic, float(pairs), statistic, p_upper, p_chi[1], method, effect, details)


def _common_details(result: AvalancheResult) -> dict[str, Any]:
    return {
        "keys": result.keys,
        "flips": result.flips,
        "pairs_counted_once": result.pairs_counted_once,
        "input_bits_used": int(np.count_nonzero(result.trials)),
        "max_bytes": result.max_bytes,
        "hash_seed": result.hash_seed,
        "sample_seed": result.sample_seed,
    }


def avalanche_tests(result: AvalancheResult) -> list[FitTest]:
    """The ``avalanche`` and ``bit_independence`` tests of fit of one avalanche matrix.

    ``avalanche`` (strict avalanche criterion): each cell's flip count C_ij over S_i flips gives
    z = (C_ij - S_i/2) / sqrt(S_i/4); the sum of z^2 over the cells with S_i > 0 is compared with chi-square
    with as many degrees of freedom as cells, and the worst cell gets an exact binomial test with Bonferroni
    correction. The effect ``avalanche_bias_max`` is the largest |C_ij/S_i - 1/2| over cells with at least
    ``MIN_TRIALS_FOR_EFFECT`` flips; its ideal is the expected value of that maximum under an ideal hash
    (exact binomial laws, cells treated as independent).

    ``bit_independence`` (bit independence criterion): for every pair of output bits, the phi coefficient of
    their flip indicators over all N counted flips; N phi^2 is Pearson's statistic of the 2 x 2 table,
    asymptotically chi-square with 1 degree of freedom, and the sum over pairs is compared with chi-square with
    one degree per pair. The effect ``bit_independence_max`` is the largest |phi|; its ideal the expected
    maximum of |Z| / sqrt(N) over the pairs.

    In both, p_upper (worse than random) is the Bonferroni combination of the aggregate and worst-cell p-values;
    p_lower is the lower tail of the aggregate (flips more even than chance: informational).

    Parameters
    ----------
    result : AvalancheResult

    Returns
    -------
    list of FitTest
        Empty when no flip was counted (no key, or only empty keys).

    References
    ----------
    A. F. Webster, S. E. Tavares, "On the design of S-boxes", CRYPTO '85, LNCS 218 (1986) 523-534.
    K. Pearson, Phil. Mag. 50 (1900) 157-175; H. Cramér, Mathematical Methods of Statistics (1946), §30.
    """
    if result.flips == 0:
        return []
    null = _graph_null(result) if result.graph is not None else None
    return [_avalanche_test(result, null), _bit_independence_test(result, null)]


__all__ = [
    "DEFAULT_MAX_BYTES",
    "DEFAULT_SAMPLE_SIZE",
    "EXACT_BELOW_FLIPS",
    "AvalancheResult",
    "FlipGraph",
    "KeySample",
    "avalanche_matrix",
    "avalanche_tests",
    "expected_max_bias",
    "flip_batch",
]
