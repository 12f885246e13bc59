"""Fixed-seed fingerprints and sampling priorities: how the statistics tell keys apart and order them.

Several statistics need a hash of a key that is not the audited one: the distinct-key store identifies keys by a
128-bit fingerprint, the heavy-key summary by a 64-bit one, the avalanche check and the neighbour families drop
repeated keys with one (every match confirmed bytewise), and the key sample orders keys by a keyed PRF. Each use
has its own fixed seed, used by no audit, so the values never coincide with the audited hash's own output.

Statistics sit below the hash functions and take these functions as parameters (see ``hashaudit.stats._hooks``).
Importing this module — which ``hashaudit/hashes/__init__.py`` does, so any hash module will — also makes them the
defaults of those parameters. The kernels load on first call: importing the hash package stays light.

Changing a seed changes what audits report (which keys are sampled, the order of tied heavy keys): the values are
part of the reports' reproducibility.

References
----------
A. Appleby, MurmurHash3 (x64_128), 2011. Y. Collet, XXH3, 2019.
J.-P. Aumasson, D. J. Bernstein, "SipHash: a fast short-input PRF", INDOCRYPT 2012.
"""

from __future__ import annotations

import numpy as np

from hashaudit.keys.batch import KeyBatch
from hashaudit.stats import _hooks

DISTINCT_SEED = 0x5EED_D157
"""MurmurHash3 x64_128 seed of the distinct-key fingerprints (also the engines' routing of keys by fingerprint)."""
HEAVY_SEED = 0x4EA7_0001
"""XXH3 seed of the heavy-key fingerprints."""
MEMBER_SEED = 0xF11F_5EED_0A7A_0001
"""XXH3 seed of the fingerprints telling whether a flipped key is itself a sample key."""
DEDUP_SEED = 0x6E65_6967_6862_6F72  # "neighbor"
"""XXH3 seed of the fingerprints that drop repeated neighbour candidates."""
PRIORITY_DOMAIN = 0x6B65_7973_616D_706C  # "keysampl"
"""Mixed into the SipHash key of the sample priorities, so that a sample seed equal to the seed of the audited hash
does not select keys by the audited hash's own output."""
_MASK128 = (1 << 128) - 1


def key_fingerprints_128(batch: KeyBatch) -> np.ndarray:
    """The 128-bit fingerprint of every key: MurmurHash3 x64_128 under ``DISTINCT_SEED``.

    Parameters
    ----------
    batch : KeyBatch

    Returns
    -------
    numpy.ndarray of uint64, shape (n, 2)
        Low word, high word.
    """
    from hashaudit.hashes.murmur import murmur3_128

    return murmur3_128(batch, DISTINCT_SEED)


def heavy_fingerprints(batch: KeyBatch) -> np.ndarray:
    """The 64-bit fingerprint of every key in the heavy-key summary: XXH3 under ``HEAVY_SEED``.

    Parameters
    ----------
    batch : KeyBatch

    Returns
    -------
    numpy.ndarray of uint64, shape (n,)
    """
    from hashaudit.hashes.xxh import xxh3_64

    return xxh3_64(batch, HEAVY_SEED)


def member_fingerprints(batch: KeyBatch) -> np.ndarray:
    """The 64-bit fingerprint that finds flipped keys among the sample keys: XXH3 under ``MEMBER_SEED``.

    Parameters
    ----------
    batch : KeyBatch

    Returns
    -------
    numpy.ndarray of uint64, shape (n,)
    """
    from hashaudit.hashes.xxh import xxh3_64

    return xxh3_64(batch, MEMBER_SEED)


def dedup_fingerprints(batch: KeyBatch) -> np.ndarray:
    """The 64-bit fingerprint that finds repeated neighbour candidates: XXH3 under ``DEDUP_SEED``.

    Parameters
    ----------
    batch : KeyBatch

    Returns
    -------
    numpy.ndarray of uint64, shape (n,)
    """
    from hashaudit.hashes.xxh import xxh3_64

    return xxh3_64(batch, DEDUP_SEED)


def sample_priorities(batch: KeyBatch, seed: int) -> np.ndarray:
    """The priority of every key in a bottom-k sample of seed ``seed``: SipHash-2-4 of its bytes.

    Parameters
    ----------
    batch : KeyBatch
    seed : int
        The sample seed (non-negative); the 128-bit SipHash key is ``seed XOR (PRIORITY_DOMAIN << 64)``, taken
        modulo 2^128.

    Returns
    -------
    numpy.ndarray of uint64, shape (n,)
    """
    from hashaudit.hashes.siphash import siphash24

    return siphash24(batch, (seed ^ (PRIORITY_DOMAIN << 64)) & _MASK128)


_hooks.provide(_hooks.DISTINCT, key_fingerprints_128)
_hooks.provide(_hooks.HEAVY, heavy_fingerprints)
_hooks.provide(_hooks.MEMBER, member_fingerprints)
_hooks.provide(_hooks.DEDUP, dedup_fingerprints)
_hooks.provide(_hooks.PRIORITY, sample_priorities)
