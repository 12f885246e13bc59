"""The public names of the package are exactly the ones documented (kept in sync on purpose)."""

from __future__ import annotations

import hashaudit


def test_all_is_sorted_and_exact():
    assert hashaudit.__all__ == sorted(hashaudit.__all__)
    assert hashaudit.__all__ == [
        "AuditPlan", "AuditResult", "BitCounts", "BucketCounts", "DistinctKeys", "Finding", "FullCollisions",
        "HashAuditError", "HashRegistry", "HashSpec", "InputError", "KeyBatch", "KeySample", "MergeError", "REGISTRY", "ResourceError", "SourceOptions", "Thresholds", "UsageError",
        "__version__", "audit", "audit_batches", "bucket_index", "from_callable", "get_hash", "open_keys",
        "plan_capacity",
    ]  # fmt: skip


def test_every_public_name_resolves():
    for name in hashaudit.__all__:
        assert getattr(hashaudit, name) is not None, name
