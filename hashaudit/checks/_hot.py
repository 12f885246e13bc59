"""Heavy keys on a layout's units, shared by the ``shards`` and ``placement`` groups.

The heaviest keys of the input (``hashaudit.stats.heavy.HeavyKeys``) are placed on the units of each layout by one
subject — a hash function with a shard scheme, or a system's placement rule — and turned into the ``hot_keys`` and
``load_attribution`` findings of :func:`hashaudit.verdict.attribution.load_findings`. The heavy keys on the hottest
unit get handles a user can act on: the key's 64-bit fingerprint (the one ``--show-keys`` and the heavy-key summary
use), its value under the subject's hash, its load and its unit; never the key itself (``--show-keys`` adds it).
"""

from __future__ import annotations

from typing import Any

from hashaudit.checks._base import Conclusion

HEAVY_SHOWN = 20  # the heaviest keys placed on the units for the attribution
HEAVY_HANDLES = 5  # of them, the ones on the hottest unit named by fingerprint and hash value
_SHARED = "heaviest keys"  # the key of the top keys and their fingerprints in ``Conclusion.shared``


def heaviest(ctx: Conclusion) -> tuple[list[tuple[bytes, float]], Any]:
    """The ``HEAVY_SHOWN`` heaviest keys with their loads, and their fingerprints (None without keys): computed once
    per audit, whichever group asks first."""

    def build() -> tuple[list[tuple[bytes, float]], Any]:
        from hashaudit.hashes.fingerprint import heavy_fingerprints
        from hashaudit.keys.batch import KeyBatch

        top = ctx.heavy.top(HEAVY_SHOWN)
        return top, heavy_fingerprints(KeyBatch.from_keys([k for k, _ in top])) if top else None

    return ctx.once(_SHARED, build)


def attribution_findings(ctx: Conclusion, spec: Any, layouts: list, unit: str = "shard") -> list:
    """The ``hot_keys`` and ``load_attribution`` findings of ``spec`` (a hash function or a placement) for each of
    its ``layouts`` (``ShardCounts``), the heavy keys on the hottest unit in their details (``heavy_keys``); none
    when the audit keeps no heavy-key summary. ``unit`` is what the sentences call a shard (a placement's
    ``partition``, ``node``, ``slot``)."""
    import numpy as np

    from hashaudit.keys.batch import KeyBatch
    from hashaudit.verdict.attribution import load_findings

    if ctx.heavy is None or not layouts:
        return []
    top, handles = heaviest(ctx)
    values = None
    if top:
        batch = KeyBatch.from_keys([k for k, _ in top])
        values = spec.hash_batch(batch, ctx.plan.seed if spec.seeded else 0)
    placed = []
    for counts in layouts:
        where = counts.layout.assign(values, spec.width) if values is not None else np.zeros(0, np.int64)
        placed.append((counts, [(key, load, int(s)) for (key, load), s in zip(top, where.tolist(), strict=True)]))
    found = load_findings(spec.name, placed, ctx.heavy, ctx.plan.thresholds.shard_imbalance, unit)
    _add_handles(found, placed, handles, values, spec.width)
    return found


def _add_handles(findings: list, placed: list, handles: Any, values: Any, width: int) -> None:
    """Give each finding the heavy keys on its hottest unit as handles (fingerprint, hash value, load, unit)."""
    from hashaudit.stats.shards import HEAVY_SHARE

    for finding in findings:
        d = finding.details
        for counts, keys in placed:
            if (counts.layout.shards, counts.layout.scheme) != (d.get("shards"), d.get("shard_scheme")):
                continue
            floor = HEAVY_SHARE * float(d.get("total_load", 0)) * float(counts.layout.shares(counts.width).min())
            d["heavy_keys"] = [
                {
                    "fingerprint": f"{int(handles[i]):016x}",
                    "hash": f"{int(values[i] if values.ndim == 1 else values[i, 0]):0{min(width, 64) // 4}x}",
                    "load": load,
                    "shard": shard,
                }
                for i, (_, load, shard) in enumerate(keys)
                if shard == d.get("hottest_shard") and load >= floor
            ][:HEAVY_HANDLES]
            break
