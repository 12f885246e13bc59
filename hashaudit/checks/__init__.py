"""The check registry: every check group, declared in one module each, and what iterates them.

A group module (``hashaudit/checks/<group>.py``) declares a :class:`~hashaudit.checks._base.CheckGroup`: its
checks with their sentences, its settings and thresholds, the accumulators it needs, how it concludes, its facts
and its figure. The engines, ``--checks``, the gate, the JSON schema's enums, the calibration study and the
renderers iterate :data:`GROUPS`; none of them names a check. DEVELOPERS.md says, step by step, how to add one.

:data:`GROUPS` is in conclusion order: a hash function's findings are listed group by group in this order, and
facts (``duplicate_keys``, ``hot_keys``) after every verdict.
"""

from __future__ import annotations

import math
from typing import Any

from hashaudit.checks import (
    avalanche,
    bits,
    buckets,
    collisions,
    growth,
    neighbours,
    placement,
    seeds,
    shards,
    tables,
    tags,
)
from hashaudit.checks._base import NULL_LAWS, Check, CheckGroup, Conclusion, Tested
from hashaudit.settings import AUDIT_SETTINGS, Setting, SettingError, by_name

GROUPS: tuple[CheckGroup, ...] = tuple(
    module.GROUP
    for module in (buckets, bits, collisions, neighbours, seeds, avalanche, tables, tags, growth, shards, placement)
)
GROUP_BY_NAME: dict[str, CheckGroup] = {g.name: g for g in GROUPS}
CHECKS: dict[str, Check] = {c.name: c for g in GROUPS for c in g.checks}
DEFAULT_GROUPS: tuple[str, ...] = tuple(g.name for g in GROUPS if g.default)
FACTS_ONLY: frozenset[str] = frozenset(c.name for c in CHECKS.values() if c.facts_only)


def parse_checks(text: str | list | tuple | None) -> tuple[str, ...]:
    """Groups named by ``--checks``: groups or check names (comma-separated text or a list), or ``all``.

    A check name selects its whole group (the checks of a group share one pass). The order is the registry's.
    """
    if text is None:
        return DEFAULT_GROUPS
    words = text.split(",") if isinstance(text, str) else [str(w) for w in text]
    words = [w.strip() for w in words if w.strip()]
    if not words:
        return DEFAULT_GROUPS
    wanted: set[str] = set()
    for word in words:
        if word == "all":
            wanted.update(GROUP_BY_NAME)
            continue
        group = GROUP_BY_NAME.get(word) or next((g for g in GROUPS if word in g.check_names), None)
        if group is None:
            known = ", ".join(["all", *GROUP_BY_NAME, *CHECKS])
            raise SettingError("checks", f"has an unknown check {word!r}; choose from: {known}")
        wanted.add(group.name)
    return tuple(g.name for g in GROUPS if g.name in wanted)


def group_settings() -> tuple[Setting, ...]:
    """Every group's settings (options and thresholds), in registry order."""
    return tuple(s for g in GROUPS for s in g.settings)


def plan_settings() -> dict[str, Setting]:
    """The settings an audit plan holds (the audit's own and every group's options), by name; no thresholds."""
    return by_name(s for s in (*AUDIT_SETTINGS, *group_settings()) if s.section != "thresholds")


def threshold_settings() -> dict[str, Setting]:
    """``alpha`` and every threshold, by name, in registry order."""
    return by_name(s for s in (*AUDIT_SETTINGS, *group_settings()) if s.section == "thresholds")


class Thresholds:
    """Family-wise alpha and the effect sizes above which a significant departure fails.

    Built from keywords named as the threshold settings the check groups declare (``lookup_cost_excess=0.1``);
    a threshold not given takes its declared default. ``thresholds.NAME`` reads one; :meth:`as_dict` gives all,
    ``alpha`` first.
    """

    __slots__ = ("_values",)
    _values: dict[str, float]

    def __init__(self, **values: float) -> None:
        declared = threshold_settings()
        unknown = sorted(set(values) - set(declared))
        if unknown:
            raise SettingError(unknown[0], f"is not a threshold; thresholds: {', '.join(declared)}")
        resolved = {}
        for name, setting in declared.items():
            value = values.get(name, setting.default)
            if isinstance(value, bool) or not isinstance(value, int | float) or not math.isfinite(value):
                raise SettingError(name, f"must be a number, not {value!r}")
            setting.check(float(value))
            resolved[name] = float(value)
        object.__setattr__(self, "_values", resolved)

    def __getattr__(self, name: str) -> float:
        try:
            return self._values[name]
        except KeyError:
            raise AttributeError(f"no threshold {name!r}") from None

    def __setattr__(self, name: str, value: Any) -> None:
        raise AttributeError("Thresholds are read-only")

    def __eq__(self, other: object) -> bool:
        return isinstance(other, Thresholds) and other._values == self._values

    def __hash__(self) -> int:
        return hash(tuple(self._values.items()))

    def __repr__(self) -> str:
        return "Thresholds(" + ", ".join(f"{k}={v!r}" for k, v in self._values.items()) + ")"

    def __getstate__(self) -> dict:
        return dict(self._values)

    def __setstate__(self, state: dict) -> None:
        object.__setattr__(self, "_values", dict(state))

    def as_dict(self) -> dict[str, float]:
        """Every threshold by name, ``alpha`` first (the JSON report's ``settings.thresholds``)."""
        return dict(self._values)

    @classmethod
    def effect_names(cls) -> list[str]:
        """Every effect that has a threshold."""
        return [name for name in threshold_settings() if name != "alpha"]

    def for_effect(self, effect_name: str) -> float:
        """The threshold that applies to an effect of this name (NaN for facts, which have none)."""
        if effect_name == "alpha" or effect_name not in self._values:
            raise SettingError(effect_name, "is not an effect with a threshold")
        return self._values[effect_name]


def judge(tests: list[tuple[str, str | None, int | None, int, Any]], thresholds: Thresholds) -> list:
    """:func:`hashaudit.verdict.findings.judge` with every check's sentences from the registry.

    An effect fails only beyond its threshold *in the failing direction*: a significant finding whose observed
    quantity is no worse than an ideal hash's (``effect.observed <= effect.ideal``, e.g. a largest correlation
    below the largest one chance gives) is at most a ``warn``, whatever its effect's size.
    """
    import dataclasses

    from hashaudit.verdict.findings import judge as judge_with
    from hashaudit.verdict.words import p_text

    findings = judge_with(tests, thresholds, CHECKS)
    for index, ((*_, test), finding) in enumerate(zip(tests, findings, strict=True)):
        effect = finding.effect
        if finding.verdict != "fail" or not (math.isfinite(effect.observed) and math.isfinite(effect.ideal)):
            continue
        if effect.observed <= effect.ideal:
            sentence = CHECKS[finding.check].sentence
            core = sentence(test) if sentence is not None else finding.message
            message = f"significant but small ({p_text(test.p_upper)}; no worse than chance): {core}"
            findings[index] = dataclasses.replace(finding, verdict="warn", message=message)
    return findings


__all__ = [
    "CHECKS",
    "DEFAULT_GROUPS",
    "FACTS_ONLY",
    "GROUPS",
    "GROUP_BY_NAME",
    "NULL_LAWS",
    "Check",
    "CheckGroup",
    "Conclusion",
    "Tested",
    "Thresholds",
    "group_settings",
    "judge",
    "parse_checks",
    "plan_settings",
    "threshold_settings",
]
