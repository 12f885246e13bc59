"""``hashaudit gate``: an audit read from a TOML file, for a CI job to pass or fail.

The file is ``hashaudit.toml`` (its top level), or the ``[tool.hashaudit]`` table of ``pyproject.toml``, or any file
given with ``--config``. Every key is a declared setting (``hashaudit.settings``); an unknown key is an error that names the key and its
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

A baseline is an earlier JSON report; ``hashaudit.report.baseline`` compares the audit with it.
"""

from __future__ import annotations

import re
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from hashaudit.errors import UsageError
from hashaudit.report.baseline import DEFAULT_TOLERANCE
from hashaudit.report.writers import WRITERS
from hashaudit.settings import Setting, SettingError

SECTION_TABLES = ("sources", "thresholds", "baseline", "reports")
BASELINE_KEYS = ("file", "tolerance")


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


def _where(path: Path, text: str, key: str, section: str | None) -> str:
    line = _line_of(text, key, section)
    return f"{path} line {line}" if line else str(path)


def _values(
    table: dict, known: dict[str, Setting], text: str, path: Path, section: str | None, extra: tuple[str, ...] = ()
) -> dict[str, Any]:
    """The entries of one TOML table converted by their settings' declarations (a section table is kept as is);
    a one-line ``UsageError`` names the key and its line for an unknown key or a value of the wrong kind."""
    aliases = {old: s.name for s in known.values() for old in s.toml_aliases}
    out: dict[str, Any] = {}
    for key, raw in table.items():
        name = aliases.get(key, key)
        at = _where(path, text, key, section)
        where = f" in [{section}]" if section else ""
        if key in extra:
            out[key] = raw
            continue
        if name not in known:
            listed = ", ".join(sorted([*known, *extra]))
            raise UsageError(f"{at}: unknown key {key!r}{where} (known: {listed})")
        try:
            out[name] = known[name].value(raw)
        except SettingError as exc:
            raise UsageError(f"{at}: {exc.worded(lambda n: n)}") from None
    return out


def _table(document: dict, key: str, path: Path, text: str, kind: type) -> Any:
    value = document.get(key, kind())
    if not isinstance(value, kind):
        wanted = "a table ([" + key + "])" if kind is dict else "a list of tables ([[" + key + "]])"
        raise UsageError(f"{_where(path, text, key, None)}: {key!r} must be {wanted}")
    return value


def load_config(explicit: str | None) -> GateConfig:
    """Read and check the gate's TOML; raises ``UsageError`` naming the key and line of any mistake.

    The keys are the declared settings' names: the audit's and the check groups' at the top level, thresholds in
    ``[thresholds]`` (``alpha`` there or at the top), source settings in each ``[[sources]]`` with its ``path``,
    ``file`` and ``tolerance`` in ``[baseline]``, report paths in ``[reports]``.
    """
    from hashaudit.checks import Thresholds, plan_settings, threshold_settings
    from hashaudit.engine.plan import AuditPlan
    from hashaudit.keys.options import SOURCE_SETTINGS, SourceOptions

    path, table, text = find_config(explicit)
    top = _values(table, {**plan_settings(), "alpha": threshold_settings()["alpha"]}, text, path, None, SECTION_TABLES)
    limits = _values(_table(table, "thresholds", path, text, dict), threshold_settings(), text, path, "thresholds")
    baseline = _plain(
        _table(table, "baseline", path, text, dict), {"file": str, "tolerance": float}, path, text, "baseline"
    )
    reports = _plain(_table(table, "reports", path, text, dict), dict.fromkeys(WRITERS, str), path, text, "reports")
    entries = _table(table, "sources", path, text, list)
    if not entries:
        raise UsageError(f"{path}: no [[sources]]; give at least one with a path")
    here = path.parent
    sources, options = [], []
    source_settings = {s.name: s for s in SOURCE_SETTINGS}
    for entry in entries:
        if not isinstance(entry, dict):
            raise UsageError(f"{path}: every entry of sources must be a table ([[sources]])")
        values = _values(entry, source_settings, text, path, "sources", ("path",))
        raw = values.pop("path", None)
        if not isinstance(raw, str) or not raw:
            raise UsageError(f"{path}: a [[sources]] entry has no path (a string)")
        remote = "://" in raw  # a database URL is not a path
        sources.append(raw if raw == "-" or remote else str(here / raw))
        options.append(SourceOptions(**values))
    for name in SECTION_TABLES:
        top.pop(name, None)
    if "alpha" in top:
        limits.setdefault("alpha", top.pop("alpha"))
    if top.get("neighbour_keys") is None:
        from hashaudit.checks.neighbours import neighbour_keys_for

        top["neighbour_keys"] = neighbour_keys_for(options)  # as on the command line
    try:
        plan = AuditPlan(thresholds=Thresholds(**limits), **top)
    except SettingError as exc:
        raise UsageError(f"{_where(path, text, exc.setting, None)}: {exc.worded(lambda n: n)}") from None
    reports = {k: str(here / v) for k, v in reports.items()}
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


def _plain(table: dict, known: dict[str, type], path: Path, text: str, section: str) -> dict[str, Any]:
    """A small table of plain values (``[baseline]``, ``[reports]``), each checked by type."""
    for key, value in table.items():
        at = _where(path, text, key, section)
        if key not in known:
            raise UsageError(f"{at}: unknown key {key!r} in [{section}] (known: {', '.join(sorted(known))})")
        kind = known[key]
        fits = isinstance(value, kind) and not isinstance(value, bool)
        if kind is float and isinstance(value, int) and not isinstance(value, bool):
            fits = True
        if not fits:
            raise UsageError(f"{at}: {key!r} in [{section}] must be {'a number' if kind is float else 'a string'}")
    return dict(table)
