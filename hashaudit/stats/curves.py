"""The no-collision curve: the observed probability that k keys share no bucket, as k grows, against Q(m, k)."""

from __future__ import annotations

import math
from collections.abc import Callable

import numpy as np

from hashaudit.keys.batch import KeyBatch

CURVE_POINTS = 24
CURVE_DRAWS = 200


def no_collision_curve(
    hash_batch: Callable[[KeyBatch, int], np.ndarray],
    width: int,
    keys: KeyBatch,
    tables: list[tuple[str, int]],
    seed: int,
    hash_seed: int = 0,
) -> dict:
    """The observed probability that k keys share no bucket, as k grows, against Q(m, k).

    For the smallest table of the audit (or 2^16 buckets without one), ``CURVE_DRAWS`` random subsets of the key
    sample (seeded) of each size k on a grid up to three times the birthday threshold √m: the share of subsets
    with no two keys in one bucket. Simple uniform hashing predicts Q(m, k) (the birthday problem).

    Parameters
    ----------
    hash_batch : callable
        ``(KeyBatch, seed) -> uint64 values`` of the hash function.
    width : int
        Bits of its values.
    keys : KeyBatch
        The key sample.
    tables : list of (scheme, buckets)
        The audit's tables; the smallest is drawn.
    seed : int
        Seed of the subsets.
    hash_seed : int
        Seed given to the hash function.

    References
    ----------
    W. Feller, *An Introduction to Probability Theory and Its Applications*, vol. 1, 3rd ed. (1968), II.3.
    """
    from hashaudit.stats.theory import p_no_collision
    from hashaudit.tables.schemes import bucket_index

    scheme, m = min(tables, key=lambda p: p[1], default=("mask", 1 << 16))
    values = hash_batch(keys, hash_seed)
    homes = bucket_index(values, scheme, m, width)
    top = int(min(len(homes), max(8.0, 3 * math.sqrt(m))))
    sizes = sorted({max(2, int(round(x))) for x in np.linspace(2, top, CURVE_POINTS)})
    rng = np.random.default_rng([seed, m, 0xC0])
    observed = []
    for k in sizes:
        clear = 0
        for _ in range(CURVE_DRAWS):
            pick = homes[rng.choice(len(homes), size=k, replace=False)]
            clear += len(np.unique(pick)) == k
        observed.append(clear / CURVE_DRAWS)
    return {
        "scheme": scheme,
        "buckets": m,
        "keys": sizes,
        "observed": observed,
        "theory": [p_no_collision(m, k) for k in sizes],
        "draws": CURVE_DRAWS,
    }
