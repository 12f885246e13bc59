"""Tiny inputs (1, 2, 3, 10, 100 keys): strong hash functions never fail, in the default audit or with every check.

Every check must be valid at these sizes (exact or simulated null laws where the asymptotic ones do not hold) or
decline to judge; an effect below what chance gives never fails.
"""

from __future__ import annotations

import numpy as np
import pytest

from hashaudit import AuditPlan, KeyBatch, Thresholds, audit_batches
from hashaudit.checks import judge
from hashaudit.stats.outcome import Effect, FitTest

STRONG = ("xxh3_64", "murmur3_128", "blake2b_64", "siphash24")
SIZES = (1, 2, 3, 10, 100)


def random_keys(keys: int, seed: int) -> list[bytes]:
    """Distinct random keys: short lowercase words and random bytes, alternating (lengths 1 to 12)."""
    rng = np.random.default_rng([seed, keys, 0x7149])
    out: list[bytes] = []
    while len(out) < keys:
        length = int(rng.integers(1, 13))
        if len(out) % 2:
            out.append(bytes(rng.integers(97, 123, size=length).astype(np.uint8)))
        else:
            out.append(rng.bytes(length))
        out = list(dict.fromkeys(out))
    return out


def plans() -> dict[str, AuditPlan]:
    return {
        "default": AuditPlan(hashes=STRONG),
        "all": AuditPlan(hashes=STRONG, checks="all", shards=(8,), seed=3),
    }


def bad_findings(keys: list[bytes]) -> list[str]:
    """Fails, and warns whose effect is below chance, of both audits of ``keys``."""
    bad = []
    for name, plan in plans().items():
        result = audit_batches([KeyBatch.from_keys(keys)], plan, keys=len(keys), threads=1)
        for f in result.findings:
            below_chance = f.effect.observed <= f.effect.ideal
            if f.verdict == "fail" or (f.verdict == "warn" and below_chance):
                bad.append(f"{name} {len(keys)} keys: {f.hash_name} {f.check} {f.verdict}: {f.message}")
    return bad


def test_two_one_letter_keys_pass():
    """Two one-byte keys share their one-bit neighbours (a ^ 0x03 == b): 16 dependent flips once made
    bit_independence fail with an effect below chance (p = 9.6e-06 for xxh3_64)."""
    assert bad_findings([b"a", b"b"]) == []


@pytest.mark.parametrize("keys", [pytest.param(k, marks=pytest.mark.slow) if k == 100 else k for k in SIZES])
def test_strong_hashes_never_fail_on_tiny_inputs(keys):
    assert bad_findings(random_keys(keys, 0)) == []


@pytest.mark.slow
@pytest.mark.parametrize("seed", [1, 2, 3, 4])
@pytest.mark.parametrize("keys", SIZES)
def test_strong_hashes_never_fail_on_tiny_inputs_more_seeds(keys, seed):
    assert bad_findings(random_keys(keys, seed)) == []


def test_a_significant_effect_below_chance_only_warns():
    effect = Effect("bit_independence_max", 0.882, 0.882, 0.906, "largest |phi|")
    test = FitTest("bit_independence", 10.0, 1.0, 10.0, 1e-9, 1.0, "m", effect, {"worst_output_bits": [3, 38]})
    bigger = Effect("bit_independence_max", 0.95, 0.95, 0.906, "largest |phi|")
    worse = FitTest("bit_independence", 10.0, 1.0, 10.0, 1e-9, 1.0, "m", bigger, {"worst_output_bits": [3, 38]})
    below, above = judge([("h", None, None, 2, test), ("h", None, None, 2, worse)], Thresholds())
    assert below.verdict == "warn" and below.message.startswith("significant but small (p = 1e-09; no worse than")
    assert above.verdict == "fail"
