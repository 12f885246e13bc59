"""The terminal report: a ranked table, worst findings first, each with its plain-language sentence."""

from __future__ import annotations

import click

from hashaudit.verdict.result import AuditResult

_COLOURS = {"fail": "red", "warn": "yellow", "info": "cyan", "pass": "green"}
HASH_FLOODING_NOTE = (
    "Note: these are statistics on these keys, not a security property. A non-cryptographic hash that passes\n"
    "every check can still be attacked with crafted keys (hash flooding); for keys an adversary controls, use\n"
    "a keyed hash with a secret seed (e.g. siphash24), as your security policy requires."
)


def _tag(verdict: str, colour: bool) -> str:
    text = f"{verdict.upper():<4}"
    return click.style(text, fg=_COLOURS[verdict], bold=verdict == "fail") if colour else text


def render(result: AuditResult, *, show_all: bool = False, colour: bool = False) -> str:
    """The report as text. Passing findings are summarised per hash unless ``show_all``."""
    lines = []
    counts = {v: 0 for v in ("fail", "warn", "info", "pass")}
    for f in result.findings:
        counts[f.verdict] += 1
    sources = ", ".join(str(s.get("source", "?")) for s in result.sources) or "(batches)"
    lines.append(
        f"hashaudit: {result.keys:,} keys from {sources}; {len(result.hashes)} hash functions, "
        f"{len(result.settings.get('tables', []))} tables each"
    )
    lines.append(
        f"verdict: {_tag(result.verdict, colour).strip()}   "
        f"({counts['fail']} fail, {counts['warn']} warn, {counts['info']} info, {counts['pass']} pass; "
        f"family-wise alpha {result.settings['thresholds']['alpha']})"
    )
    lines.append("")
    shown = [f for f in result.findings if show_all or f.verdict != "pass"]
    if shown:
        width_hash = max(len(f.hash_name) for f in shown)
        width_table = max(len(f.table) for f in shown)
        width_check = max(len(f.check) for f in shown)
        for f in shown:
            lines.append(
                f"{_tag(f.verdict, colour)}  {f.hash_name:<{width_hash}}  {f.table:<{width_table}}  "
                f"{f.check:<{width_check}}  {f.message}"
            )
        lines.append("")
    for h in result.hashes:
        passed = sum(1 for f in h.findings if f.verdict == "pass")
        lines.append(
            f"  {_tag(h.verdict, colour)}  {h.name:<14} {h.width:>3}-bit  {h.path:<7}  "
            f"{passed}/{len(h.findings)} checks pass"
        )
    lines.append("")
    lines.append(HASH_FLOODING_NOTE)
    return "\n".join(lines)
