"""The Markdown report, sized for a CI job summary or a pull-request comment.

Two levels of detail. ``summary`` (the default) fits a comment (GitHub's limit is 65,536 characters; the summary aims
at :data:`SUMMARY_BYTES`): a title line with the verdict, one summary paragraph, a table of the hash functions and
their verdicts, with two or more of them their ranking (best first, with each kernel's speed on the sampled keys),
then for each hash that failed or warned a table of its tables, one row per table with the finding that speaks for
it and the table's other failing and warning checks named, so that every fail and warn is listed; against a
baseline, only the checks that regressed, are new or are no longer run. ``full`` adds nothing to be skipped: a
table of the failing and warning checks, every check in a collapsible ``<details>`` block, the whole "Against the
baseline" table. Both end with a caution paragraph. Every piece of interpolated text is escaped for
GitHub-flavoured Markdown tables and for the HTML that comment renderers allow.
The report shows no key: ``Finding.details`` (where ``--show-keys`` puts sample keys) is never rendered.
"""

from __future__ import annotations

import math
import re

from hashaudit.report.terminal import (
    HASH_FLOODING_NOTE,
    findings_by_table,
    ranking_cells,
    speaking_finding,
    speed_note,
)
from hashaudit.verdict.findings import Finding
from hashaudit.verdict.result import AuditResult
from hashaudit.verdict.words import count

DETAILS = ("summary", "full")
"""The Markdown report's levels of detail (``--markdown-detail``)."""
SUMMARY_BYTES = 20_000
"""What the summary aims to stay under; past it, its rows leave out the sentences (the checks stay named)."""
_VERDICTS = ("fail", "warn", "info", "pass")
_HASH_HEADER = ("Hash", "Width", "Verdict", "Fail", "Warn", "Info", "Pass")
_RANKING_HEADER = (
    "#",
    "Verdict",
    "Hash",
    "Extra probes/lookup",
    "Hottest/expected",
    "Failing groups",
    "Keys/s",
    "ns/key",
)
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
        keys = f"{count(read, 'key', exact=True)} read{origin}, every occurrence counted"
    else:
        keys = f"{count(read, 'key', exact=True)} read{origin}, {result.keys:,} distinct"
    hashes = ", ".join(f"{escape(h.name, in_table=False)} ({h.verdict})" for h in result.hashes)
    tally = ", ".join(f"{counts[v]} {v}" for v in _VERDICTS)
    alpha = result.settings.get("thresholds", {}).get("alpha")
    family = (
        f" A check fails only when it is significant at family-wise alpha {alpha} (Holm) and its effect exceeds the threshold."
        if alpha is not None
        else ""
    )
    return f"{keys}. {count(len(result.hashes), 'hash function')}: {hashes}. Checks: {tally}.{family}"


def _baseline(comparison: list[dict], *, changed_only: bool = False) -> list[str]:
    """The "Against the baseline" table; with ``changed_only``, only the checks that regressed, are new or are no
    longer checked, the unchanged ones counted."""
    regressed = sum(1 for row in comparison if row.get("regressed"))
    shown = (
        [r for r in comparison if r.get("regressed") or r.get("reason") != "unchanged"] if changed_only else comparison
    )
    said = f"{regressed} of {count(len(comparison), 'compared check')} regressed."
    if len(shown) < len(comparison):
        said += f" {count(len(comparison) - len(shown), 'unchanged check')} not shown (the full report lists them)."
    lines = ["### Against the baseline", "", said]
    if not shown:
        return lines
    lines.append("")
    rows = []
    for row in shown:
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


def _hash_rows(result: AuditResult) -> list[list[str]]:
    rows = []
    for h in result.hashes:
        tally = [str(sum(1 for f in h.findings if f.verdict == v)) for v in _VERDICTS]
        verdict = f"**{h.verdict.upper()}**" if h.verdict == "fail" else h.verdict.upper()
        rows.append([escape(h.name), f"{h.width}-bit", verdict, *tally])
    return rows


def _ranking(result: AuditResult) -> list[str]:
    """The ranking of two or more hash functions, best first, with where its costs and speeds come from."""
    ranking = result.ranking
    if not ranking:
        return []
    rows = []
    for i, row in enumerate(ranking, 1):
        verdict = f"**{row.verdict.upper()}**" if row.verdict == "fail" else row.verdict.upper()
        rows.append([str(i), verdict, escape(row.hash_name), *(escape(cell) for cell in ranking_cells(row))])
    note = speed_note(result).replace("\n", " ") or "speed: not measured (no check kept a key sample)"
    said = (
        "Best first: by verdict, then the most extra probes per lookup and the hottest bucket or shard over its "
        "expected load, each only where a check found it significant (with the table it was measured on), then "
        f"speed. {note[0].upper()}{note[1:]}."
    )
    return ["### Ranking", "", *_table(_RANKING_HEADER, rows), "", escape(said, in_table=False), ""]


