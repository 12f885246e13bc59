"""A JSON report compared with an earlier one, its baseline, check by check.

A baseline is an earlier JSON report. Checks are matched by hash, check name and table (scheme and size, table
kind, shard scheme and count); a check regresses when its verdict got worse (pass → warn → fail) or its effect grew
by more than the tolerance, even when it still passes on its own. Checks that only state facts about the keys
(the registry's facts-only checks) regress on their verdict alone: their effect measures the keys, not the hash.

The rows of :func:`compare` go into every report of ``hashaudit gate`` (the JSON report's ``baseline`` block, a
Markdown table, a JUnit test suite) and, through :func:`comparison_text`, onto the terminal.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass

from hashaudit.checks import FACTS_ONLY
from hashaudit.errors import UsageError
from hashaudit.verdict.findings import table_label
from hashaudit.verdict.words import count

VERDICT_RANK = {"pass": 0, "info": 0, "warn": 1, "fail": 2}
DEFAULT_TOLERANCE = 0.05


@dataclass(frozen=True)
class Comparison:
    """A report compared with its baseline: the baseline file and the rows :func:`compare` returned."""

    file: str
    rows: list[dict]

    @property
    def regressed(self) -> bool:
        """Whether any compared check regressed."""
        return any(row["regressed"] for row in self.rows)

    def to_dict(self) -> dict:
        """The ``baseline`` block of the JSON report: the file, whether anything regressed, and the rows."""
        return {"file": self.file, "regressed": self.regressed, "checks": self.rows}


def _identity(check: dict, hash_name: str) -> tuple:
    """What matches a check of one report with the same check of the other."""
    return (
        hash_name,
        check["name"],
        check.get("scheme"),
        check.get("buckets"),
        check.get("table_kind"),
        check.get("shard_scheme"),
        check.get("shards"),
    )


def _label(check: dict) -> str:
    """The table a check of a JSON report ran on, e.g. ``linear mask 2^16`` or ``mod 8 shards``."""
    parts = []
    if check.get("table_kind"):
        parts.append(check["table_kind"])
    if check.get("shard_scheme"):
        parts.append(f"{check['shard_scheme']} {check['shards']} shards")
    elif check.get("scheme"):
        parts.append(table_label(check["scheme"], check["buckets"]))
    return " ".join(parts) or "full value"


def compare(new: dict, old: dict, tolerance: float) -> list[dict]:
    """Compare two JSON reports check by check.

    Parameters
    ----------
    new : dict
        Today's report, as :func:`hashaudit.report.json_report.report_dict` returns it.
    old : dict
        The baseline report, as :func:`read_baseline` returns it.
    tolerance : float
        How much a check's effect may grow before the check counts as regressed.

    Returns
    -------
    list of dict
        One row per check of either report, with ``hash``, ``check``, ``table``, ``old_verdict``,
        ``new_verdict``, ``old_effect``, ``new_effect``, ``regressed`` and ``reason``; regressions first, then by
        hash, check and table. A check only one report has is a row with None on the other side.

    Raises
    ------
    UsageError
        When the two reports have different schemas.
    """
    if old.get("schema") != new.get("schema"):
        raise UsageError(f"the baseline's schema is {old.get('schema')!r}, not {new.get('schema')!r}")
    before = {_identity(c, h["name"]): c for h in old.get("hashes", []) for c in h.get("checks", [])}
    rows = []
    for h in new.get("hashes", []):
        for check in h.get("checks", []):
            key = _identity(check, h["name"])
            previous = before.pop(key, None)
            new_effect = (check.get("effect") or {}).get("value")
            row = {
                "hash": h["name"],
                "check": check["name"],
                "table": _label(check),
                "old_verdict": None,
                "new_verdict": check["verdict"],
                "old_effect": None,
                "new_effect": new_effect,
                "regressed": False,
                "reason": "new check",
            }
            if previous is not None:
                old_effect = (previous.get("effect") or {}).get("value")
                row.update(old_verdict=previous["verdict"], old_effect=old_effect, reason="unchanged")
                worse = VERDICT_RANK[check["verdict"]] > VERDICT_RANK[previous["verdict"]]
                numbers = isinstance(new_effect, int | float) and isinstance(old_effect, int | float)
                growth = float(new_effect) - float(old_effect) if numbers else math.nan  # type: ignore[arg-type]
                grew = (
                    math.isfinite(growth)
                    and growth > tolerance
                    and check["name"] not in FACTS_ONLY  # their effect measures the keys, not the hash
                )
                if worse:
                    row.update(regressed=True, reason=f"verdict {previous['verdict']} → {check['verdict']}")
                elif grew:
                    row.update(
                        regressed=True,
                        reason=f"effect grew by {growth:.4g}, more than the tolerance {tolerance:g}",
                    )
            rows.append(row)
    for key, check in before.items():
        rows.append(
            {
                "hash": key[0],
                "check": check["name"],
                "table": _label(check),
                "old_verdict": check["verdict"],
                "new_verdict": None,
                "old_effect": (check.get("effect") or {}).get("value"),
                "new_effect": None,
                "regressed": False,
                "reason": "no longer checked",
            }
        )
    rows.sort(key=lambda r: (not r["regressed"], r["hash"], r["check"], r["table"]))
    return rows


MAX_BASELINE_BYTES = 1 << 30  # far above any report; a bigger "report" is not one


def read_baseline(path: str) -> dict:
    """Read an earlier JSON report and check its shape.

    Parameters
    ----------
    path : str
        The report's file: a regular file (not a device or a pipe, which may never end).

    Returns
    -------
    dict
        The report as JSON data, with the fields the comparison reads checked.

    Raises
    ------
    UsageError
        One line, when the file is missing, not a regular file, too big, not JSON, or not shaped like a report.
    """
    import os
    import stat

    try:
        info = os.stat(path)
    except FileNotFoundError:
        raise UsageError(f"baseline {path!r}: no such file") from None
    except OSError as exc:
        raise UsageError(f"baseline {path!r}: cannot be read ({exc.strerror or exc})") from None
    if not stat.S_ISREG(info.st_mode):
        raise UsageError(f"baseline {path!r}: not a regular file")
    if info.st_size > MAX_BASELINE_BYTES:
        raise UsageError(f"baseline {path!r}: {info.st_size:,} bytes is not a report")
    try:
        with open(path, encoding="utf-8") as f:
            document = json.load(f)
    except (OSError, ValueError) as exc:
        raise UsageError(f"baseline {path!r}: not a JSON report ({exc})") from None
    problem = _shape_problem(document)
    if problem:
        raise UsageError(f"baseline {path!r}: not a hashaudit report ({problem})")
    return document


def _shape_problem(document: object) -> str | None:
    """What keeps ``document`` from being compared as a report (None when nothing)."""
    if not isinstance(document, dict):
        return "not a JSON object"
    if not str(document.get("schema", "")).startswith("hashaudit.audit/"):
        return "no 'schema' of hashaudit.audit/…"
    hashes = document.get("hashes")
    if not isinstance(hashes, list):
        return "'hashes' is not a list"
    for i, entry in enumerate(hashes):
        if not isinstance(entry, dict) or not isinstance(entry.get("name"), str):
            return f"hashes[{i}] has no name"
        checks = entry.get("checks")
        if not isinstance(checks, list):
            return f"hashes[{i}].checks is not a list"
        for j, check in enumerate(checks):
            if not isinstance(check, dict) or not isinstance(check.get("name"), str):
                return f"hashes[{i}].checks[{j}] has no name"
            if check.get("verdict") not in VERDICT_RANK:
                return f"hashes[{i}].checks[{j}] has no verdict of {', '.join(VERDICT_RANK)}"
            for key in ("scheme", "table_kind", "shard_scheme"):
                if check.get(key) is not None and not isinstance(check[key], str):
                    return f"hashes[{i}].checks[{j}].{key} is not a string"
            for key in ("buckets", "shards"):
                value = check.get(key)
                if value is not None and (isinstance(value, bool) or not isinstance(value, int)):
                    return f"hashes[{i}].checks[{j}].{key} is not an integer"
            effect = check.get("effect")
            if effect is not None and not isinstance(effect, dict):
                return f"hashes[{i}].checks[{j}].effect is not an object"
    return None


def comparison_text(rows: list[dict]) -> str:
    """The comparison for the terminal.

    Parameters
    ----------
    rows : list of dict
        What :func:`compare` returned.

    Returns
    -------
    str
        A count of regressed and unchanged checks, then one line per check that regressed, is new or is no longer
        checked, old and new side by side; no trailing newline.
    """

    def effect(x: float | None) -> str:
        return "—" if x is None else f"{x:.4g}"

    shown = [r for r in rows if r["regressed"] or r["reason"] not in ("unchanged",)]
    lines = [
        f"against the baseline: {count(len(rows), 'check')} compared, {sum(r['regressed'] for r in rows)} "
        f"regressed, {sum(r['reason'] == 'unchanged' for r in rows)} unchanged"
    ]
    for r in shown:
        tag = "REGRESSED" if r["regressed"] else "note     "
        lines.append(
            f"  {tag} {r['hash']:<12} {r['check']:<22} {r['table']:<22} "
            f"{r['old_verdict'] or '—':>5} → {r['new_verdict'] or '—':<5}  effect {effect(r['old_effect'])} → "
            f"{effect(r['new_effect'])}  ({r['reason']})"
        )
    return "\n".join(lines)
