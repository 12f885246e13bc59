"""Findings and the verdict rules.

A check fails only when it is both statistically significant after Holm's correction across the whole
audit (upper tail: worse than random) and its effect, in operational units, exceeds a threshold. Significant
but small departures are ``warn``; counts significantly *more even* than random are ``info`` (the keys are
structured and the function preserves the structure, which does a table no harm).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import asdict, dataclass, field
from typing import Any, Protocol

from hashaudit.stats.outcome import Effect, FitTest
from hashaudit.verdict.holm import holm_adjust
from hashaudit.verdict.words import p_text, table_label

__all__ = ["VERDICT_ORDER", "Finding", "judge", "table_label", "worst_verdict"]

VERDICT_ORDER = {"fail": 0, "warn": 1, "info": 2, "pass": 3}


@dataclass(frozen=True)
class Finding:
    """One check on one table of one hash function, with its verdict."""

    hash_name: str
    check: str
    scheme: str | None
    buckets: int | None
    keys: int
    statistic: float
    expected: float
    observed: float
    p_value: float
    p_value_lower: float
    p_adjusted: float
    method: str
    effect: Effect
    threshold: float
    verdict: str
    direction: str
    message: str
    details: dict = field(default_factory=dict)

    @property
    def table(self) -> str:
        """Short label of the table, e.g. ``mask 2^16`` or ``mod 65521`` (``linear mask 2^16`` for a simulated
        table)."""
        if "unit" in self.details:  # a system's placement: its units by their own name
            return f"{self.details['shards']} {self.details['unit']}s"
        if "shard_scheme" in self.details:
            return f"{self.details['shard_scheme']} {self.details['shards']} shards"
        label = table_label(self.scheme, self.buckets)
        return f"{self.details['table_kind']} {label}" if "table_kind" in self.details else label

    def to_dict(self) -> dict:
        """JSON-able form (the check entry of the report)."""
        where = {} if self.scheme is None else {"scheme": self.scheme, "buckets": self.buckets}
        where.update(
            {k: self.details[k] for k in ("table_kind", "load", "shards", "shard_scheme") if k in self.details}
        )
        return {
            "name": self.check,
            **where,
            "keys": self.keys,
            "verdict": self.verdict,
            "direction": self.direction,
            "statistic": _finite(self.statistic),
            "expected": _finite(self.expected),
            "observed": _finite(self.observed),
            "p_value": _probability(self.p_value),
            "p_value_lower": _probability(self.p_value_lower),
            "p_adjusted": _probability(self.p_adjusted),
            "method": self.method,
            "effect": {k: _finite(v) if isinstance(v, float) else v for k, v in asdict(self.effect).items()},
            "threshold": _finite(self.threshold),
            "message": self.message,
            **({"details": self.details} if self.details else {}),
        }


def _finite(x: float) -> float | None:
    return float(x) if math.isfinite(x) else None


def _probability(p: float) -> float:
    return min(1.0, max(0.0, float(p)))


class _Limits(Protocol):
    alpha: float

    def for_effect(self, effect_name: str) -> float: ...


def judge(
    tests: list[tuple[str, str | None, int | None, int, FitTest]], thresholds: _Limits, checks: Mapping[str, Any]
) -> list[Finding]:
    """Turn the tests of one audit into findings.

    Parameters
    ----------
    tests : list of (hash_name, scheme, buckets, keys, FitTest)
        Every test of the audit: the Holm family.
    thresholds : Thresholds
        ``alpha`` and the effect size above which a significant departure fails (``for_effect``).
    checks : mapping of check name to Check
        Each check's sentences (``sentence`` for a skewed finding, ``regular`` for a too-regular one when the
        generic one does not fit); see ``hashaudit.checks``.

    Returns
    -------
    list of Finding, in the input order.
    """
    upper = holm_adjust([t.p_upper for *_, t in tests])
    lower = holm_adjust([t.p_lower for *_, t in tests])
    findings = []
    for (hash_name, scheme, buckets, keys, test), p_up_adj, p_low_adj in zip(tests, upper, lower, strict=True):
        threshold = thresholds.for_effect(test.effect.name)
        big = test.effect.value > threshold
        check = checks[test.name]
        if p_up_adj <= thresholds.alpha:
            verdict, direction, p_adjusted = ("fail" if big else "warn"), "skewed", p_up_adj
            sentence = check.sentence(test)
            if not big:
                sentence = f"significant but small ({p_text(test.p_upper)}): {sentence}"
            else:
                sentence = f"{sentence}; {p_text(test.p_upper)}"
        elif p_low_adj <= thresholds.alpha:
            verdict, direction, p_adjusted = "info", "too_regular", p_low_adj
            sentence = (
                check.regular(test)
                if check.regular is not None
                else f"more even than random ({p_text(test.p_lower)}): the keys are structured and the function "
                "keeps the structure — harmless for a table"
            )
        else:
            verdict, direction, p_adjusted = "pass", "none", p_up_adj
            sentence = f"consistent with uniform hashing ({p_text(test.p_upper)})"
        findings.append(
            Finding(
                hash_name,
                test.name,
                scheme,
                buckets,
                keys,
                test.statistic,
                test.expected,
                test.observed,
                test.p_upper,
                test.p_lower,
                float(p_adjusted),
                test.method,
                test.effect,
                threshold,
                verdict,
                direction,
                sentence,
                dict(test.details),
            )
        )
    return findings


def worst_verdict(verdicts: list[str]) -> str:
    """``fail`` over ``warn`` over ``pass``; ``info`` alone counts as ``pass``."""
    if "fail" in verdicts:
        return "fail"
    if "warn" in verdicts:
        return "warn"
    return "pass"
