"""The Markdown report's two levels of detail: a summary that fits a pull-request comment and names every failing
and warning check (the default), and the full report with every check (``--markdown-detail full``)."""

from __future__ import annotations

import re
from collections import Counter

import numpy as np
import pytest
from cli_runner import run

from hashaudit.report import markdown
from hashaudit.report.markdown import escape, render_markdown
from hashaudit.verdict.result import AuditResult

COMMENT_BYTES = 20_000


def _sections(text: str) -> dict[str, list[list[str]]]:
    """The summary's per-hash tables: hash name -> body rows split into cells."""
    out: dict[str, list[list[str]]] = {}
    current = None
    for line in text.splitlines():
        if m := re.fullmatch(r"### (.+): (FAIL|WARN) \(.*\)", line):
            current = m.group(1)
            out[current] = []
        elif line.startswith("### "):
            current = None
        elif current is not None and line.startswith("| ") and not line.startswith(("| Table", "| ---")):
            out[current].append([c.strip() for c in re.split(r"(?<!\\)\|", line)[1:-1]])
    return out


def _named(text: str) -> Counter:
    """(hash, table, check, verdict) of every failing and warning check the summary names."""
    named: Counter = Counter()
    for hash_name, rows in _sections(text).items():
        for row in rows:
            table, verdict, check, also = row[0], row[1].strip("*").lower(), row[2], row[-1]
            named[hash_name, table, check, verdict] += 1
            if also != "—":
                for part in also.split("; "):
                    tail_verdict, names = part.split(": ")
                    for name in names.split(", "):
                        named[hash_name, table, name, tail_verdict] += 1
    return named


def _flagged(result: AuditResult) -> Counter:
    return Counter(
        (escape(f.hash_name, in_table=False), escape(f.table), escape(f.check), f.verdict)
        for f in result.findings
        if f.verdict in ("fail", "warn")
    )


def test_eight_hashes_fit_a_comment_and_name_every_fail_and_warn(eight_hashes):
    text = render_markdown(eight_hashes)
    assert len(text.encode("utf-8")) <= COMMENT_BYTES
    flagged = _flagged(eight_hashes)
    assert sum(flagged.values()) > 100  # the audit the size limit is about: over a hundred fails and warns
    assert _named(text) == flagged
    assert "| Table | Verdict | Check | Finding | Also |" in text  # the sentences fitted
    assert "<details>" not in text and "hash flooding" in text


def test_the_summary_has_a_row_per_hash_and_a_table_per_hash_that_did_not_pass(eight_hashes):
    text = render_markdown(eight_hashes)
    for h in eight_hashes.hashes:
        tally = [sum(1 for f in h.findings if f.verdict == v) for v in ("fail", "warn", "info", "pass")]
        verdict = f"**{h.verdict.upper()}**" if h.verdict == "fail" else h.verdict.upper()
        row = f"| {escape(h.name)} | {h.width}-bit | {verdict} | " + " | ".join(map(str, tally)) + " |"
        assert row in text.splitlines()
        assert (escape(h.name, in_table=False) in _sections(text)) == (h.verdict != "pass")
    assert f"Checks: {sum(f.verdict == 'fail' for f in eight_hashes.findings)} fail" in text


def test_the_full_report_keeps_every_check(eight_hashes):
    text = render_markdown(eight_hashes, detail="full")
    flagged = sum(1 for f in eight_hashes.findings if f.verdict in ("fail", "warn"))
    assert f"### Failing and warning checks ({flagged})" in text
    assert f"<summary>All {len(eight_hashes.findings)} checks</summary>" in text
    assert all(escape(f.message) in text for f in eight_hashes.findings)
    assert len(text.encode("utf-8")) > 4 * COMMENT_BYTES  # what the summary saves


def test_past_its_budget_the_summary_leaves_out_sentences_not_checks(eight_hashes, monkeypatch):
    monkeypatch.setattr(markdown, "SUMMARY_BYTES", 5_000)
    text = render_markdown(eight_hashes)
    assert "| Table | Verdict | Check | Also |" in text and "left out to fit a comment" in text
    assert _named(text) == _flagged(eight_hashes)


