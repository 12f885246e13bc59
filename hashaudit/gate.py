"""``hashaudit gate``: an audit read from a TOML file, for a CI job to pass or fail, and the baseline comparison.

The file is ``hashaudit.toml`` (its top level), or the ``[tool.hashaudit]`` table of ``pyproject.toml``, or any file
given with ``--config``. Every key is listed in ``KNOWN``; an unknown key is an error that names the key and its
line, so a misspelt threshold never passes silently. Paths in the file are relative to the file's folder.

    seed = 0
    alpha = 0.01
    hashes = ["murmur3_32", "xxh3_64"]
    buckets = ["2^16", "2^20"]
    checks = ["buckets", "tables"]

    [[sources]]
    path = "keys/orders.txt"

    [thresholds]
    max_load_ratio = 1.25       # hottest bucket at most 1.25 times its expected maximum
    probe_cost_excess = 0.1     # lookups at most 10 % costlier than with an ideal hash

    [baseline]
    file = "reports/baseline.json"
    tolerance = 0.05            # an effect may grow by this much before it counts as a regression

A baseline is an earlier JSON report. Checks are matched by hash, check name and table (scheme and size, table
kind, shard scheme and count); a check regresses when its verdict got worse (pass → warn → fail) or its effect grew
by more than the tolerance, even when it still passes on its own.
"""

from __future__ import annotations

import json
import math
import re
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from hashaudit.errors import UsageError

SOURCE_KEYS = {
    "path": str,
    "format": str,
    "columns": list,
    "join": str,
    "field": str,
    "delimiter": str,
    "header": bool,
    "key_format": str,
    "keep_cr": bool,
    "skip_empty": bool,
    "raw_bytes": bool,
    "strip": bool,
    "lowercase": bool,
    "pattern": str,
    "weight": str,
    "integers": str,
    "query": str,
    "table": str,
    "driver": str,
    "on_bad_record": str,
}
TOP_KEYS = {
    "seed": int,
    "alpha": float,
    "hashes": list,
    "buckets": list,
    "schemes": list,
    "checks": list,
    "all_keys": bool,
    "distinct_memory": (int, str),
    "table_kinds": list,
    "loads": list,
    "table_slots": (int, str),
    "growth": list,
    "growth_start": (int, str),
    "tag_bits": (int, str),
    "shards": list,
    "shard_schemes": list,
    "vnodes": int,
    "shard_weights": list,
    "sources": list,
    "thresholds": dict,
    "baseline": dict,
    "reports": dict,
}
BASELINE_KEYS = {"file": str, "tolerance": float}
REPORT_KEYS = {"json": str, "markdown": str, "junit": str, "html": str}
VERDICT_RANK = {"pass": 0, "info": 0, "warn": 1, "fail": 2}
DEFAULT_TOLERANCE = 0.05


@dataclass
class GateConfig:
    """A gate read from TOML: the audit plan, the sources with their options, the baseline and the reports."""

    path: Path
    plan: Any
    sources: list[str]
    options: list[Any]
    baseline: str | None = None
    tolerance: float = DEFAULT_TOLERANCE
    reports: dict[str, str] = field(default_factory=dict)


def find_config(explicit: str | None) -> tuple[Path, dict, str]:
    """The config file, its table of hashaudit settings and its text."""
    if explicit:
        path = Path(explicit)
        if not path.is_file():
            raise UsageError(f"--config {explicit!r}: no such file")
    elif Path("hashaudit.toml").is_file():
        path = Path("hashaudit.toml")
    elif Path("pyproject.toml").is_file():
        path = Path("pyproject.toml")
    else:
        raise UsageError("no hashaudit.toml here (or [tool.hashaudit] in pyproject.toml); give --config FILE")
    text = path.read_text(encoding="utf-8")
    try:
        document = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise UsageError(f"{path}: not valid TOML: {exc}") from None
    if path.name == "pyproject.toml" and not explicit or "tool" in document and "hashaudit" in document["tool"]:
        table = document.get("tool", {}).get("hashaudit")
        if table is None:
            raise UsageError(f"{path}: no [tool.hashaudit] table")
        return path, table, text
    return path, document, text


