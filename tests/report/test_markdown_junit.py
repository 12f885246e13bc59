"""The Markdown and JUnit XML reports: schema validity, counts that match the findings, escaping, no raw keys."""

from __future__ import annotations

import dataclasses
import itertools
import re
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import pytest
import xmlschema

import hashaudit.report
from hashaudit import AuditPlan, KeyBatch, SourceOptions, audit, audit_batches
from hashaudit.engine.showkeys import attach_colliding_keys
from hashaudit.report.junit import render_junit
from hashaudit.report.markdown import render_markdown
from hashaudit.verdict.result import AuditResult

XSD = Path(hashaudit.report.__file__).parent / "schema" / "junit.xsd"
SAMPLE_ORDERS = Path(__file__).resolve().parents[2] / "sample_keys" / "orders.txt"
BUCKET_CHECKS = {"chi_square", "g_test", "empty_buckets", "colliding_pairs", "max_load"}
HOSTILE = 'a|b <script>alert("x")</script> `code` & <&>" \\| end\nsecond line'

# Two rows of a baseline comparison as the gate command produces them: one regression, one new check.
COMPARISON = [
    {
        "hash": "identity",
        "check": "chi_square",
        "table": "mask 2^16",
        "old_verdict": "pass",
        "new_verdict": "fail",
        "old_effect": 0.01,
        "new_effect": 541.7,
        "regressed": True,
        "reason": 'verdict went from pass to fail <&>"',
    },
    {
        "hash": "murmur3_32",
        "check": "max_load",
        "table": "mask 2^16",
        "old_verdict": None,
        "new_verdict": "pass",
        "old_effect": None,
        "new_effect": 1.06,
        "regressed": False,
        "reason": "not in the baseline",
    },
]


@pytest.fixture(scope="module")
def schema() -> xmlschema.XMLSchema:
    return xmlschema.XMLSchema(str(XSD))


@pytest.fixture(scope="module")
def failing() -> AuditResult:
    """20,000 page addresses (multiples of 4096): with a 2^16 low-bit mask the identity hash uses 16 buckets
    (1,250 keys each), so all five bucket checks fail; murmur3_32 passes all five on the same keys."""
    keys = KeyBatch.from_uint64(4096 * np.arange(1, 20_001, dtype=np.uint64))
    plan = AuditPlan(hashes=("identity", "murmur3_32"), buckets=(1 << 16,), schemes=("mask",), checks=("buckets",))
    return audit_batches([keys], plan)


@pytest.fixture(scope="module")
def orders() -> AuditResult:
    """The sample order numbers: CRC-32 fails and warns on some tables, XXH3 passes (README)."""
    return audit([SAMPLE_ORDERS], AuditPlan(hashes=("crc32", "xxh3_64"), checks=("buckets", "bits")))


@pytest.fixture(scope="module")
def passing() -> AuditResult:
    return audit([SAMPLE_ORDERS], AuditPlan(hashes=("xxh3_64",), checks=("buckets", "bits")))


def _with_message(result: AuditResult, message: str, hash_name: str | None = None) -> AuditResult:
    """The same result with every finding's message (and optionally the hash name) replaced."""
    hashes = []
    for h in result.hashes:
        name = hash_name or h.name
        findings = tuple(dataclasses.replace(f, message=message, hash_name=name) for f in h.findings)
        hashes.append(dataclasses.replace(h, name=name, findings=findings))
    return dataclasses.replace(result, hashes=tuple(hashes))


def _parse(text: str) -> ET.Element:
    assert text.startswith("<?xml version='1.0' encoding='utf-8'?>\n")
    return ET.fromstring(text.encode("utf-8"))


def _check_counts(root: ET.Element) -> None:
    """Every suite's and the root's counts equal the test cases and failure elements they hold."""
    total_tests = total_failures = 0
    for suite in root.findall("testsuite"):
        cases = suite.findall("testcase")
        failed = [c for c in cases if c.find("failure") is not None]
        assert suite.get("tests") == str(len(cases))
        assert suite.get("failures") == str(len(failed))
        assert suite.get("errors") == "0" and suite.get("skipped") == "0"
        assert all(c.find("error") is None and c.find("skipped") is None for c in cases)
        assert all(len(c.findall("failure")) <= 1 for c in cases)
        total_tests += len(cases)
        total_failures += len(failed)
    assert root.get("tests") == str(total_tests)
    assert root.get("failures") == str(total_failures)
    assert root.get("errors") == "0"


def _unescaped_pipes(row: str) -> int:
    return len(re.findall(r"(?<!\\)(?:\\\\)*\|", row))


def _table_rows(markdown: str, heading: str) -> list[str]:
    """The body rows of the first table after a line starting with ``heading``."""
    lines = markdown.splitlines()
    start = next(i for i, line in enumerate(lines) if line.startswith(heading))
    first = next(i for i in range(start + 1, len(lines)) if lines[i].startswith("| "))
    rows = list(itertools.takewhile(lambda line: line.startswith("| "), lines[first:]))
    assert set(rows[1].replace(" ", "")) == {"|", "-"}  # the delimiter row
    return rows[2:]


