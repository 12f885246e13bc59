"""The JUnit XML report, for CI servers that show test results.

One ``testsuite`` per hash function (``hashaudit.<hash>``) and one ``testcase`` per finding, named
``<check> [<table>]``. A failing check carries a ``failure`` (message = the plain-language sentence, type = the
check name); warn, info and pass are passing test cases with the sentence in ``system-out``. With a baseline
comparison, a further ``testsuite`` named ``baseline`` holds one test case per compared check, failing where it
regressed. Errors and skipped tests are always 0: an audit that could not run exits 2 and writes no report.

The output validates against ``hashaudit/report/schema/junit.xsd``. Keys are never shown: ``Finding.details``
(where ``--show-keys`` puts sample keys) is not rendered.
"""

from __future__ import annotations

import math
import re
import xml.etree.ElementTree as ET

from hashaudit.verdict.findings import Finding
from hashaudit.verdict.result import AuditResult, HashAudit

BASELINE_SUITE = "baseline"
# Characters XML 1.0 cannot carry at all, even escaped; ElementTree would write them and break the document.
_NOT_XML = re.compile("[^\t\n\r\x20-\ud7ff\ue000-\ufffd\U00010000-\U0010ffff]")


def _text(value: object) -> str:
    """Text safe for an XML 1.0 attribute or element (forbidden characters become U+FFFD)."""
    return _NOT_XML.sub("\ufffd", str(value))


def _number(value: float | None) -> str:
    if value is None:
        return "none"
    return f"{value:.6g}" if math.isfinite(value) else str(value)


def _seconds(value: object) -> str | None:
    """A duration from the run metadata as the schema's decimal, or None when there is none."""
    if isinstance(value, (int, float)) and math.isfinite(value) and value >= 0:
        return f"{value:.3f}"
    return None


def _details(finding: Finding) -> str:
    """The numbers behind a verdict, one per line, for the body of a ``failure`` or ``system-out``."""
    effect = finding.effect
    where = "" if finding.scheme is None else f"table: {finding.table} ({finding.buckets} buckets)\n"
    return (
        f"{finding.message}\n"
        f"verdict: {finding.verdict} ({finding.direction})\n"
        f"{where}"
        f"keys: {finding.keys}\n"
        f"statistic: {_number(finding.statistic)} (expected {_number(finding.expected)}, "
        f"observed {_number(finding.observed)}; {finding.method})\n"
        f"p-value: {_number(finding.p_value)} (Holm-adjusted {_number(finding.p_adjusted)})\n"
        f"effect: {effect.name} = {_number(effect.value)}, threshold {_number(finding.threshold)} "
        f"({_number(effect.observed)} against {_number(effect.ideal)} {effect.unit})\n"
    )


def _suite(parent: ET.Element, name: str, tests: int, failures: int, seconds: str | None) -> ET.Element:
    attributes = {"name": _text(name), "tests": str(tests), "failures": str(failures), "errors": "0", "skipped": "0"}
    if seconds is not None:
        attributes["time"] = seconds
    return ET.SubElement(parent, "testsuite", attributes)


def _case(parent: ET.Element, classname: str, name: str) -> ET.Element:
    return ET.SubElement(parent, "testcase", {"classname": _text(classname), "name": _text(name)})


def _hash_suite(root: ET.Element, audit: HashAudit, seconds: str | None) -> int:
    """Add the suite of one hash function; return its number of failures."""
    failures = sum(1 for f in audit.findings if f.verdict == "fail")
    suite = _suite(root, f"hashaudit.{audit.name}", len(audit.findings), failures, seconds)
    properties = ET.SubElement(suite, "properties")
    for key, value in (
        ("width", audit.width),
        ("seeded", str(audit.seeded).lower()),
        ("seed", audit.seed if audit.seeded else "none"),
        ("path", audit.path),
        ("verdict", audit.verdict),
    ):
        ET.SubElement(properties, "property", {"name": key, "value": _text(value)})
    for finding in audit.findings:
        case = _case(suite, f"hashaudit.{audit.name}", f"{finding.check} [{finding.table}]")
        if finding.verdict == "fail":
            failure = ET.SubElement(case, "failure", {"message": _text(finding.message), "type": _text(finding.check)})
            failure.text = _text(_details(finding))
        else:
            ET.SubElement(case, "system-out").text = _text(_details(finding))
    return failures


def _baseline_suite(root: ET.Element, comparison: list[dict]) -> int:
    """Add the suite of the baseline comparison; return its number of failures (regressed rows)."""
    failures = sum(1 for row in comparison if row.get("regressed"))
    suite = _suite(root, BASELINE_SUITE, len(comparison), failures, None)
    for row in comparison:
        case = _case(
            suite, f"{BASELINE_SUITE}.{row.get('hash', '')}", f"{row.get('check', '')} [{row.get('table', '')}]"
        )
        body = (
            f"{row.get('reason', '')}\n"
            f"verdict: {row.get('old_verdict') or 'none'} -> {row.get('new_verdict', '')}\n"
            f"effect: {_number(row.get('old_effect'))} -> {_number(row.get('new_effect'))}\n"
        )
        if row.get("regressed"):
            failure = ET.SubElement(case, "failure", {"message": _text(row.get("reason", "")), "type": "regression"})
            failure.text = _text(body)
        else:
            ET.SubElement(case, "system-out").text = _text(body)
    return failures


def render_junit(result: AuditResult, *, comparison: list[dict] | None = None) -> str:
    """The audit as a JUnit XML document.

    Parameters
    ----------
    result : AuditResult
        The audit to render; nothing is recomputed.
    comparison : list of dict, optional
        Rows of a comparison with a baseline report, each with ``hash``, ``check``, ``table``, ``old_verdict``,
        ``new_verdict``, ``old_effect``, ``new_effect``, ``regressed`` and ``reason``; they form the extra
        ``baseline`` test suite, where every regressed row is a failing test case (type ``regression``).

    Returns
    -------
    str
        The document with its XML declaration (UTF-8 when encoded). ``tests`` and ``failures`` of every suite and
        of the ``testsuites`` root count its test cases and ``failure`` elements; ``errors`` and ``skipped`` are 0.
        Suite times come from the run metadata (``run["hash_seconds"]``, ``run["seconds"]``) when present.

    References
    ----------
    The element and attribute names follow the JUnit XML schema of the Jenkins xUnit plugin (``junit-10.xsd``),
    shipped as ``hashaudit/report/schema/junit.xsd``.
    """
    root = ET.Element("testsuites", {"name": "hashaudit"})
    hash_seconds = result.run.get("hash_seconds") or {}
    tests = failures = 0
    for audit in result.hashes:
        failures += _hash_suite(root, audit, _seconds(hash_seconds.get(audit.name)))
        tests += len(audit.findings)
    if comparison is not None:
        failures += _baseline_suite(root, comparison)
        tests += len(comparison)
    root.set("tests", str(tests))
    root.set("failures", str(failures))
    root.set("errors", "0")
    total_seconds = _seconds(result.run.get("seconds"))
    if total_seconds is not None:
        root.set("time", total_seconds)
    ET.indent(root, space="  ")
    return ET.tostring(root, encoding="utf-8", xml_declaration=True).decode("utf-8") + "\n"
