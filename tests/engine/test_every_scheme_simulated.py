"""The simulated tables (probe cost, growth, order) are placed by every --scheme asked for, not the first alone."""

from __future__ import annotations

from collections import Counter
from pathlib import Path

from hashaudit.engine.plan import AuditPlan
from hashaudit.engine.sources import audit

ORDERS = Path(__file__).parents[2] / "sample_keys" / "orders.txt"


def _schemes(**plan: object) -> Counter:
    result = audit([ORDERS], AuditPlan(hashes=("xxh3_64",), checks=("tables", "growth"), **plan))
    return Counter((f.check, f.scheme) for f in result.findings)


def test_two_schemes_give_the_simulations_of_both():
    both = _schemes(schemes=("high", "mask"))
    for check in ("probe_cost", "growth_cost", "order_hazard"):
        assert both[(check, "high")] == both[(check, "mask")] > 0, both


def test_one_scheme_gives_the_same_findings_as_before():
    assert {scheme for _, scheme in _schemes(schemes=("high",))} == {"high"}
    assert {scheme for _, scheme in _schemes()} == {"mask"}  # the default: mask for the power-of-two slots
