"""Growing tables: the replay of insertion with rehashing, and the order hazard of copying a table into another
that uses the same hash."""

from __future__ import annotations

import numpy as np
import pytest

from hashaudit import AuditPlan, KeyBatch, audit_batches
from hashaudit.errors import UsageError
from hashaudit.tables.growth import GrowthPolicy, insertion_orders, parse_growth, replay_growth


@pytest.fixture(scope="module")
def values() -> np.ndarray:
    return np.random.default_rng(99).integers(0, 2**64 - 1, size=100_000, dtype=np.uint64, endpoint=True)


def test_doubling_replay_counts_resizes_and_moves(values):
    """16 slots doubling at 3/4: the table reaches 2^18 slots after 14 resizes, each moving every key present
    (12 + 24 + ... + 98,304 = 196,596 moves), and it never holds more than three quarters full."""
    result = replay_growth(values, 64, "linear", GrowthPolicy(16, 2.0, 0.75))
    assert result.slots == 1 << 18 and result.resizes == 14
    assert result.keys_moved == sum(int(0.75 * (16 << i)) for i in range(14)) == 196_596
    assert result.bytes == result.slots * 16
    assert [m.slots for m in result.moments] == [16 << i for i in range(15)]
    assert all(m.load <= 0.75 for m in result.moments)
    assert result.moments[-1].keys == len(values)


def test_other_factors_use_prime_sizes(values):
    result = replay_growth(values[:20_000], 64, "double", parse_growth("1.5@0.875"))
    sizes = [m.slots for m in result.moments]
    assert sizes[0] == 17 and all(b >= 1.5 * a for a, b in zip(sizes, sizes[1:], strict=False))
    from hashaudit.tables.sizes import is_prime

    assert all(is_prime(s) for s in sizes)
    with pytest.raises(UsageError, match="power-of-two"):
        replay_growth(values[:100], 64, "quadratic", parse_growth("1.5@0.875"))
    with pytest.raises(UsageError, match="FACTOR@LOAD"):
        parse_growth("double")
    with pytest.raises(UsageError, match="between 0 and 1"):
        parse_growth("2@1.5")


def test_copying_a_larger_same_hash_table_is_quadratic_under_linear_probing(values):
    """The planted case: a linear-probing table doubling at 7/8 filled in the slot order of a same-hash table
    twice its final size (what copying a table does) costs over 50 times the probes of a random order, while
    double hashing, whose step comes from other bits, does not care (measured: about 150× and 1.0×)."""

    def total(kind: str, order: np.ndarray) -> int:
        r = replay_growth(values, 64, kind, GrowthPolicy(16, 2.0, 0.875), order=order, measure_moments=False)
        return r.insert_probes + r.rehash_probes

    final = replay_growth(values, 64, "linear", GrowthPolicy(16, 2.0, 0.875), measure_moments=False).slots
    orders = insertion_orders(values, 64, final, "mask", seed=1)
    assert total("linear", orders["iteration_2x"]) > 50 * total("linear", orders["random"])
    assert total("double", orders["iteration_2x"]) < 1.2 * total("double", orders["random"])
    assert sorted(orders["iteration_1x"].tolist()) == list(range(len(values)))  # a permutation


def test_growth_and_order_findings_in_an_audit():
    rng = np.random.default_rng(5)
    # 55,000 keys end in a table of 2^16 slots at load 0.84, near its 7/8 limit: where copies blow up
    batch = KeyBatch.from_uint64(rng.integers(0, 2**63, size=55_000, dtype=np.uint64))
    plan = AuditPlan(
        hashes=("xxh3_64",),
        checks=("growth",),
        table_kinds=("linear", "double"),
        growth=(GrowthPolicy(16, 2.0, 0.875),),
        seed=2,
    )
    result = audit_batches([batch], plan)
    found = {(f.check, f.details["table_kind"]): f for f in result.findings}
    assert set(found) == {("growth_cost", "linear"), ("growth_cost", "double"), ("order_hazard", "linear"),
                          ("order_hazard", "double")}  # fmt: skip
    assert found[("growth_cost", "linear")].verdict == "pass"
    hazard = found[("order_hazard", "linear")]
    assert hazard.verdict == "fail" and hazard.effect.value > 10 and "random order" in hazard.message
    assert found[("order_hazard", "double")].verdict in ("pass", "warn")