def test_the_summary_shows_only_the_baseline_rows_that_changed(eight_hashes):
    rows = [
        {"hash": "crc32", "check": "g_test", "table": "mask 2^16", "old_verdict": "warn", "new_verdict": "fail",
         "old_effect": 0.01, "new_effect": 0.2, "regressed": True, "reason": "verdict warn → fail"},
        {"hash": "crc32", "check": "chi_square", "table": "mask 2^16", "old_verdict": "fail", "new_verdict": "fail",
         "old_effect": 0.06, "new_effect": 0.06, "regressed": False, "reason": "unchanged"},
    ]  # fmt: skip
    summary = render_markdown(eight_hashes, comparison=rows)
    assert "1 of 2 compared checks regressed. 1 unchanged check not shown (the full report lists them)." in summary
    assert "| crc32 | g\\_test | mask 2^16 | WARN | FAIL |" in summary and "| crc32 | chi\\_square |" not in summary
    full = render_markdown(eight_hashes, comparison=rows, detail="full")
    assert "| crc32 | chi\\_square | mask 2^16 | FAIL | FAIL |" in full


def test_an_unknown_detail_is_refused(eight_hashes):
    with pytest.raises(ValueError, match="'brief'"):
        render_markdown(eight_hashes, detail="brief")


@pytest.fixture(scope="module")
def pages(tmp_path_factory):
    path = tmp_path_factory.mktemp("keys") / "pages.txt"
    path.write_text("".join(f"{4096 * i}\n" for i in np.arange(1, 5_001).tolist()))
    return path


def test_the_command_line_defaults_to_the_summary_and_takes_full(pages, tmp_path):
    args = ["audit", str(pages), "--key-format", "int", "-H", "identity", "-m", "65536", "-s", "mask"]
    args += ["--checks", "buckets"]
    code, out, err = run([*args, "--markdown", str(tmp_path / "s.md")])
    assert code == 1, err
    summary = (tmp_path / "s.md").read_text(encoding="utf-8")
    code, out, err = run([*args, "--markdown", str(tmp_path / "f.md"), "--markdown-detail", "full"])
    assert code == 1, err
    full = (tmp_path / "f.md").read_text(encoding="utf-8")
    assert "### identity: FAIL (5 fail)" in summary and "<details>" not in summary
    assert "### Failing and warning checks (5)" in full and "<summary>All 5 checks</summary>" in full
    code, out, err = run([*args, "--markdown", str(tmp_path / "x.md"), "--markdown-detail", "brief"])
    assert code == 2 and "--markdown-detail" in err


def test_the_option_is_declared_in_help():
    code, out, _ = run(["audit", "--help"])
    assert code == 0 and "--markdown-detail [summary|full]" in out
    code, out, _ = run(["gate", "--help"])
    assert code == 0 and "--markdown-detail [summary|full]" in out


def test_the_summary_escapes_what_it_quotes():
    """A message and a hash name full of Markdown and HTML syntax stay inert in the summary's cells."""
    import dataclasses

    from hashaudit import AuditPlan, KeyBatch, audit_batches

    keys = KeyBatch.from_uint64(4096 * np.arange(1, 5_001, dtype=np.uint64))
    plan = AuditPlan(hashes=("identity",), buckets=(1 << 16,), schemes=("mask",), checks=("buckets",))
    result = audit_batches([keys], plan)
    hostile = 'a|b <script>alert("x")</script> `code` & end\nsecond line'
    hashes = tuple(
        dataclasses.replace(
            h, name="h|x", findings=tuple(dataclasses.replace(f, message=hostile, hash_name="h|x") for f in h.findings)
        )
        for h in result.hashes
    )
    text = render_markdown(dataclasses.replace(result, hashes=hashes))
    assert "<script>" not in text and "&lt;script&gt;" in text and "a\\|b" in text and "end<br>second line" in text
    rows = _sections(text)["h\\|x"]
    assert len(rows) == 1 and len(rows[0]) == 5
