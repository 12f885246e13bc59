"""hashaudit: audit hash functions and bucketing rules on real key sets against simple uniform hashing.

Public names are loaded on first use, so ``import hashaudit`` (and ``hashaudit hashes``) stays cheap and
compiles no kernel.
"""

from __future__ import annotations

import importlib

_EXPORTS = {
    "REGISTRY": "hashaudit.hashes.registry",
    "AuditPlan": "hashaudit.engine.plan",
    "AuditResult": "hashaudit.verdict.result",
    "BitCounts": "hashaudit.stats.bits",
    "BucketCounts": "hashaudit.stats.buckets",
    "DistinctKeys": "hashaudit.stats.distinct",
    "FullCollisions": "hashaudit.stats.collisions",
    "KeySample": "hashaudit.stats.avalanche",
    "Finding": "hashaudit.verdict.findings",
    "HashAuditError": "hashaudit.errors",
    "HashRegistry": "hashaudit.hashes.registry",
    "HashSpec": "hashaudit.hashes.registry",
    "InputError": "hashaudit.errors",
    "KeyBatch": "hashaudit.keys.batch",
    "MergeError": "hashaudit.errors",
    "ResourceError": "hashaudit.errors",
    "SourceOptions": "hashaudit.keys.options",
    "Thresholds": "hashaudit.checks",
    "UsageError": "hashaudit.errors",
    "audit": "hashaudit.engine.sources",
    "audit_batches": "hashaudit.engine.runner",
    "bucket_index": "hashaudit.tables.schemes",
    "from_callable": "hashaudit.hashes.registry",
    "get_hash": "hashaudit.hashes.registry",
    "open_keys": "hashaudit.keys",
    "plan_capacity": "hashaudit.stats.theory",
}

__all__ = sorted([*_EXPORTS, "__version__"])


def _version() -> str:
    """The installed distribution's version (importlib.metadata takes 50 ms to import: only when asked)."""
    from importlib.metadata import PackageNotFoundError, version

    try:
        return version("hashaudit")
    except PackageNotFoundError:  # pragma: no cover - running from a source tree without installing
        return "0+unknown"


def __getattr__(name: str):  # type: ignore[no-untyped-def]
    if name == "__version__":
        value = globals()["__version__"] = _version()
        return value
    if name in _EXPORTS:
        importlib.import_module("hashaudit.hashes")  # registers the statistics' default key fingerprints
        value = getattr(importlib.import_module(_EXPORTS[name]), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'hashaudit' has no attribute {name!r}")


def __dir__() -> list[str]:
    return __all__
