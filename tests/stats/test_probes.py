"""``probe_cost``: a weak function on structured keys costs far more probes than an ideal hash; strong functions on
random keys do not; the per-cell test is calibrated under the null."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from hashaudit import AuditPlan, KeyBatch, audit_batches
from hashaudit.report.json_report import report_dict
from hashaudit.stats.probes import _welch, ideal_cells, probe_tests
from hashaudit.tables.simulate import simulate


def test_strong_functions_on_random_keys_pass():
    rng = np.random.default_rng(77)
    batch = KeyBatch.from_uint64(rng.integers(0, 2**63, size=40_000, dtype=np.uint64))
    plan = AuditPlan(hashes=("xxh3_64", "murmur3_32", "siphash24"), checks=("tables",), seed=5)
    result = audit_batches([batch], plan)
    probe = [f for f in result.findings if f.check == "probe_cost"]
    assert len(probe) == 3 * 5 and all(f.buckets == 1 << 15 for f in probe)
    assert all(f.verdict == "pass" for f in probe), [f.message for f in probe if f.verdict != "pass"]


def test_a_weak_function_on_structured_keys_fails_in_probes_per_lookup():
    """Integer keys that are multiples of 64 under the identity function fill one slot in 64 of a power-of-two
    table's homes: linear probing pays for it in long runs (a textbook case of a hash that keeps the keys'
    structure in the bits the table uses)."""
    batch = KeyBatch.from_uint64(np.arange(40_000, dtype=np.uint64) * np.uint64(64))
    plan = AuditPlan(hashes=("identity",), checks=("tables",), table_kinds=("linear", "chaining"), seed=5)
    result = audit_batches([batch], plan)
    by_kind = {f.details["table_kind"]: f for f in result.findings}
    linear = by_kind["linear"]
    assert linear.verdict == "fail" and linear.effect.value > 10
    assert "probes" in linear.message and "linear table of 32,768 slots" in linear.message
    assert by_kind["chaining"].verdict == "fail"
    doc = report_dict(result)
    entry = next(c for c in doc["hashes"][0]["checks"] if c.get("table_kind") == "linear")
    assert entry["load"] == linear.details["load"] and entry["scheme"] == "mask" and entry["buckets"] == 1 << 15
    rows = entry["details"]["loads"]
    assert [r["load"] for r in rows] == [0.25, 0.5, 0.75, 0.9, 0.95]
    assert all(r["hit"]["ratio_to_ideal"] > 3 for r in rows)
    # near full, the keys' runs (one per 64 slots) merge into an evenly packed table: misses get cheaper than random
    assert [r["miss"]["ratio_to_ideal"] > 1 for r in rows] == [True, True, True, False, False]


def test_details_compare_with_the_formula():
    rng = np.random.default_rng(3)
    values = rng.integers(0, 2**64 - 1, size=1 << 16, dtype=np.uint64, endpoint=True)
    cells = simulate(values, 64, "linear", 1 << 16, "mask", (0.5, 0.75))
    (test,) = probe_tests(cells, ideal_cells(64, "linear", 1 << 16, "mask", (0.5, 0.75), 11), "mask")
    rows = test.details["loads"]
    assert rows[0]["hit"]["theory_mean"] == pytest.approx(1.5)  # ½(1 + 1/(1 - 0.5)), Knuth §6.4
    assert rows[1]["miss"]["theory_mean"] == pytest.approx(8.5)  # ½(1 + 1/(1 - 0.75)²)
    assert all(abs(r[s]["ratio_to_ideal"] - 1) < 0.1 for r in rows for s in ("hit", "miss"))
    assert test.p_upper > 0.01


def test_the_cell_test_is_calibrated_under_the_null():
    """Random values against random values: the one-sided Welch p-values of a cell are uniform (Kolmogorov-Smirnov
    over 80 independent pairs of tables of 4,096 slots at load 0.75, linear probing, unsuccessful search — the
    noisiest measure)."""
    rng = np.random.default_rng(123)
    p_values = []
    for _ in range(80):
        a, b = (rng.integers(0, 2**64 - 1, size=3072, dtype=np.uint64, endpoint=True) for _ in range(2))
        (one,) = simulate(a, 64, "linear", 4096, "mask", (0.75,))
        (two,) = simulate(b, 64, "linear", 4096, "mask", (0.75,))
        p_values.append(_welch(one.miss_regions, two.miss_regions)[1])
    assert stats.kstest(p_values, "uniform").pvalue > 0.001
