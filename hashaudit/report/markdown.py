"""The Markdown report, sized for a CI job summary or a pull-request comment.

Layout: a title line with the verdict, one summary paragraph, a table of the failing and warning checks, every check
in a collapsible ``<details>`` block, an optional "Against the baseline" table, and a caution paragraph. Every piece
of interpolated text is escaped for GitHub-flavoured Markdown tables and for the HTML that comment renderers allow.
The report shows no key: ``Finding.details`` (where ``--show-keys`` puts sample keys) is never rendered.
"""

from __future__ import annotations

import math
import re

from hashaudit.report.terminal import HASH_FLOODING_NOTE
from hashaudit.verdict.findings import Finding
from hashaudit.verdict.result import AuditResult

_VERDICTS = ("fail", "warn", "info", "pass")
_FINDING_HEADER = ("Hash", "Check", "Table", "Verdict", "Effect", "Message")
_BASELINE_HEADER = (
    "Hash",
    "Check",
    "Table",
    "Old verdict",
    "New verdict",
    "Old effect",
    "New effect",
    "Regressed",
    "Reason",
)
_NEWLINES = re.compile(r"\r\n|\r|\n")
# HTML first (a comment renders raw HTML), then the characters Markdown reads as syntax inside a table cell:
# '|' splits cells, '\' would undo our own escapes, '*' '_' '~' emphasise, '[' ']' link, '@' mentions a user.
_ENTITIES = {"&": "&amp;", "<": "&lt;", ">": "&gt;", "`": "&#96;"}
_BACKSLASHED = frozenset("\\|*_~[]@")


def escape(text: object, *, in_table: bool = True) -> str:
    """Text made inert for a Markdown table cell (line breaks become ``<br>``) or, with ``in_table=False``, for a
    paragraph (line breaks become spaces)."""
    out = []
    for char in str(text):
        if char in _ENTITIES:
            out.append(_ENTITIES[char])
        elif char in _BACKSLASHED:
            out.append("\\" + char)
        else:
            out.append(char)
    return _NEWLINES.sub("<br>" if in_table else " ", "".join(out))


def _number(value: float | None) -> str:
    """A compact number for a table cell; an em dash when there is none."""
    if value is None:
        return "—"
    if not math.isfinite(value):
        return "∞" if value > 0 else ("−∞" if value < 0 else "n/a")
    return f"{value:,.0f}" if abs(value) >= 1000 else f"{value:.3g}"


def _row(cells: tuple[str, ...] | list[str]) -> str:
    return "| " + " | ".join(cells) + " |"


def _table(header: tuple[str, ...], rows: list[list[str]]) -> list[str]:
    return [_row(header), _row(["---"] * len(header)), *(_row(r) for r in rows)]


def _effect(finding: Finding) -> str:
    return f"{_number(finding.effect.value)} {escape(finding.effect.name)} (threshold {_number(finding.threshold)})"


def _finding_row(finding: Finding) -> list[str]:
    return [
        escape(finding.hash_name),
        escape(finding.check),
        escape(finding.table),
        f"**{finding.verdict.upper()}**" if finding.verdict == "fail" else finding.verdict.upper(),
        _effect(finding),
        escape(finding.message),
    ]


def _summary(result: AuditResult, counts: dict[str, int]) -> str:
    sources = [str(s.get("source", "?")) for s in result.sources]
    origin = f" from {', '.join(escape(s, in_table=False) for s in sources)}" if sources else ""
    read = result.keys_read if result.keys_read >= 0 else result.keys
    if result.settings.get("all_keys"):
        keys = f"{read:,} keys read{origin}, every occurrence counted"
    else:
        keys = f"{read:,} keys read{origin}, {result.keys:,} distinct"
    hashes = ", ".join(f"{escape(h.name, in_table=False)} ({h.verdict})" for h in result.hashes)
    tally = ", ".join(f"{counts[v]} {v}" for v in _VERDICTS)
    alpha = result.settings.get("thresholds", {}).get("alpha")
    family = (
        f" A check fails only when it is significant at family-wise alpha {alpha} (Holm) and its effect exceeds the threshold."
        if alpha is not None
        else ""
    )
    plural = "s" if len(result.hashes) != 1 else ""
    return f"{keys}. {len(result.hashes)} hash function{plural}: {hashes}. Checks: {tally}.{family}"


def _baseline(comparison: list[dict]) -> list[str]:
    regressed = sum(1 for row in comparison if row.get("regressed"))
    lines = ["### Against the baseline", ""]
    lines.append(f"{regressed} of {len(comparison)} compared checks regressed.")
    lines.append("")
    rows = []
    for row in comparison:
        old = row.get("old_verdict")
        rows.append(
            [
                escape(row.get("hash", "")),
                escape(row.get("check", "")),
                escape(row.get("table", "")),
                escape(old.upper()) if old else "—",
                escape(str(row.get("new_verdict", "")).upper()),
                _number(row.get("old_effect")),
                _number(row.get("new_effect")),
                "**yes**" if row.get("regressed") else "no",
                escape(row.get("reason", "")),
            ]
        )
    lines.extend(_table(_BASELINE_HEADER, rows))
    return lines


def render_markdown(result: AuditResult, *, comparison: list[dict] | None = None) -> str:
    """The audit as GitHub-flavoured Markdown for a CI job summary or a pull-request comment.

    Parameters
    ----------
    result : AuditResult
        The audit to render; nothing is recomputed.
    comparison : list of dict, optional
        Rows of a comparison with a baseline report, each with ``hash``, ``check``, ``table``, ``old_verdict``
        (None for a check the baseline lacks), ``new_verdict``, ``old_effect``, ``new_effect``, ``regressed`` and
        ``reason``; rendered as an extra "Against the baseline" table in the given order.

    Returns
    -------
    str
        Markdown text ending with a newline. Interpolated text is escaped (``|``, backslashes, emphasis and link
        characters, line breaks; ``<``, ``>``, ``&`` and backticks as HTML entities); keys are never shown.
    """
    findings = result.findings
    counts = {v: sum(1 for f in findings if f.verdict == v) for v in _VERDICTS}
    lines = [f"## hashaudit: {result.verdict.upper()}", "", _summary(result, counts), ""]
    flagged = [f for f in findings if f.verdict in ("fail", "warn")]
    if flagged:
        lines.append(f"### Failing and warning checks ({len(flagged)})")
        lines.append("")
        lines.extend(_table(_FINDING_HEADER, [_finding_row(f) for f in flagged]))
    else:
        lines.append("No check failed or warned.")
    lines.append("")
    if comparison is not None:
        lines.extend(_baseline(comparison))
        lines.append("")
    lines.append("<details>")
    lines.append(f"<summary>All {len(findings)} checks</summary>")
    lines.append("")
    lines.extend(_table(_FINDING_HEADER, [_finding_row(f) for f in findings]))
    lines.append("")
    lines.append("</details>")
    lines.append("")
    lines.append("> **Caution:** " + escape(HASH_FLOODING_NOTE.removeprefix("Note: "), in_table=False))
    return "\n".join(lines) + "\n"