# --- JUnit XML ---------------------------------------------------------------------------------------------------


def test_the_schema_rejects_what_it_should(schema):
    """Validation below is not vacuous: a suite without its required counts is rejected."""
    assert not schema.is_valid('<testsuites><testsuite name="x" tests="1"/></testsuites>')
    assert not schema.is_valid('<testsuites><testcase name="x"/></testsuites>')
    assert schema.is_valid('<testsuites><testsuite name="x" tests="0" failures="0" errors="0"/></testsuites>')


def test_junit_of_a_failing_audit(schema, failing):
    assert failing.verdict == "fail"
    text = render_junit(failing)
    schema.validate(text)
    root = _parse(text)
    _check_counts(root)
    suites = {s.get("name"): s for s in root.findall("testsuite")}
    assert list(suites) == ["hashaudit.identity", "hashaudit.murmur3_32"]
    identity, murmur = suites["hashaudit.identity"], suites["hashaudit.murmur3_32"]
    assert (identity.get("tests"), identity.get("failures")) == ("5", "5")
    assert (murmur.get("tests"), murmur.get("failures")) == ("5", "0")
    failures = {c.get("name"): c.find("failure") for c in identity.findall("testcase")}
    assert set(failures) == {f"{check} [mask 2^16]" for check in BUCKET_CHECKS}
    by_check = {f.check: f for f in failing.findings if f.hash_name == "identity"}
    for case in identity.findall("testcase"):
        assert case.get("classname") == "hashaudit.identity"
        failure = case.find("failure")
        assert failure is not None
        check = failure.get("type")
        assert case.get("name") == f"{check} [mask 2^16]"
        assert failure.get("message") == by_check[check].message
        assert failure.text is not None and failure.text.startswith(by_check[check].message)
    for case in murmur.findall("testcase"):
        assert case.find("failure") is None
        assert "consistent with uniform hashing" in (case.findtext("system-out") or "")


def test_junit_of_a_passing_audit(schema, passing):
    assert passing.verdict == "pass"
    text = render_junit(passing)
    schema.validate(text)
    root = _parse(text)
    _check_counts(root)
    assert root.get("failures") == "0"
    assert root.get("tests") == str(len(passing.findings))
    (suite,) = root.findall("testsuite")
    assert suite.get("name") == "hashaudit.xxh3_64"
    messages = [c.findtext("system-out", "").split("\n")[0] for c in suite.findall("testcase")]
    assert messages == [f.message for f in passing.hashes[0].findings]


def test_junit_warnings_pass_with_their_message_in_system_out(schema, orders):
    warned = [f for f in orders.findings if f.verdict == "warn"]
    failed = [f for f in orders.findings if f.verdict == "fail"]
    assert warned and failed  # CRC-32 on the sample order numbers does both (README)
    root = _parse(render_junit(orders))
    schema.validate(render_junit(orders))
    _check_counts(root)
    assert root.get("failures") == str(len(failed)) and root.get("tests") == str(len(orders.findings))
    cases = {(c.get("classname"), c.get("name")): c for c in root.iter("testcase")}
    assert len(cases) == len(orders.findings)  # names are unique within a suite
    for f in warned:
        case = cases[(f"hashaudit.{f.hash_name}", f"{f.check} [{f.table}]")]
        assert case.find("failure") is None
        assert (case.findtext("system-out") or "").startswith(f.message + "\nverdict: warn (skewed)")


def test_junit_with_a_baseline_comparison(schema, failing):
    text = render_junit(failing, comparison=COMPARISON)
    schema.validate(text)
    root = _parse(text)
    _check_counts(root)
    assert root.get("tests") == str(10 + 2) and root.get("failures") == str(5 + 1)
    baseline = root.findall("testsuite")[-1]
    assert baseline.get("name") == "baseline"
    assert (baseline.get("tests"), baseline.get("failures")) == ("2", "1")
    regressed, new = baseline.findall("testcase")
    assert (regressed.get("classname"), regressed.get("name")) == ("baseline.identity", "chi_square [mask 2^16]")
    failure = regressed.find("failure")
    assert failure is not None
    assert failure.get("type") == "regression" and failure.get("message") == COMPARISON[0]["reason"]
    assert new.find("failure") is None
    assert "verdict: none -> pass" in (new.findtext("system-out") or "")


def test_junit_escapes_markup_and_survives_a_round_trip(schema, failing):
    hostile = _with_message(failing, HOSTILE + "\x00\x1b", hash_name='h<&>"')
    text = render_junit(hostile)
    schema.validate(text)
    root = _parse(text)
    _check_counts(root)
    expected = HOSTILE + "\ufffd\ufffd"  # characters XML 1.0 cannot carry become U+FFFD
    failures = list(root.iter("failure"))
    assert len(failures) == 5
    assert all(f.get("message") == expected for f in failures)
    assert {s.get("name") for s in root.findall("testsuite")} == {'hashaudit.h<&>"'}
    assert all(
        c.findtext("system-out", "").startswith(expected) for c in root.iter("testcase") if c.find("failure") is None
    )


