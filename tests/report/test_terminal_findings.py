"""The terminal report hides no finding: every fail, warn and info is a line of its own, named on its table's line
(``[also fail: …; warn: …]``) or counted there (``and 3 more: --all``), and every line names its check."""

from __future__ import annotations

import re
from collections import Counter

import pytest

from hashaudit import AuditPlan, KeyBatch, audit_batches
from hashaudit.checks import CHECKS
from hashaudit.report import terminal
from hashaudit.report.terminal import render
from hashaudit.verdict.result import AuditResult

ROW = re.compile(r"^(FAIL|WARN|INFO)  ")
HEADER = re.compile(r"\((\d+) fail, (\d+) warn, (\d+) info, (\d+) pass;")
TAIL = re.compile(r" \[also (.*)\]$")


def _header_counts(text: str) -> dict[str, int]:
    fail, warn, info, passed = map(int, HEADER.search(text).groups())  # type: ignore[union-attr]
    return {"fail": fail, "warn": warn, "info": info, "pass": passed}


def _cells(line: str) -> list[str]:
    """verdict, hash, table, check, message (columns are two or more spaces apart)."""
    verdict, hash_name, table, check, message = re.split(r" {2,}", line, maxsplit=4)
    return [verdict, hash_name, table, check, message]


def _tail(message: str) -> tuple[dict[str, list[str]], int]:
    """The checks a line's ``[also …]`` names, by verdict, and how many it only counts."""
    named: dict[str, list[str]] = {}
    more = 0
    found = TAIL.search(message)
    if found:
        for part in found.group(1).split("; "):
            if m := re.fullmatch(r"and (\d+) more: --all", part):
                more += int(m.group(1))
            else:
                verdict, names = part.split(": ", 1)
                named[verdict] = names.split(", ")
    return named, more


def _shown(text: str) -> tuple[Counter, int]:
    """Findings on screen by verdict (each line's own and its tail's named ones), and the ones only counted."""
    shown: Counter = Counter()
    counted = 0
    for line in text.splitlines():
        if ROW.match(line):
            verdict, *_, message = _cells(line)
            shown[verdict.lower()] += 1
            named, more = _tail(message)
            for tail_verdict, names in named.items():
                shown[tail_verdict] += len(names)
            counted += more
    return shown, counted


@pytest.mark.parametrize("fixture", ["eight_hashes", "poly_and_crc"])
def test_every_finding_that_did_not_pass_is_named_or_counted(request, fixture):
    result: AuditResult = request.getfixturevalue(fixture)
    text = render(result)
    header = _header_counts(text)
    truth = Counter(f.verdict for f in result.findings)
    assert header == {v: truth[v] for v in ("fail", "warn", "info", "pass")}
    shown, counted = _shown(text)
    for verdict in ("fail", "warn", "info"):
        assert shown[verdict] <= header[verdict]
    assert sum(shown[v] for v in ("fail", "warn", "info")) + counted == header["fail"] + header["warn"] + header["info"]
    assert sum(shown.values()) > len([line for line in text.splitlines() if ROW.match(line)])  # the tails name more
    lines = sum(1 for line in text.splitlines() if ROW.match(line))
    flagged = header["fail"] + header["warn"] + header["info"]
    assert f"({lines} lines above for {flagged} findings that did not pass:" in text


@pytest.mark.parametrize("fixture", ["eight_hashes", "poly_and_crc"])
def test_each_line_names_its_check_and_its_table_s_other_findings(request, fixture):
    result: AuditResult = request.getfixturevalue(fixture)
    by_place = {(f.hash_name, f.table, f.check): f for f in result.findings}
    for line in render(result).splitlines():
        if not ROW.match(line):
            continue
        verdict, hash_name, table, check, message = _cells(line)
        assert check in CHECKS, line
        speaker = by_place[hash_name, table, check]
        assert speaker.verdict == verdict.lower() and message.startswith(speaker.message)
        named, more = _tail(message)
        others = [f for f in result.findings if (f.hash_name, f.table) == (hash_name, table) and f is not speaker]
        flagged = [f for f in others if f.verdict != "pass"]
        for tail_verdict, names in named.items():
            assert all(by_place[hash_name, table, name].verdict == tail_verdict for name in names)
        assert sum(len(n) for n in named.values()) + more == len(flagged)
        assert not any(f.check in sum(named.values(), []) for f in others if f.verdict == "pass")


def test_a_long_tail_counts_the_rest_and_points_to_all(poly_and_crc):
    """poly31's mask 2^16 table has more findings than a line names: the rest are counted."""
    text = render(poly_and_crc)
    (line,) = [ln for ln in text.splitlines() if ROW.match(ln) and _cells(ln)[1:3] == ["poly31", "mask 2^16"]]
    named, more = _tail(line)
    assert sum(len(n) for n in named.values()) == terminal.TAIL_NAMES and more >= 1
    assert line.endswith(f"; and {more} more: --all]")


def test_warnings_under_a_failing_table_are_named(eight_hashes):
    """Before, a table led by a fail listed only other fails: its warns and infos were on no line."""
    text = render(eight_hashes)
    warned_under_fail = [
        f
        for verdict, members in terminal.findings_by_table(eight_hashes.findings)
        if verdict == "fail"
        for f in members
        if f.verdict == "warn"
    ]
    assert warned_under_fail
    for f in warned_under_fail:
        (line,) = [ln for ln in text.splitlines() if ROW.match(ln) and _cells(ln)[1:3] == [f.hash_name, f.table]]
        named, more = _tail(line)
        assert f.check in named.get("warn", []) or more


def test_all_gives_every_finding_its_own_line(poly_and_crc):
    text = render(poly_and_crc, show_all=True)
    assert sum(1 for line in text.splitlines() if re.match(r"^(FAIL|WARN|INFO|PASS)  ", line)) == len(
        poly_and_crc.findings
    )
    assert "[also" not in text and "lines above for" not in text


def test_a_table_with_one_finding_has_no_tail_and_no_footer():
    """Page addresses under the identity hash: one table, every bucket check failing, the line names the rest."""
    import numpy as np

    keys = KeyBatch.from_uint64(4096 * np.arange(1, 20_001, dtype=np.uint64))
    plan = AuditPlan(hashes=("identity",), buckets=(1 << 16,), schemes=("mask",), checks=("buckets",))
    text = render(audit_batches([keys], plan))
    assert "1 hash function, 1 table each" in text
    (line,) = [ln for ln in text.splitlines() if ROW.match(ln)]
    named, more = _tail(line)
    assert _cells(line)[3] == "colliding_pairs" and sorted(named["fail"]) == sorted(
        ["chi_square", "g_test", "empty_buckets", "max_load"]
    )
    assert "(1 line above for 5 findings that did not pass:" in text
