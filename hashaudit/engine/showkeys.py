"""``--show-keys``: find the keys behind the largest full-width collision groups and the heavy keys of a hot shard
with a second pass over the input.

Reports never show keys unless the user asks (keys in production dumps are often personal data). When asked, the
audit reads its sources once more, hashes every key with the functions that had collisions, and keeps up to
``KEYS_PER_GROUP`` distinct keys per reported group, as text (undecodable bytes escaped).
"""

from __future__ import annotations

import os
from collections.abc import Sequence

import numpy as np

from hashaudit.checks import CHECKS
from hashaudit.hashes.registry import REGISTRY, HashRegistry
from hashaudit.keys import open_keys
from hashaudit.keys.options import SourceOptions
from hashaudit.verdict.result import AuditResult

KEYS_PER_GROUP = 5


def _as_int(values: np.ndarray, width: int) -> np.ndarray:
    """Hash values as Python ints (only for the few candidate rows)."""
    if values.ndim == 2:
        return np.array([int(lo) | (int(hi) << 64) for lo, hi in values], dtype=object)
    return values.astype(object)


def attach_colliding_keys(
    result: AuditResult,
    sources: Sequence[str | os.PathLike],
    options: SourceOptions | Sequence[SourceOptions],
    seed: int,
    registry: HashRegistry = REGISTRY,
) -> bool:
    """Add ``sample_keys`` to each reported collision group of ``result`` (in place); False when the input cannot
    be read twice (standard input or another non-regular file)."""
    wanted: dict[str, tuple[dict[int, dict], int]] = {}
    heavy: dict[int, list[dict]] = {}  # heavy keys of hot shards, by fingerprint
    for audit in result.hashes:
        for finding in audit.findings:
            for entry in finding.details.get("heavy_keys") or []:
                heavy.setdefault(int(entry["fingerprint"], 16), []).append(entry)
            if not CHECKS[finding.check].shows_keys:
                continue
            groups = finding.details.get("largest_groups") or []
            if groups:
                wanted[audit.name] = ({int(g["hash"], 16): g for g in groups}, audit.width)
    if not wanted and not heavy:
        return True
    if any(str(s) == "-" or not os.path.isfile(s) for s in sources):
        for targets, _ in wanted.values():
            for group in targets.values():
                group["sample_keys"] = None
        for entries in heavy.values():
            for entry in entries:
                entry["key"] = None
        return False
    if heavy:
        _find_heavy_keys(heavy, sources, options)
    if not wanted:
        return True
    found: dict[str, dict[int, list[bytes]]] = {name: {v: [] for v in targets} for name, (targets, _) in wanted.items()}
    per_source = [options] * len(sources) if isinstance(options, SourceOptions) else list(options)
    for source, source_options in zip(sources, per_source, strict=True):
        for batch in open_keys(source, source_options):
            for name, (targets, width) in wanted.items():
                spec = registry.get(name)
                values = spec.hash_batch(batch, seed if spec.seeded else 0)
                low = values[:, 0] if values.ndim == 2 else values
                low_targets = np.array([v & 0xFFFFFFFFFFFFFFFF for v in targets], dtype=np.uint64)
                rows = np.flatnonzero(np.isin(low, low_targets))
                if not len(rows):
                    continue
                full = _as_int(values[rows], width)
                for row, value in zip(rows.tolist(), full.tolist(), strict=True):
                    bucket = found[name].get(value)
                    if bucket is not None and len(bucket) < KEYS_PER_GROUP:
                        key = batch.key(row)
                        if key not in bucket:
                            bucket.append(key)
    for name, (targets, _) in wanted.items():
        for value, group in targets.items():
            group["sample_keys"] = [k.decode("utf-8", "backslashreplace") for k in found[name][value]]
    return True


def _find_heavy_keys(
    heavy: dict[int, list[dict]], sources: Sequence[str | os.PathLike], options: SourceOptions | Sequence[SourceOptions]
) -> None:
    """Add ``key`` (as text, undecodable bytes escaped) to every heavy-key entry, found by its fingerprint."""
    from hashaudit.hashes.fingerprint import heavy_fingerprints

    targets = np.array(sorted(heavy), dtype=np.uint64)
    left = set(heavy)
    per_source = [options] * len(sources) if isinstance(options, SourceOptions) else list(options)
    for source, source_options in zip(sources, per_source, strict=True):
        for batch in open_keys(source, source_options):
            prints = heavy_fingerprints(batch)
            for row in np.flatnonzero(np.isin(prints, targets)).tolist():
                fingerprint = int(prints[row])
                if fingerprint in left:
                    for entry in heavy[fingerprint]:
                        entry["key"] = batch.key(row).decode("utf-8", "backslashreplace")
                    left.discard(fingerprint)
            if not left:
                return
