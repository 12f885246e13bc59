"""Shard schemes: which of N shards (partitions, nodes) a hash value goes to.

``mod``         h mod N
``jump``        jump consistent hashing (Lamping & Veach 2014): the last "jump" of a seeded pseudo-random walk
                below N; moving from N to N+1 shards moves exactly the keys that land on the new shard
``rendezvous``  highest random weight (Thaler & Ravishankar 1996): every shard scores every key with a mix of
                the hash value and the shard's salt; the highest score wins. With capacity weights w, the score
                is -w / ln(u) for the uniform u the mix gives (the weighted variant of Schindelhauer & Schomaker
                2005), so a shard's share is proportional to its weight
``ring``        a ring of V virtual nodes per shard (Karger et al. 1997; V·w for weight w): a key goes to the
                first point clockwise from its position; the shares are the arcs the ring gives each shard, which
                vary around 1/N with a coefficient of variation near 1/√V

Positions on the ring and rendezvous mixes use the hash value scaled to 64 bits (a 32-bit value shifted up), so
32- and 64-bit functions place keys on the same circle. The salts and ring points come from SplitMix64 of the shard
number and a fixed seed: the layout is a property of the scheme, the same for every hash function audited.

References
----------
J. Lamping, E. Veach, "A fast, minimal memory, consistent hash algorithm", arXiv:1406.2294 (2014).
D. G. Thaler, C. V. Ravishankar, "Using name-based mappings to increase hit rates", IEEE/ACM Trans. Networking 6
(1998) (first as a 1996 technical report).
C. Schindelhauer, G. Schomaker, "Weighted distributed hash tables", SPAA 2005.
D. Karger, E. Lehman, T. Leighton, R. Panigrahy, M. Levine, D. Lewin, "Consistent hashing and random trees", STOC
1997.
"""

from __future__ import annotations

import hashaudit._numba_setup  # noqa: F401

# isort: split

import math
from dataclasses import dataclass

import numpy as np
from numba import njit, uint64

from hashaudit.settings import SettingError

SHARD_SCHEMES = ("mod", "jump", "rendezvous", "ring")
DEFAULT_VNODES = 160
MAX_SHARDS = 1 << 16
_LAYOUT_SEED = 0x5A4D_0001


@njit(cache=True, nogil=True, inline="always")
def _mix(x):  # pragma: no cover - compiled
    """SplitMix64's finaliser (Steele, Lea & Flood 2014)."""
    z = x + uint64(0x9E3779B97F4A7C15)
    z = (z ^ (z >> uint64(30))) * uint64(0xBF58476D1CE4E5B9)
    z = (z ^ (z >> uint64(27))) * uint64(0x94D049BB133111EB)
    return z ^ (z >> uint64(31))


@njit(cache=True, nogil=True)
def _mod_kernel(values, shards, out):  # pragma: no cover - compiled
    n = uint64(shards)
    for i in range(values.shape[0]):
        out[i] = values[i] % n


@njit(cache=True, nogil=True)
def _jump_kernel(values, shards, out):  # pragma: no cover - compiled
    """Lamping & Veach's algorithm, as printed in their paper (64-bit LCG, 31-bit jumps)."""
    for i in range(values.shape[0]):
        key = values[i]
        b = np.int64(-1)
        j = np.int64(0)
        while j < shards:
            b = j
            key = key * uint64(2862933555777941757) + uint64(1)
            j = np.int64(float(b + 1) * (float(np.int64(1) << np.int64(31)) / float((key >> uint64(33)) + uint64(1))))
        out[i] = b


@njit(cache=True, nogil=True)
def _rendezvous_kernel(positions, salts, weights, out):  # pragma: no cover - compiled
    shards = salts.shape[0]
    weighted = weights.shape[0] == shards
    for i in range(positions.shape[0]):
        best = -np.inf
        owner = 0
        for s in range(shards):
            z = _mix(positions[i] ^ salts[s])
            if weighted:
                u = (float(z >> uint64(11)) + 0.5) * (1.0 / 9007199254740992.0)  # in (0, 1)
                score = -weights[s] / math.log(u)
            else:
                score = float(z >> uint64(1))
            if score > best:
                best = score
                owner = s
        out[i] = owner


@njit(cache=True, nogil=True)
def _ring_kernel(positions, points, owners, out):  # pragma: no cover - compiled
    last = points.shape[0]
    for i in range(positions.shape[0]):
        k = np.searchsorted(points, positions[i])
        out[i] = owners[0] if k == last else owners[k]


def _salts(shards: int) -> np.ndarray:
    base = np.uint64(_LAYOUT_SEED) << np.uint64(20)
    with np.errstate(over="ignore"):
        x = base + np.arange(shards, dtype=np.uint64) * np.uint64(0x9E3779B97F4A7C15)
        x = (x ^ (x >> np.uint64(30))) * np.uint64(0xBF58476D1CE4E5B9)
        x = (x ^ (x >> np.uint64(27))) * np.uint64(0x94D049BB133111EB)
    return x ^ (x >> np.uint64(31))


