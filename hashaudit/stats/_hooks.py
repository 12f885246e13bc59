"""The key functions statistics take as parameters, and where their defaults come from.

Statistics sit below the hash functions: no module of ``hashaudit.stats`` imports ``hashaudit.hashes``. A statistic
that hashes keys receives the function instead — the audited hash as ``hash_batch`` (with its ``width``), and the
fixed-seed fingerprints and sampling priorities that tell keys apart or order them as a parameter of the accumulator
or function that needs them (``DistinctKeys(fingerprint=...)``, ``KeySample(priority=...)``, ...).

So that existing code can leave those parameters out, this module keeps a table of defaults that the hash layer
fills: ``hashaudit/hashes/__init__.py`` imports ``hashaudit.hashes.fingerprint``, which calls :func:`provide` for
each of its functions. Importing any hash module (the registry included) therefore sets the defaults, without an
import from statistics to hashes and without an import cycle; a parameter left at None is resolved here when the
accumulator is made (the function itself is kept, so a pickled accumulator names it and unpickling imports it).
"""

from __future__ import annotations

from collections.abc import Callable
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    import numpy as np

    from hashaudit.keys.batch import KeyBatch

HashBatch = Callable[["KeyBatch", int], "np.ndarray"]
"""A batch hash function: ``(batch, seed) -> uint64[n]``, or ``uint64[n, 2]`` (low word, high word) for 128 bits."""
Fingerprint = Callable[["KeyBatch"], "np.ndarray"]
"""A fixed-seed fingerprint of every key: ``batch -> uint64[n]`` (or ``uint64[n, 2]`` for 128-bit fingerprints)."""
Priority = Callable[["KeyBatch", int], "np.ndarray"]
"""Sampling priorities of every key under a sample seed: ``(batch, seed) -> uint64[n]``."""

DISTINCT = "distinct"  # 128-bit fingerprints of DistinctKeys
HEAVY = "heavy"  # 64-bit fingerprints of HeavyKeys
MEMBER = "member"  # 64-bit fingerprints telling whether a flipped key is a sample key (avalanche)
DEDUP = "dedup"  # 64-bit fingerprints dropping repeated neighbour candidates
PRIORITY = "priority"  # keyed priorities of the bottom-k key sample
SLOTS = (DISTINCT, HEAVY, MEMBER, DEDUP, PRIORITY)

_PROVIDED: dict[str, Callable[..., Any]] = {}


def provide(slot: str, function: Callable[..., Any]) -> None:
    """Make ``function`` the default of ``slot`` (one of ``SLOTS``); called by ``hashaudit.hashes.fingerprint``."""
    if slot not in SLOTS:
        raise ValueError(f"unknown key-function slot {slot!r}; expected one of {', '.join(SLOTS)}")
    _PROVIDED[slot] = function


def resolve(slot: str, function: Callable[..., Any] | None) -> Callable[..., Any]:
    """``function`` when given, else the default provided for ``slot``.

    Raises
    ------
    LookupError
        When no default was provided: no hash module has been imported in this process.
    """
    if function is not None:
        return function
    try:
        return _PROVIDED[slot]
    except KeyError:
        raise LookupError(
            f"no default {slot!r} key function: import hashaudit.hashes (any hash module provides the defaults) "
            "or pass the function explicitly"
        ) from None