# --- Markdown ----------------------------------------------------------------------------------------------------


def test_markdown_of_a_failing_audit(failing):
    text = render_markdown(failing, detail="full")
    assert text.splitlines()[0] == "## hashaudit: FAIL"
    assert "20,000 keys read, 20,000 distinct" in text
    assert "identity (fail), murmur3\\_32 (pass)" in text
    assert "Checks: 5 fail, 0 warn, 0 info, 5 pass." in text
    flagged = _table_rows(text, "### Failing and warning checks (5)")
    assert len(flagged) == 5 and all(row.startswith("| identity | ") for row in flagged)
    assert {row.split(" | ")[1].replace("\\_", "_") for row in flagged} == BUCKET_CHECKS
    assert all(" | **FAIL** | " in row and " | mask 2^16 | " in row for row in flagged)
    every = _table_rows(text, "<summary>All 10 checks</summary>")
    assert len(every) == len(failing.findings) == 10
    assert text.index("<details>") < text.index("</details>") < text.index("**Caution:**")
    assert "hash flooding" in text and "secret seed" in text
    assert "Against the baseline" not in text


def test_markdown_of_a_passing_audit(passing):
    text = render_markdown(passing, detail="full")
    assert text.splitlines()[0] == "## hashaudit: PASS"
    assert "No check failed or warned." in text and "### Failing and warning checks" not in text
    counts = passing.to_dict()["summary"]["checks"]
    assert f"Checks: 0 fail, 0 warn, {counts['info']} info, {counts['pass']} pass." in text
    assert "from " + str(SAMPLE_ORDERS) in text.replace("\\_", "_")
    assert len(_table_rows(text, f"<summary>All {len(passing.findings)} checks")) == len(passing.findings)


def test_markdown_lists_failures_before_warnings(orders):
    text = render_markdown(orders, detail="full")
    counts = orders.to_dict()["summary"]["checks"]
    flagged = _table_rows(text, f"### Failing and warning checks ({counts['fail'] + counts['warn']})")
    verdicts = [row.split(" | ")[3] for row in flagged]
    assert verdicts == ["**FAIL**"] * counts["fail"] + ["WARN"] * counts["warn"]


def test_markdown_with_a_baseline_comparison(failing):
    text = render_markdown(failing, comparison=COMPARISON, detail="full")
    assert "1 of 2 compared checks regressed." in text
    rows = _table_rows(text, "### Against the baseline")
    assert rows == [
        "| identity | chi\\_square | mask 2^16 | PASS | FAIL | 0.01 | 542 | **yes** | "
        'verdict went from pass to fail &lt;&amp;&gt;" |',
        "| murmur3\\_32 | max\\_load | mask 2^16 | — | PASS | — | 1.06 | no | not in the baseline |",
    ]
    assert text.index("### Against the baseline") < text.index("<details>")


def test_markdown_escapes_table_and_html_metacharacters(failing):
    text = render_markdown(_with_message(failing, HOSTILE, hash_name="h|x"), detail="full")
    assert "<script>" not in text and '&lt;script&gt;alert("x")&lt;/script&gt;' in text
    assert "a\\|b" in text and "&#96;code&#96;" in text and '&amp; &lt;&amp;&gt;"' in text
    assert "\\\\\\| end<br>second line" in text  # a backslash and a pipe both escaped; the line break kept in its cell
    assert "h\\|x (fail)" in text
    rows = _table_rows(text, "### Failing and warning checks") + _table_rows(text, "<summary>All")
    assert len(rows) == 5 + 10
    assert all(_unescaped_pipes(row) == 7 for row in rows)  # six cells each: no message splits a row


def test_reports_show_no_key_even_when_sample_keys_were_attached(tmp_path, schema):
    """``--show-keys`` puts keys into a finding's details; neither report prints them."""
    crafted = "".join("".join(blocks) + "\n" for blocks in itertools.product(["Aa", "BB"], repeat=6))
    path = tmp_path / "crafted.txt"
    path.write_text(crafted)
    plan = AuditPlan(hashes=("poly31",), checks=("collisions",))
    result = audit([path], plan)
    assert attach_colliding_keys(result, [path], SourceOptions(), plan.seed)
    (collisions,) = [f for f in result.findings if f.check == "full_collisions"]
    assert collisions.verdict == "fail"
    assert "AaAaAaAaAaAa" in collisions.details["largest_groups"][0]["sample_keys"]
    junit, markdown = render_junit(result), render_markdown(result)
    schema.validate(junit)
    assert "AaAa" not in junit and "BBBB" not in junit
    assert "AaAa" not in markdown and "BBBB" not in markdown
