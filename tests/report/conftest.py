"""Audits shared by the report tests: real runs on the bundled sample keys, made once per session."""

from __future__ import annotations

from pathlib import Path

import pytest

from hashaudit import AuditPlan, audit
from hashaudit.verdict.result import AuditResult

SAMPLE_KEYS = Path(__file__).resolve().parents[2] / "sample_keys"
EIGHT_HASHES = ("xxh3_64", "murmur3_32", "fnv1a_32", "crc32", "poly31", "djb2", "sdbm", "fnv1_64")


@pytest.fixture(scope="session")
def eight_hashes() -> AuditResult:
    """The sample order numbers under eight hash functions and every default check (as ``hashaudit audit
    sample_keys/orders.txt -H xxh3_64 -H murmur3_32 …``): several fail and warn on many tables."""
    return audit([SAMPLE_KEYS / "orders.txt"], AuditPlan(hashes=EIGHT_HASHES))


@pytest.fixture(scope="session")
def poly_and_crc() -> AuditResult:
    """``hashaudit audit sample_keys/orders.txt -H poly31 -H crc32``."""
    return audit([SAMPLE_KEYS / "orders.txt"], AuditPlan(hashes=("poly31", "crc32")))
