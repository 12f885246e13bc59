"""The comparison of a JSON report with an earlier one (``hashaudit.report.baseline``), on hand-made reports."""

from __future__ import annotations

import copy
import json

import pytest

from hashaudit.checks import FACTS_ONLY
from hashaudit.errors import UsageError
from hashaudit.report.baseline import (
    DEFAULT_TOLERANCE,
    Comparison,
    compare,
    comparison_text,
    read_baseline,
)
from hashaudit.verdict.findings import table_label


def _check(name: str, verdict: str = "pass", effect: float | None = 0.01, **where: object) -> dict:
    return {"name": name, **where, "verdict": verdict, "effect": {"value": effect}}


def _report(*checks: dict, hash_name: str = "xxh3_64") -> dict:
    return {"schema": "hashaudit.audit/1", "hashes": [{"name": hash_name, "checks": list(checks)}]}


BASE = _report(
    _check("chi_square", scheme="mask", buckets=1 << 16),
    _check("chi_square", scheme="mod", buckets=65521),
    _check("probe_cost", scheme="mask", buckets=1 << 12, table_kind="linear"),
    _check("shard_balance", shard_scheme="jump", shards=8),
    _check("full_collisions"),
    _check("hot_keys", verdict="info", effect=0.1),
)


def _rows_by_table(rows: list[dict]) -> dict[tuple[str, str], dict]:
    return {(r["check"], r["table"]): r for r in rows}


def test_the_same_report_is_unchanged_everywhere():
    rows = compare(BASE, copy.deepcopy(BASE), DEFAULT_TOLERANCE)
    assert len(rows) == 6 and all(r["reason"] == "unchanged" and not r["regressed"] for r in rows)
    assert not Comparison("base.json", rows).regressed


def test_tables_are_labelled_as_findings_label_them():
    tables = {r["table"] for r in compare(BASE, BASE, DEFAULT_TOLERANCE)}
    assert tables == {
        table_label("mask", 1 << 16),
        table_label("mod", 65521),
        "linear " + table_label("mask", 1 << 12),
        "jump 8 shards",
        "full value",
    }
    assert "mask 2^16" in tables and "mod 65521" in tables


def test_a_worse_verdict_and_a_grown_effect_regress_first():
    new = copy.deepcopy(BASE)
    checks = new["hashes"][0]["checks"]
    checks[1]["verdict"] = "warn"
    checks[0]["effect"]["value"] = 0.01 + 2 * DEFAULT_TOLERANCE
    rows = compare(new, BASE, DEFAULT_TOLERANCE)
    assert [r["regressed"] for r in rows[:2]] == [True, True] and not any(r["regressed"] for r in rows[2:])
    by_table = _rows_by_table(rows)
    assert by_table["chi_square", "mod 65521"]["reason"] == "verdict pass → warn"
    assert by_table["chi_square", "mask 2^16"]["reason"] == "effect grew by 0.1, more than the tolerance 0.05"
    assert Comparison("base.json", rows).regressed


def test_an_effect_within_the_tolerance_or_a_better_verdict_does_not_regress():
    new = copy.deepcopy(BASE)
    new["hashes"][0]["checks"][0]["effect"]["value"] = 0.01 + DEFAULT_TOLERANCE / 2
    old = copy.deepcopy(BASE)
    old["hashes"][0]["checks"][1]["verdict"] = "fail"
    assert not any(r["regressed"] for r in compare(new, old, DEFAULT_TOLERANCE))


@pytest.mark.parametrize("name", sorted(FACTS_ONLY))
def test_a_facts_only_check_regresses_on_its_verdict_alone(name):
    old = _report(_check(name, verdict="info", effect=0.1))
    grown = _report(_check(name, verdict="info", effect=0.9))
    assert not compare(grown, old, DEFAULT_TOLERANCE)[0]["regressed"]
    worse = _report(_check(name, verdict="warn", effect=0.1))
    assert compare(worse, old, DEFAULT_TOLERANCE)[0]["regressed"]


def test_new_and_no_longer_run_checks_are_noted_without_regressing():
    new = _report(_check("chi_square", scheme="mask", buckets=1 << 16), _check("g_test", scheme="mask", buckets=256))
    rows = compare(new, BASE, DEFAULT_TOLERANCE)
    reasons = {r["reason"] for r in rows}
    assert reasons == {"unchanged", "new check", "no longer checked"} and not any(r["regressed"] for r in rows)
    gone = [r for r in rows if r["reason"] == "no longer checked"]
    assert len(gone) == 5 and all(r["new_verdict"] is None and r["hash"] == "xxh3_64" for r in gone)
    added = next(r for r in rows if r["reason"] == "new check")
    assert added["old_verdict"] is None and added["table"] == "mask 2^8"


def test_reports_of_different_schemas_are_not_compared():
    with pytest.raises(UsageError, match="schema"):
        compare(BASE, {**BASE, "schema": "hashaudit.audit/0"}, DEFAULT_TOLERANCE)


def test_the_json_block_and_the_terminal_text():
    new = copy.deepcopy(BASE)
    new["hashes"][0]["checks"][1]["verdict"] = "fail"
    rows = compare(new, BASE, DEFAULT_TOLERANCE)
    comparison = Comparison("reports/base.json", rows)
    assert comparison.to_dict() == {"file": "reports/base.json", "regressed": True, "checks": rows}
    text = comparison_text(rows)
    assert text.splitlines()[0] == "against the baseline: 6 checks compared, 1 regressed, 5 unchanged"
    assert len(text.splitlines()) == 2 and "REGRESSED" in text and "mod 65521" in text


def test_read_baseline_fails_in_one_line(tmp_path):
    good = tmp_path / "base.json"
    good.write_text(json.dumps(BASE), encoding="utf-8")
    assert read_baseline(str(good)) == BASE
    with pytest.raises(UsageError, match="no such file"):
        read_baseline(str(tmp_path / "missing.json"))
    bad = tmp_path / "bad.json"
    bad.write_text("{not json", encoding="utf-8")
    with pytest.raises(UsageError, match="not a JSON report") as caught:
        read_baseline(str(bad))
    assert "\n" not in str(caught.value)
