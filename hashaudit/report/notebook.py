"""An audit shown in a notebook: a compact HTML fragment (``AuditResult._repr_html_``), not the full page.

The fragment holds the overall verdict, the counts of every verdict, the worst findings in plain words and, per
hash function, a table of its checks with how many of each check's tables came out with each verdict. It reuses
the page's escaping, number formatting and verdict badges (``hashaudit.report.page``), carries a small stylesheet
scoped to its own ``div`` so the notebook's look is left alone, and holds no script.

Privacy: no key appears, whatever the result holds (keys collected for full-value collision groups with
``show_keys`` stay out of the fragment: it never reads a finding's ``details``); a password in a source URL is
masked; every value goes through ``html.escape``.
"""

from __future__ import annotations

from hashaudit.report.page import badge, esc, mask_url_passwords, num
from hashaudit.verdict.findings import VERDICT_ORDER
from hashaudit.verdict.result import AuditResult, HashAudit

__all__ = ["WORST_SHOWN", "render_fragment"]

WORST_SHOWN = 5
"""Findings that did not pass listed by name at most; the rest are counted."""

_VERDICTS = tuple(VERDICT_ORDER)  # fail, warn, info, pass

_STYLE = """
.hashaudit-result { font-size: 0.92em; line-height: 1.4; }
.hashaudit-result .verdict { display: inline-block; padding: 0 .4em; border-radius: 3px; font-weight: 700;
  white-space: nowrap; font-size: .85em; }
.hashaudit-result .verdict .sym { display: inline-block; width: 1.1em; text-align: center; }
.hashaudit-result .v-fail { color: #8c1010; background: #fde3e1; border: 2px solid #8c1010; }
.hashaudit-result .v-warn { color: #6b4200; background: #fff1c9; border: 2px dashed #6b4200; }
.hashaudit-result .v-info { color: #0b4f8a; background: #e4f0fb; border: 1px dotted #0b4f8a; }
.hashaudit-result .v-pass { color: #1d5c2a; background: #e4f4e7; border: 1px solid #8fbf99; }
.hashaudit-result table { border-collapse: collapse; margin: .3rem 0 .8rem; }
.hashaudit-result caption { text-align: left; font-weight: 600; padding: .2rem 0; }
.hashaudit-result th, .hashaudit-result td { padding: .1rem .6rem; text-align: left; }
.hashaudit-result td.num, .hashaudit-result th.num { text-align: right; font-variant-numeric: tabular-nums; }
.hashaudit-result td.zero { opacity: .45; }
"""


def render_fragment(result: AuditResult, *, worst: int = WORST_SHOWN) -> str:
    """The audit as an HTML fragment for a notebook cell's output.

    Parameters
    ----------
    result : AuditResult
        What :func:`hashaudit.audit` returned.
    worst : int
        How many findings that did not pass to list, worst first.

    Returns
    -------
    str
        One ``<div class="hashaudit-result">`` with a scoped ``<style>``, no script and no key.
    """
    findings = result.findings
    counts = {v: 0 for v in _VERDICTS}
    for f in findings:
        counts[f.verdict] = counts.get(f.verdict, 0) + 1
    alpha = (result.settings.get("thresholds") or {}).get("alpha")
    tally = ", ".join(f"{num(counts[v])} {v}" for v in _VERDICTS)
    parts = [
        f'<div class="hashaudit-result"><style>{_STYLE}</style>',
        f"<p><strong>hashaudit</strong> verdict {badge(result.verdict)} — {esc(_counted(result))} {_sources(result)}</p>",
        f"<p>Checks: {esc(tally)}" + (f"; family-wise alpha {esc(num(alpha))}" if alpha is not None else "") + ".</p>",
        _worst_list(result, worst),
    ]
    parts.extend(_hash_table(audit) for audit in result.hashes)
    parts.append(
        "<p>Every finding, one row each: <code>result.to_dataframe()</code>; the full report: "
        "<code>hashaudit.report.html.render_html(result)</code>.</p></div>"
    )
    return "".join(parts)


def _counted(result: AuditResult) -> str:
    """How many keys the checks counted, and the repeats they did not."""
    if result.repeated_keys:
        return f"{num(result.keys)} distinct keys ({num(result.keys_read)} read)"
    return f"{num(result.keys)} key{'' if result.keys == 1 else 's'}"


def _sources(result: AuditResult) -> str:
    """The sources by name (passwords masked), escaped."""
    names = [mask_url_passwords(str(s.get("source", "?"))) for s in result.sources]
    if not names:
        return "passed in directly"
    return "from " + ", ".join(f"<code>{esc(name)}</code>" for name in names)


def _worst_list(result: AuditResult, limit: int) -> str:
    """The findings that did not pass, worst first, each in plain words."""
    departed = [f for f in result.findings if f.verdict != "pass"]
    if not departed:
        return "<p>Every check is consistent with uniform hashing on these keys.</p>"
    items = "".join(
        f"<li>{badge(f.verdict)} <code>{esc(f.hash_name)}</code> {esc(f.table)} <code>{esc(f.check)}</code>: "
        f"{esc(f.message)}</li>"
        for f in departed[:limit]
    )
    more = len(departed) - limit
    rest = f"<p>… and {esc(num(more))} more that did not pass.</p>" if more > 0 else ""
    return f"<p><strong>Worst findings</strong></p><ol>{items}</ol>{rest}"


def _hash_table(audit: HashAudit) -> str:
    """One hash function's checks, each with how many of its tables came out with each verdict."""
    per_check: dict[str, dict[str, int]] = {}
    for f in audit.findings:
        row = per_check.setdefault(f.check, {v: 0 for v in _VERDICTS})
        row[f.verdict] = row.get(f.verdict, 0) + 1
    head = "".join(f'<th class="num">{esc(v)}</th>' for v in _VERDICTS)
    rows = "".join(
        f"<tr><td><code>{esc(check)}</code></td>"
        + "".join(f'<td class="num{" zero" if not row[v] else ""}">{esc(num(row[v]))}</td>' for v in _VERDICTS)
        + "</tr>"
        for check, row in per_check.items()
    )
    body = rows or f'<tr><td colspan="{len(_VERDICTS) + 1}">no check ran</td></tr>'
    return (
        f"<table><caption>{badge(audit.verdict)} <code>{esc(audit.name)}</code> "
        f"({esc(audit.width)}-bit, {esc(audit.path)})</caption>"
        f"<thead><tr><th>check</th>{head}</tr></thead><tbody>{body}</tbody></table>"
    )