def _line_of(text: str, key: str, section: str | None) -> int | None:
    """The line (1-based) where ``key`` is set, inside ``[section]`` when given (first match wins)."""
    current: str | None = None
    for number, line in enumerate(text.splitlines(), 1):
        header = re.match(r"\s*\[\[?\s*([^\]]+?)\s*\]\]?", line)
        if header:
            current = header.group(1)
            continue
        if re.match(rf"\s*\"?{re.escape(key)}\"?\s*=", line):
            if section is None or (current is not None and current.endswith(section)):
                return number
    return None


def _check_keys(table: dict, known: dict, text: str, path: Path, section: str | None) -> None:
    for key, value in table.items():
        where = f" in [{section}]" if section else ""
        line = _line_of(text, key, section)
        at = f"{path} line {line}" if line else str(path)
        if key not in known:
            raise UsageError(f"{at}: unknown key {key!r}{where} (known: {', '.join(sorted(known))})")
        kinds = known[key] if isinstance(known[key], tuple) else (known[key],)
        if known[key] is float and isinstance(value, int) and not isinstance(value, bool):
            continue
        if not isinstance(value, kinds) or (bool not in kinds and isinstance(value, bool)):
            names = " or ".join(k.__name__ for k in kinds)
            raise UsageError(f"{at}: {key!r}{where} must be {names}, not {type(value).__name__}")


def load_config(explicit: str | None) -> GateConfig:
    """Read and check the gate's TOML; raises ``UsageError`` naming the key and line of any mistake."""
    from hashaudit.engine.checks import parse_checks
    from hashaudit.engine.local import AuditPlan
    from hashaudit.keys.options import SourceOptions
    from hashaudit.stats.tags import parse_tag_bits
    from hashaudit.tables.growth import parse_growth
    from hashaudit.tables.sizes import parse_size
    from hashaudit.verdict.findings import Thresholds

    path, table, text = find_config(explicit)
    _check_keys(table, TOP_KEYS, text, path, None)
    known_thresholds = {name: float for name in Thresholds.effect_names()}
    _check_keys(table.get("thresholds", {}), known_thresholds, text, path, "thresholds")
    _check_keys(table.get("baseline", {}), BASELINE_KEYS, text, path, "baseline")
    _check_keys(table.get("reports", {}), REPORT_KEYS, text, path, "reports")
    if not table.get("sources"):
        raise UsageError(f"{path}: no [[sources]]; give at least one with a path")
    here = path.parent
    sources, options = [], []
    for entry in table["sources"]:
        if not isinstance(entry, dict):
            raise UsageError(f"{path}: every entry of sources must be a table ([[sources]])")
        _check_keys(entry, SOURCE_KEYS, text, path, "sources")
        if "path" not in entry:
            raise UsageError(f"{path}: a [[sources]] entry has no path")
        raw = entry["path"]
        remote = "://" in raw  # a database URL is not a path
        sources.append(raw if raw == "-" or remote else str(here / raw))
        settings = {k: v for k, v in entry.items() if k != "path"}
        if "columns" in settings:
            settings["columns"] = tuple(str(c) for c in settings["columns"])
        options.append(SourceOptions(**settings))
    thresholds = Thresholds(alpha=float(table.get("alpha", 0.01)), **table.get("thresholds", {}))
    checks_text = ",".join(table["checks"]) if "checks" in table else None
    groups = parse_checks(checks_text)
    tag_bits = parse_tag_bits(str(table["tag_bits"])) if "tag_bits" in table else None
    if tag_bits is not None and "tags" not in groups:
        groups = (*groups, "tags")
    if table.get("shards") and "shards" not in groups:
        groups = (*groups, "shards")
    start = parse_size(table.get("growth_start", 16))
    plan_settings: dict[str, Any] = {
        "buckets": tuple(parse_size(b) for b in table.get("buckets", [])),
        "schemes": tuple(table.get("schemes", [])),
        "seed": int(table.get("seed", 0)),
        "thresholds": thresholds,
        "distinct": not table.get("all_keys", False),
        "checks": groups,
        "tag_bits": tag_bits,
        "shards": tuple(int(n) for n in table.get("shards", [])),
        "shard_weights": tuple(float(w) for w in table.get("shard_weights", [])),
    }
    for name in ("table_kinds", "shard_schemes"):
        if name in table:
            plan_settings[name] = tuple(table[name])
    if "loads" in table:
        plan_settings["loads"] = tuple(float(x) for x in table["loads"])
    if "hashes" in table:
        plan_settings["hashes"] = tuple(table["hashes"])
    if "distinct_memory" in table:
        plan_settings["distinct_memory"] = parse_size(table["distinct_memory"])
    if "table_slots" in table:
        plan_settings["table_slots"] = parse_size(table["table_slots"])
    if "vnodes" in table:
        plan_settings["vnodes"] = int(table["vnodes"])
    if "growth" in table:
        plan_settings["growth"] = tuple(parse_growth(str(g), start) for g in table["growth"])
    plan = AuditPlan(**plan_settings)
    baseline = table.get("baseline", {})
    reports = {k: str(here / v) for k, v in table.get("reports", {}).items()}
    base_file = baseline.get("file")
    return GateConfig(
        path,
        plan,
        sources,
        options,
        str(here / base_file) if base_file else None,
        float(baseline.get("tolerance", DEFAULT_TOLERANCE)),
        reports,
    )


