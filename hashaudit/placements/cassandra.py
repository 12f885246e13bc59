"""The wide-column store's ``Murmur3Partitioner``: partition tokens and the token ring with virtual nodes.

A partition key's token is the first 64-bit word ``h1`` of MurmurHash3 x64_128 (seed 0) of the key's bytes, as a
signed Java ``long``. Cassandra's Java port differs from the reference ``MurmurHash3.cpp`` in one place: the
tail (the 1 to 15 bytes after the last 16-byte block) is read as *signed* Java bytes, ``(long) key.get(i) << 8t``,
so a tail byte of ``0x80`` or more is sign-extended and its ones are XORed into every higher byte of ``k1`` or
``k2``. Keys whose tail bytes are all below ``0x80`` hash as in the reference; others do not. The partitioner then
*normalizes* the token: ``Long.MIN_VALUE`` is reserved as the ring's minimum token and becomes
``Long.MAX_VALUE``; and ``getToken`` of an empty key returns that minimum token without hashing (the server
refuses empty partition keys in writes; the Python driver's ``Murmur3Token.hash_fn`` gives token 0 for one).

Each node owns ``num_tokens`` tokens on the ring of all 2^64 longs; the range ``(previous token, token]`` belongs
to the node owning ``token``, and the range above the largest token wraps round to the smallest: a key goes to the
node of the first ring token ``>=`` its own token. Without the token allocator, a node draws its tokens at random
(``getRandomToken``: a uniform ``long``, normalized) and draws again any token the ring already holds; here the
draws come from a seeded generator, one stream per node, so adding a node keeps every earlier node's tokens.

References
----------
A. Lakshman, P. Malik, "Cassandra: a decentralized structured storage system", ACM SIGOPS Operating Systems Review
44(2), 2010 (the token ring).
D. Karger et al., "Consistent hashing and random trees", STOC 1997 (points on a circle, virtual nodes).
Apache Cassandra, ``org.apache.cassandra.dht.Murmur3Partitioner`` (``getToken``, ``normalize``,
``getRandomToken``), ``org.apache.cassandra.utils.MurmurHash.hash3_x64_128`` (the signed tail) and
``org.apache.cassandra.dht.BootStrapper.getRandomTokens`` (drawing again a token already taken).
A. Appleby, MurmurHash3 (``MurmurHash3.cpp``, 2011): ``MurmurHash3_x64_128``.
"""

from __future__ import annotations

import hashaudit._numba_setup  # noqa: F401  (sets the numba cache folder before numba loads)

# isort: split

import operator

import numpy as np
from numba import njit, uint64

from hashaudit.hashes.murmur import _fmix64, _load64, _rotl64  # shared with the reference MurmurHash3
from hashaudit.keys.batch import KeyBatch

MIN_TOKEN = -(1 << 63)  # Long.MIN_VALUE: the ring's minimum token, never a node's or a key's hash
MAX_TOKEN = (1 << 63) - 1  # Long.MAX_VALUE
_C1 = 0x87C37B91114253D5
_C2 = 0x4CF5AD432745937F
_SIGN_EXTENSION = 0xFFFFFFFFFFFFFF00  # the ones (long) b carries above a negative Java byte
_TOKEN_STREAM = 0xCA55  # separates the token draws from other seeded streams


@njit(cache=True, nogil=True)
def _signed_byte(b):  # pragma: no cover - compiled
    # (long) of a Java byte, as 64 bits
    x = uint64(b)
    if x >= uint64(0x80):
        x |= uint64(_SIGN_EXTENSION)
    return x


@njit(cache=True, nogil=True)
def _h1_kernel(data, offsets, out):  # pragma: no cover - compiled
    c1 = uint64(_C1)
    c2 = uint64(_C2)
    for i in range(len(offsets) - 1):
        start = offsets[i]
        length = offsets[i + 1] - start
        block_end = start + (length & ~15)
        h1 = uint64(0)
        h2 = uint64(0)
        p = start
        while p < block_end:
            k1 = _load64(data, p)
            k2 = _load64(data, p + 8)
            k1 = _rotl64(k1 * c1, 31) * c2
            h1 ^= k1
            h1 = _rotl64(h1, 27) + h2
            h1 = h1 * uint64(5) + uint64(0x52DCE729)
            k2 = _rotl64(k2 * c2, 33) * c1
            h2 ^= k2
            h2 = _rotl64(h2, 31) + h1
            h2 = h2 * uint64(5) + uint64(0x38495AB5)
            p += 16
        rem = length & 15
        if rem:
            # Cassandra's tail: every byte sign-extended before the shift, XORed in (the order does not matter)
            k1 = uint64(0)
            k2 = uint64(0)
            for t in range(rem):
                if t < 8:
                    k1 ^= _signed_byte(data[block_end + t]) << uint64(8 * t)
                else:
                    k2 ^= _signed_byte(data[block_end + t]) << uint64(8 * (t - 8))
            if rem > 8:
                h2 ^= _rotl64(k2 * c2, 33) * c1
            h1 ^= _rotl64(k1 * c1, 31) * c2
        h1 ^= uint64(length)
        h2 ^= uint64(length)
        h1 += h2
        h2 += h1
        h1 = _fmix64(h1)
        h2 = _fmix64(h2)
        out[i] = h1 + h2


