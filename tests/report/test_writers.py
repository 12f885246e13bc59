"""The report writers' registry: one declaration per format, and ``write_reports`` writing what was asked for."""

from __future__ import annotations

import dataclasses
import io
import json
import math
from pathlib import Path

import pytest

from hashaudit import AuditPlan, audit
from hashaudit.report.baseline import Comparison, compare
from hashaudit.report.html import render_html
from hashaudit.report.json_report import report_dict, to_json
from hashaudit.report.junit import render_junit
from hashaudit.report.markdown import render_markdown
from hashaudit.report.writers import WRITERS, ReportWriter, write_reports
from hashaudit.verdict.result import AuditResult

ORDERS = Path(__file__).resolve().parents[2] / "sample_keys" / "orders.txt"
FILES = {"json": "r.json", "markdown": "r.md", "junit": "r.xml", "html": "r.html"}


@pytest.fixture(scope="module")
def result() -> AuditResult:
    return audit(
        [str(ORDERS)], AuditPlan(hashes=("crc32",), buckets=(1 << 12,), schemes=("mask",), checks=("buckets",))
    )


@pytest.fixture(scope="module")
def comparison(result: AuditResult) -> Comparison:
    """A comparison with a baseline that claimed a smaller effect for the first check."""
    old = report_dict(result)
    check = old["hashes"][0]["checks"][0]
    check["effect"]["value"] = (check["effect"]["value"] or 0.0) - 1.0
    return Comparison("base.json", compare(report_dict(result), old, 0.05))


def test_one_declaration_per_format_in_order():
    assert list(WRITERS) == ["json", "markdown", "junit", "html"]
    for name, writer in WRITERS.items():
        assert isinstance(writer, ReportWriter) and writer.name == name
        assert writer.suffix.startswith(".") and writer.help.endswith(".") and callable(writer.write)
    with pytest.raises(dataclasses.FrozenInstanceError):
        WRITERS["json"].suffix = ".txt"  # type: ignore[misc]


def test_every_format_writes_what_its_renderer_renders(tmp_path, result):
    write_reports(result, {name: str(tmp_path / file) for name, file in FILES.items()})
    assert (tmp_path / "r.json").read_text(encoding="utf-8") == to_json(result)
    assert (tmp_path / "r.md").read_text(encoding="utf-8") == render_markdown(result)
    assert (tmp_path / "r.xml").read_text(encoding="utf-8") == render_junit(result)
    assert (tmp_path / "r.html").read_text(encoding="utf-8") == render_html(result)
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted(FILES.values())  # no temporary file left


def test_only_the_formats_given_a_path_are_written(tmp_path, result):
    write_reports(result, {"json": None, "markdown": str(tmp_path / "r.md"), "junit": ""})
    assert [p.name for p in tmp_path.iterdir()] == ["r.md"]


def test_an_unknown_format_is_refused(tmp_path, result):
    with pytest.raises(ValueError, match="'pdf'"):
        write_reports(result, {"pdf": str(tmp_path / "r.pdf")})
    assert not list(tmp_path.iterdir())


def test_the_comparison_goes_into_json_markdown_and_junit(tmp_path, result, comparison):
    assert comparison.regressed
    write_reports(result, {name: str(tmp_path / file) for name, file in FILES.items()}, comparison=comparison)
    document = json.loads((tmp_path / "r.json").read_text(encoding="utf-8"))
    assert document["baseline"] == {"file": "base.json", "regressed": True, "checks": comparison.rows}
    assert {k: v for k, v in document.items() if k != "baseline"} == json.loads(to_json(result))
    markdown = (tmp_path / "r.md").read_text(encoding="utf-8")
    assert markdown == render_markdown(result, comparison=comparison.rows) and "Against the baseline" in markdown
    assert (tmp_path / "r.xml").read_text(encoding="utf-8") == render_junit(result, comparison=comparison.rows)
    assert (tmp_path / "r.html").read_text(encoding="utf-8") == render_html(result)


def test_a_baseline_holding_nan_is_written_through(tmp_path, result):
    """``json.load`` reads NaN in a baseline file; the comparison's block keeps it rather than failing."""
    row = {"hash": "crc32", "check": "gone", "table": "full value", "old_verdict": "pass", "new_verdict": None,
           "old_effect": math.nan, "new_effect": None, "regressed": False, "reason": "no longer checked"}  # fmt: skip
    rows = [row]
    WRITERS["json"].write(result, tmp_path / "r.json", comparison=Comparison("b.json", rows))
    assert '"old_effect": NaN' in (tmp_path / "r.json").read_text(encoding="utf-8")


@pytest.mark.parametrize("name", ["json", "markdown"])
def test_dash_writes_the_text_formats_to_standard_output(tmp_path, monkeypatch, result, comparison, name):
    monkeypatch.chdir(tmp_path)
    stream = io.StringIO()
    WRITERS[name].write(result, "-", comparison=comparison, stdout=stream)
    WRITERS[name].write(result, "file", comparison=comparison)
    assert stream.getvalue() == Path("file").read_text(encoding="utf-8")
    assert not Path("-").exists()


@pytest.mark.parametrize("name", ["junit", "html"])
def test_dash_is_standard_output_for_junit_and_html_too(tmp_path, monkeypatch, result, name):
    monkeypatch.chdir(tmp_path)
    stream = io.StringIO()
    WRITERS[name].write(result, "-", stdout=stream)
    assert stream.getvalue().startswith(("<?xml", "<!DOCTYPE html>")) and not Path("-").exists()