def _identity(check: dict, hash_name: str) -> tuple:
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
    parts = []
    if check.get("table_kind"):
        parts.append(check["table_kind"])
    if check.get("shard_scheme"):
        parts.append(f"{check['shard_scheme']} {check['shards']} shards")
    elif check.get("scheme"):
        b = check["buckets"]
        parts.append(f"{check['scheme']} 2^{b.bit_length() - 1}" if b & (b - 1) == 0 else f"{check['scheme']} {b}")
    return " ".join(parts) or "full value"


def compare(new: dict, old: dict, tolerance: float) -> list[dict]:
    """Rows comparing two JSON reports check by check (see the module notes); regressions first."""
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
                grew = (
                    isinstance(new_effect, int | float)
                    and isinstance(old_effect, int | float)
                    and math.isfinite(new_effect)
                    and math.isfinite(old_effect)
                    and new_effect - old_effect > tolerance
                    and check["name"] not in ("duplicate_keys", "hot_keys", "load_attribution")  # facts about keys
                )
                if worse:
                    row.update(regressed=True, reason=f"verdict {previous['verdict']} → {check['verdict']}")
                elif grew:
                    row.update(
                        regressed=True,
                        reason=f"effect {old_effect:.4g} → {new_effect:.4g} (more than {tolerance:g} worse)",
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


def read_baseline(path: str) -> dict:
    """An earlier JSON report; one-line ``UsageError`` when it cannot be read."""
    try:
        with open(path, encoding="utf-8") as f:
            return json.load(f)
    except FileNotFoundError:
        raise UsageError(f"baseline {path!r}: no such file") from None
    except (OSError, ValueError) as exc:
        raise UsageError(f"baseline {path!r}: not a JSON report ({exc})") from None


def comparison_text(rows: list[dict]) -> str:
    """The comparison for the terminal: regressions first, old and new side by side."""

    def effect(x: float | None) -> str:
        return "—" if x is None else f"{x:.4g}"

    shown = [r for r in rows if r["regressed"] or r["reason"] not in ("unchanged",)]
    lines = [
        f"against the baseline: {sum(r['regressed'] for r in rows)} regressed, "
        f"{sum(r['reason'] == 'unchanged' for r in rows)} unchanged checks"
    ]
    for r in shown:
        tag = "REGRESSED" if r["regressed"] else "note     "
        lines.append(
            f"  {tag} {r['hash']:<12} {r['check']:<22} {r['table']:<22} "
            f"{r['old_verdict'] or '—':>5} → {r['new_verdict'] or '—':<5}  effect {effect(r['old_effect'])} → "
            f"{effect(r['new_effect'])}  ({r['reason']})"
        )
    return "\n".join(lines)


def resolve_output(cli_value: str | None, config: GateConfig, kind: str) -> str | None:
    """A report path: the command line wins over the file's [reports]."""
    return cli_value or config.reports.get(kind)
