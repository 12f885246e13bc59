"""The capacity planner: loads solved from the classic formulas, sizes from the birthday problem, and the CLI."""

from __future__ import annotations

import math

import pytest

from hashaudit.errors import UsageError
from hashaudit.stats.theory import p_no_collision
from hashaudit.tables.planner import max_load, parse_target, recommend, slots_for_no_collision, table_size


def test_loads_solved_from_the_formulas():
    """Knuth §6.4: linear probing misses cost ½(1 + 1/(1-α)²), so 4 probes allow α = 1 - 1/√7; uniform probing
    misses cost 1/(1-α), so 4 probes allow α = 3/4; chained hits cost 1 + α/2, so 2 probes allow α = 2."""
    assert max_load("linear", parse_target("mean-miss=4"))[0] == pytest.approx(1 - 1 / math.sqrt(7), abs=1e-9)
    assert max_load("double", parse_target("mean-miss=4"))[0] == pytest.approx(0.75, abs=1e-9)
    assert max_load("chaining", parse_target("mean-hit=2"))[0] == pytest.approx(2.0, abs=1e-9)
    load, how = max_load("linear", parse_target("p99-miss=20"))
    assert how == "simulation" and 0.4 <= load <= 0.7


def test_sizes_for_a_target_load_and_for_no_collision():
    assert table_size(1000, 0.5, "pow2") == 2048 and table_size(1000, 0.5, "prime") == 2003
    assert table_size(1000, 0.5, "any") == 2000
    # the birthday problem: 23 keys in 365 slots collide with probability 0.507 (Feller vol. 1 §II.3), so an
    # even chance of no collision needs a few more slots than 365
    m = slots_for_no_collision(23, 0.5, "any")
    assert m > 365 and p_no_collision(m, 23) >= 0.5 > p_no_collision(m - 1, 23)


def test_recommendation_with_real_values_and_hash_width():
    import numpy as np

    values = np.random.default_rng(1).integers(0, 2**64 - 1, size=200_000, dtype=np.uint64, endpoint=True)
    advice = recommend(150_000, "linear", parse_target("mean-miss=4"), "pow2", 32, values, 64)
    assert advice["slots"] == 1 << 18 and advice["load"] <= advice["max_load"]
    assert advice["measured"]["keys"] == int(advice["load"] * advice["measured"]["slots"])
    assert advice["measured"]["miss_mean"] == pytest.approx(advice["theory"]["miss"], rel=0.05)
    assert advice["hash_width"]["keys_for_even_odds"] == 77_164  # √(2·ln 2·2^32) ≈ 77,163.6, rounded up
    with pytest.raises(UsageError, match="NAME=VALUE"):
        parse_target("speed=fast")
    with pytest.raises(UsageError, match="at least 1"):
        parse_target("mean-hit=0.5")