@dataclass(frozen=True)
class ShardLayout:
    """N shards under one scheme: what maps a hash value to a shard, and each shard's expected share.

    Parameters
    ----------
    scheme : str
        One of ``SHARD_SCHEMES``.
    shards : int
        N, at least 1.
    weights : tuple of float, optional
        Capacity weights (one per shard, positive): rendezvous and ring shares follow them; mod and jump refuse
        them.
    vnodes : int
        Virtual nodes per shard of weight 1 on the ring.
    """

    scheme: str
    shards: int
    weights: tuple[float, ...] = ()
    vnodes: int = DEFAULT_VNODES

    def __post_init__(self) -> None:
        if self.scheme not in SHARD_SCHEMES:
            raise SettingError("shard_schemes", f"takes one of {', '.join(SHARD_SCHEMES)}, not {self.scheme!r}")
        if not 1 <= self.shards <= 2 * MAX_SHARDS:  # the movement check also lays out N + 1 and 2N shards
            raise SettingError("shards", f"must be between 1 and {MAX_SHARDS:,}, not {self.shards:,}")
        if self.weights:
            if len(self.weights) != self.shards:
                raise SettingError("shard_weights", f"gives {len(self.weights)} weights for {self.shards} shards")
            if not all(math.isfinite(w) and w > 0 for w in self.weights):
                raise SettingError("shard_weights", "must all be positive numbers")
            if min(self.weights) < 1e-6 * max(self.weights):
                raise SettingError("shard_weights", ": the smallest weight must be at least a millionth of the largest")
            if self.scheme in ("mod", "jump"):
                raise SettingError("shard_weights", f"cannot weight the {self.scheme} scheme; use rendezvous or ring")
        if not 1 <= self.vnodes <= 1 << 16:
            raise SettingError("vnodes", f"must be between 1 and 65,536, not {self.vnodes}")

    def resized(self, shards: int) -> ShardLayout:
        """The same scheme with ``shards`` shards (new shards weigh the mean weight)."""
        weights = self.weights
        if weights:
            mean = sum(weights) / len(weights)
            weights = (weights + (mean,) * max(0, shards - len(weights)))[:shards]
        return ShardLayout(self.scheme, shards, weights, self.vnodes)

    def _ring(self) -> tuple[np.ndarray, np.ndarray]:
        counts = (
            [max(1, round(self.vnodes * w / (sum(self.weights) / self.shards))) for w in self.weights]
            if self.weights
            else [self.vnodes] * self.shards
        )
        owners = np.repeat(np.arange(self.shards, dtype=np.int64), counts)
        index = np.concatenate([np.arange(c, dtype=np.uint64) for c in counts])
        salts = _salts(self.shards)[owners]
        with np.errstate(over="ignore"):
            x = salts ^ (index * np.uint64(0xD1B54A32D192ED03))
            x = (x ^ (x >> np.uint64(30))) * np.uint64(0xBF58476D1CE4E5B9)
            x = (x ^ (x >> np.uint64(27))) * np.uint64(0x94D049BB133111EB)
        points = x ^ (x >> np.uint64(31))
        order = np.argsort(points, kind="stable")
        return points[order], owners[order]

    def assign(self, values: np.ndarray, width: int) -> np.ndarray:
        """Shard of every hash value (int64 in [0, N))."""
        values = np.ascontiguousarray(values[:, 0] if values.ndim == 2 else values, dtype=np.uint64)
        out = np.empty(len(values), dtype=np.int64)
        if self.scheme == "mod":
            _mod_kernel(values, self.shards, out)
        elif self.scheme == "jump":
            _jump_kernel(values, self.shards, out)
        else:
            positions = values << np.uint64(64 - min(width, 64)) if width < 64 else values
            if self.scheme == "rendezvous":
                weights = np.asarray(self.weights, dtype=np.float64)
                _rendezvous_kernel(positions, _salts(self.shards), weights, out)
            else:
                points, owners = self._ring()
                _ring_kernel(positions, points, owners, out)
        return out

    def shares(self, width: int = 64) -> np.ndarray:
        """Each shard's expected share of uniformly random hash values (the ring's arcs, or the weights)."""
        if self.scheme == "ring":
            points, owners = self._ring()
            arcs = np.diff(np.concatenate(([0], points.astype(np.float64), [2.0**64])))
            shares = np.zeros(self.shards)
            np.add.at(shares, owners, arcs[:-1])  # a point owns the arc that ends at it
            shares[owners[0]] += arcs[-1]  # the arc after the last point wraps round to the first
            return shares / shares.sum()
        if self.weights:
            w = np.asarray(self.weights, dtype=np.float64)
            return w / w.sum()
        return np.full(self.shards, 1.0 / self.shards)

    @property
    def label(self) -> str:
        extra = f", {self.vnodes} vnodes" if self.scheme == "ring" else ""
        return f"{self.scheme} {self.shards}{extra}"