def murmur3_h1(batch: KeyBatch) -> np.ndarray:
    """The first 64-bit word of Cassandra's MurmurHash3 x64_128 (seed 0, signed tail bytes) of every key.

    Parameters
    ----------
    batch : KeyBatch
        The partition keys' serialized bytes.

    Returns
    -------
    numpy.ndarray of int64, shape (n,)
        ``h1`` as a Java ``long``, before normalization (what ``cassandra.murmur3.murmur3`` returns).

    References
    ----------
    Apache Cassandra, ``org.apache.cassandra.utils.MurmurHash.hash3_x64_128``.
    A. Appleby, MurmurHash3 (``MurmurHash3.cpp``): ``MurmurHash3_x64_128``.
    """
    out = np.empty(len(batch), dtype=np.uint64)
    _h1_kernel(batch.data, batch.offsets, out)
    return out.view(np.int64)


def normalize(h1: np.ndarray) -> np.ndarray:
    """``Long.MIN_VALUE`` becomes ``Long.MAX_VALUE``; every other value stays (``Murmur3Partitioner.normalize``)."""
    h1 = np.asarray(h1, dtype=np.int64)
    return np.where(h1 == np.int64(MIN_TOKEN), np.int64(MAX_TOKEN), h1)


def murmur3_token(batch: KeyBatch) -> np.ndarray:
    """The token of every key as the Python driver computes it for routing: ``normalize(h1)``.

    Parameters
    ----------
    batch : KeyBatch
        The partition keys' serialized bytes.

    Returns
    -------
    numpy.ndarray of int64, shape (n,)
        ``cassandra.metadata.Murmur3Token.hash_fn(key)`` (an empty key gives 0, the hash of no bytes).

    References
    ----------
    Apache Cassandra, ``org.apache.cassandra.dht.Murmur3Partitioner.normalize``.
    """
    return normalize(murmur3_h1(batch))


def partition_token(batch: KeyBatch) -> np.ndarray:
    """The token of every key as the server's ``Murmur3Partitioner.getToken`` computes it.

    Parameters
    ----------
    batch : KeyBatch
        The partition keys' serialized bytes.

    Returns
    -------
    numpy.ndarray of int64, shape (n,)
        ``normalize(h1)``, and the minimum token ``Long.MIN_VALUE`` for an empty key (the only difference from
        :func:`murmur3_token`).

    References
    ----------
    Apache Cassandra, ``org.apache.cassandra.dht.Murmur3Partitioner.getToken`` (``key.remaining() == 0``
    returns ``MINIMUM``).
    """
    tokens = murmur3_token(batch)
    tokens[batch.lengths() == 0] = MIN_TOKEN
    return tokens


def random_tokens(nodes: int, num_tokens: int, seed: int = 0) -> tuple[np.ndarray, np.ndarray]:
    """The ring of ``nodes`` nodes of ``num_tokens`` random tokens each, sorted.

    Node ``k`` draws from its own seeded stream (``numpy.random.default_rng([seed, k, ...])``) uniform 64-bit
    values, normalized as ``getRandomToken`` does; a token the ring already holds is drawn again, as bootstrap does.
    So the tokens of nodes ``0..k`` do not depend on how many nodes follow.

    Parameters
    ----------
    nodes : int
        Number of nodes, at least 1.
    num_tokens : int
        Tokens per node (``num_tokens`` in ``cassandra.yaml``), at least 1.
    seed : int, default 0
        Seed of the draws, non-negative.

    Returns
    -------
    tokens : numpy.ndarray of int64, shape (nodes * num_tokens,)
        The ring's tokens, ascending, all distinct.
    owners : numpy.ndarray of int64
        The node owning each token.

    Raises
    ------
    ValueError
        When ``nodes`` or ``num_tokens`` is below 1, or ``seed`` is negative.

    References
    ----------
    Apache Cassandra, ``Murmur3Partitioner.getRandomToken`` and ``BootStrapper.getRandomTokens``.
    """
    nodes, num_tokens, seed = operator.index(nodes), operator.index(num_tokens), operator.index(seed)
    if nodes < 1 or num_tokens < 1 or seed < 0:
        raise ValueError(
            f"nodes and num_tokens must be at least 1 and seed non-negative (got {nodes}, {num_tokens}, {seed})"
        )
    taken: set[int] = set()
    tokens = np.empty(nodes * num_tokens, dtype=np.int64)
    for node in range(nodes):
        rng = np.random.default_rng([seed, node, _TOKEN_STREAM])
        mine: list[int] = []
        while len(mine) < num_tokens:  # per ring point, not per key: a Python loop is fine here
            drawn = normalize(rng.integers(0, 1 << 64, num_tokens - len(mine), dtype=np.uint64).view(np.int64))
            for token in drawn.tolist():
                if token not in taken:
                    taken.add(token)
                    mine.append(token)
        tokens[node * num_tokens : (node + 1) * num_tokens] = mine
    owners = np.repeat(np.arange(nodes, dtype=np.int64), num_tokens)
    order = np.argsort(tokens, kind="stable")
    return tokens[order], owners[order]


def owning_node(tokens: np.ndarray, ring_tokens: np.ndarray, ring_owners: np.ndarray) -> np.ndarray:
    """The node owning every token: the owner of the first ring token ``>=`` it, wrapping round to the smallest.

    Parameters
    ----------
    tokens : numpy.ndarray of int64
        Keys' tokens.
    ring_tokens : numpy.ndarray of int64
        The ring's tokens, ascending (as :func:`random_tokens` gives them).
    ring_owners : numpy.ndarray of int64
        The node of each ring token.

    Returns
    -------
    numpy.ndarray of int64, shape (n,)

    References
    ----------
    Apache Cassandra, ``org.apache.cassandra.locator.TokenMetadata.firstToken`` (the first token not below the
    key's, or the first token of the ring).
    """
    at = np.searchsorted(ring_tokens, np.asarray(tokens, dtype=np.int64), side="left")
    at[at == len(ring_tokens)] = 0
    return np.asarray(ring_owners, dtype=np.int64)[at]
