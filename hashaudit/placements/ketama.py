"""The memcached clients' ketama ring: MD5 points on a 32-bit circle, a key to the first point at or after its hash.

A key's hash is the first four bytes of its MD5 digest read little-endian (digest bytes 3, 2, 1, 0 from the most
significant down). Each server puts points on the circle: for ``i = 0, 1, ...`` the label ``"<name>-<i>"`` is
hashed with MD5 and its digest gives four points, the four little-endian 32-bit words. A server of weight ``w``
among ``N`` servers of total weight ``W`` hashes ``floor(40 · N · w / W)`` labels: 40 labels and 160 points when
the weights are equal. A key goes to the server of the first point ``>=`` its hash, wrapping round to the first
point past the largest. Two servers can draw the same point (rarely: 32 bits); the later server in the list then
owns it, as in the Python ring the tests compare with.

The server name is part of every label, so the ring depends on the names: libketama uses the address string of its
configuration (``"10.0.0.1:11211"``), libmemcached the host name alone on the default port 11211 and
``"host:port"`` otherwise. The rule's servers are named ``server1`` .. ``serverN``; :func:`continuum` takes any.

Known differences between clients, none of which the rule follows blindly: uhashring (the reference of the tests)
picks the first point strictly *after* the key's hash, so a key whose hash equals a point goes one point further
than in libketama and libmemcached (a 32-bit coincidence; the tests show one); libmemcached counts the labels of a
weighted server in single-precision floating point, which can drop a label where ``40 · N · w / W`` is a whole
number; this module counts in integers.

References
----------
D. Karger et al., "Consistent hashing and random trees", STOC 1997.
R. Jones, libketama (2007): ``ketama_get_server`` (the first point ``>=`` the hash) and ``ketama_create_continuum``
(``"%s-%d"`` labels, 40 per server of average weight, four points per MD5 digest).
libmemcached, ``update_continuum`` (``MEMCACHED_BEHAVIOR_KETAMA_WEIGHTED``) and ``dispatch_host``.
R. Rivest, "The MD5 Message-Digest Algorithm", RFC 1321 (1992).
"""

from __future__ import annotations

import operator
from collections.abc import Sequence

import numpy as np

from hashaudit.keys.batch import KeyBatch

LABELS_PER_SERVER = 40  # MD5 digests per server of average weight
POINTS_PER_LABEL = 4  # 32-bit words of one digest


def server_names(servers: int) -> tuple[str, ...]:
    """``server1`` .. ``serverN``: the names the rule gives its servers."""
    return tuple(f"server{k}" for k in range(1, operator.index(servers) + 1))


def labels_per_server(weights: Sequence[int]) -> list[int]:
    """``floor(40 · N · w / W)`` labels for each server of weight ``w`` among ``N`` of total weight ``W``.

    Parameters
    ----------
    weights : sequence of int
        Positive whole-number weights, one per server.

    Returns
    -------
    list of int

    Raises
    ------
    ValueError
        When a weight is not a positive whole number.
    """
    weights = [operator.index(w) for w in weights]
    if not weights or min(weights) < 1:
        raise ValueError(f"weights must be positive whole numbers (got {weights})")
    total, servers = sum(weights), len(weights)
    return [LABELS_PER_SERVER * servers * w // total for w in weights]


def key_hash(batch: KeyBatch) -> np.ndarray:
    """The ketama hash of every key: the first four bytes of its MD5 digest, little-endian.

    Parameters
    ----------
    batch : KeyBatch
        The keys.

    Returns
    -------
    numpy.ndarray of uint32, shape (n,)

    References
    ----------
    R. Jones, libketama: ``ketama_hashi``; libmemcached's MD5 hash of keys (``hashkit_md5``).
    """
    from hashaudit.placements._md5 import md5_words  # here, so that parsing a rule loads no numba

    return np.ascontiguousarray(md5_words(batch)[:, 0])


def continuum(names: Sequence[str], weights: Sequence[int] | None = None) -> tuple[np.ndarray, np.ndarray]:
    """The ring's points, ascending, and the server owning each.

    Parameters
    ----------
    names : sequence of str
        The servers' names as they appear in the labels (UTF-8), in the order of the server list.
    weights : sequence of int, optional
        Positive whole-number weights, one per server; None: all equal (160 points each).

    Returns
    -------
    points : numpy.ndarray of uint32
        Distinct points, ascending (a point drawn twice appears once, owned by the later server).
    owners : numpy.ndarray of int64
        The index in ``names`` of each point's server.

    Raises
    ------
    ValueError
        When ``weights`` is not one positive whole number per server.

    References
    ----------
    R. Jones, libketama: ``ketama_create_continuum``.
    """
    names = list(names)
    weights = [1] * len(names) if weights is None else list(weights)
    if len(weights) != len(names):
        raise ValueError(f"{len(weights)} weights for {len(names)} servers")
    from hashaudit.placements._md5 import md5_words

    counts = labels_per_server(weights)
    labels = [f"{name}-{i}".encode() for name, count in zip(names, counts, strict=True) for i in range(count)]
    points = md5_words(KeyBatch.from_keys(labels)).reshape(-1)  # the label's four words, in order
    owners = np.repeat(np.arange(len(names), dtype=np.int64), np.asarray(counts) * POINTS_PER_LABEL)
    order = np.argsort(points, kind="stable")  # among equal points, the later server comes last
    points, owners = points[order], owners[order]
    last = np.append(points[1:] != points[:-1], True)  # keep the last of equal points
    return points[last], owners[last]


def owning_server(hashes: np.ndarray, points: np.ndarray, owners: np.ndarray) -> np.ndarray:
    """The server of every key hash: the owner of the first point ``>=`` it, wrapping round to the first point.

    Parameters
    ----------
    hashes : numpy.ndarray of uint32 (or uint64 below 2^32)
        Keys' ketama hashes.
    points, owners : numpy.ndarray
        The ring from :func:`continuum`.

    Returns
    -------
    numpy.ndarray of int64, shape (n,)

    References
    ----------
    R. Jones, libketama: ``ketama_get_server``; libmemcached: ``dispatch_host`` (a lower-bound search).
    """
    at = np.searchsorted(points.astype(np.uint64), np.asarray(hashes, dtype=np.uint64), side="left")
    at[at == len(points)] = 0
    return np.asarray(owners, dtype=np.int64)[at]