def _also(speaker: Finding, members: list[Finding]) -> str:
    """The table's other failing and warning checks, by verdict (``fail: g_test; warn: max_load``)."""
    parts = []
    for verdict in ("fail", "warn"):
        names = [escape(f.check) for f in members if f is not speaker and f.verdict == verdict]
        if names:
            parts.append(f"{verdict}: {', '.join(names)}")
    return "; ".join(parts) or "—"


def _per_hash(result: AuditResult, sentences: bool) -> list[str]:
    """For each hash that failed or warned, a table of its tables that did, one row per table."""
    groups = [(v, m) for v, m in findings_by_table(result.findings) if v in ("fail", "warn")]
    header = ("Table", "Verdict", "Check", "Finding", "Also") if sentences else ("Table", "Verdict", "Check", "Also")
    lines = []
    for h in result.hashes:
        mine = [(v, m) for v, m in groups if m[0].hash_name == h.name]
        if not mine:
            continue
        tally = ", ".join(f"{n} {v}" for v in ("fail", "warn") if (n := sum(1 for f in h.findings if f.verdict == v)))
        lines += [f"### {escape(h.name, in_table=False)}: {h.verdict.upper()} ({tally})", ""]
        rows = []
        for verdict, members in mine:
            speaker = speaking_finding(verdict, members)
            cells = [
                escape(speaker.table),
                f"**{verdict.upper()}**" if verdict == "fail" else verdict.upper(),
                escape(speaker.check),
            ]
            if sentences:
                cells.append(escape(speaker.message))
            rows.append([*cells, _also(speaker, members)])
        lines += _table(header, rows)
        info = sum(1 for f in h.findings if f.verdict == "info")
        if info:
            lines += [
                "",
                f"{count(info, 'info finding')} (more even than random, or facts about the keys): in the full report.",
            ]
        lines.append("")
    return lines


def _summary_report(
    result: AuditResult, counts: dict[str, int], comparison: list[dict] | None, sentences: bool
) -> list[str]:
    lines = [f"## hashaudit: {result.verdict.upper()}", "", _summary(result, counts), ""]
    lines += _table(_HASH_HEADER, _hash_rows(result))
    lines.append("")
    lines += _ranking(result)
    flagged = counts["fail"] + counts["warn"]
    if flagged:
        lines.append(
            f"Every failing and warning check is named below, one row per table: the check that speaks for the table "
            f"and its sentence{'' if sentences else ' (left out to fit a comment)'}, then the table's other failing "
            "and warning checks. The full report (`--markdown-detail full`) has every check with its effect."
        )
        lines.append("")
        lines += _per_hash(result, sentences)
    else:
        lines += ["No check failed or warned.", ""]
    if comparison is not None:
        lines.extend(_baseline(comparison, changed_only=True))
        lines.append("")
    return lines


def _full_report(result: AuditResult, counts: dict[str, int], comparison: list[dict] | None) -> list[str]:
    findings = result.findings
    lines = [f"## hashaudit: {result.verdict.upper()}", "", _summary(result, counts), ""]
    lines += _ranking(result)
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
    lines.append(f"<summary>All {count(len(findings), 'check')}</summary>")
    lines.append("")
    lines.extend(_table(_FINDING_HEADER, [_finding_row(f) for f in findings]))
    lines.append("")
    lines.append("</details>")
    lines.append("")
    return lines


def render_markdown(result: AuditResult, *, comparison: list[dict] | None = None, detail: str = "summary") -> str:
    """The audit as GitHub-flavoured Markdown for a CI job summary or a pull-request comment.

    Parameters
    ----------
    result : AuditResult
        The audit to render; nothing is recomputed.
    comparison : list of dict, optional
        Rows of a comparison with a baseline report, each with ``hash``, ``check``, ``table``, ``old_verdict``
        (None for a check the baseline lacks), ``new_verdict``, ``old_effect``, ``new_effect``, ``regressed`` and
        ``reason``; rendered as an extra "Against the baseline" table in the given order (the summary shows the rows
        that regressed, are new or are no longer checked).
    detail : {"summary", "full"}
        ``summary`` fits a pull-request comment (every failing and warning check named, a table per hash that
        failed or warned); ``full`` lists every check with its effect and sentence.

    Returns
    -------
    str
        Markdown text ending with a newline. Interpolated text is escaped (``|``, backslashes, emphasis and link
        characters, line breaks; ``<``, ``>``, ``&`` and backticks as HTML entities); keys are never shown.
    """
    if detail not in DETAILS:
        raise ValueError(f"no Markdown detail {detail!r} (known: {', '.join(DETAILS)})")
    counts = {v: sum(1 for f in result.findings if f.verdict == v) for v in _VERDICTS}
    caution = ["> **Caution:** " + escape(HASH_FLOODING_NOTE.removeprefix("Note: "), in_table=False)]
    if detail == "full":
        return "\n".join(_full_report(result, counts, comparison) + caution) + "\n"
    text = "\n".join(_summary_report(result, counts, comparison, sentences=True) + caution) + "\n"
    if len(text.encode("utf-8")) > SUMMARY_BYTES:
        text = "\n".join(_summary_report(result, counts, comparison, sentences=False) + caution) + "\n"
    return text
