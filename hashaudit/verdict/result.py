"""The result of an audit: per hash function its findings and table summaries, and the overall verdict."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

from hashaudit.verdict.findings import VERDICT_ORDER, Finding
from hashaudit.verdict.ranking import RankingRow, deterministic_order, rank, speeds_from_run

SCHEMA = "hashaudit.audit/1"


@dataclass(frozen=True)
class TableSummary:
    """One table of one hash function: occupancy histogram and hottest buckets (indices, never keys)."""

    scheme: str
    buckets: int
    keys: int
    load_factor: float
    occupancy: dict[str, Any]
    hottest_buckets: list[tuple[int, int]]
    hottest_by_load: list[tuple[int, float, float]] = field(default_factory=list)

    def to_dict(self) -> dict:
        """JSON-able form."""
        return {
            "scheme": self.scheme,
            "buckets": self.buckets,
            "keys": self.keys,
            "load_factor": self.load_factor,
            "occupancy": self.occupancy,
            "hottest_buckets": [{"bucket": b, "keys": c} for b, c in self.hottest_buckets],
            **(
                {"hottest_by_load": [{"bucket": b, "load": w, "share": x} for b, w, x in self.hottest_by_load]}
                if self.hottest_by_load
                else {}
            ),
        }


@dataclass(frozen=True)
class HashAudit:
    """The audit of one hash function."""

    name: str
    width: int
    seeded: bool
    seed: int
    path: str
    verdict: str
    findings: tuple[Finding, ...]
    tables: tuple[TableSummary, ...]

    def to_dict(self) -> dict:
        """JSON-able form (one entry of the report's ``hashes``)."""
        return {
            "name": self.name,
            "width": self.width,
            "seeded": self.seeded,
            "seed": self.seed if self.seeded else None,
            "path": self.path,
            "verdict": self.verdict,
            "checks": [f.to_dict() for f in self.findings],
            "tables": [t.to_dict() for t in self.tables],
        }


@dataclass(frozen=True)
class AuditResult:
    """Everything an audit found; ``to_dict`` gives the JSON report (schema ``hashaudit.audit/1``).

    ``keys`` is the number of keys the checks counted (distinct keys unless the plan counts every occurrence);
    ``keys_read`` the number of occurrences read.
    """

    verdict: str
    keys: int
    hashes: tuple[HashAudit, ...]
    sources: tuple[dict, ...]
    settings: dict
    run: dict = field(default_factory=dict, compare=False)
    keys_read: int = -1
    plots: dict = field(default_factory=dict, compare=False, repr=False)
    """Data for figures that the JSON does not carry, by hash name (see ``hashaudit.engine.conclude``):
    ``avalanche`` (flip probabilities, input bit × output bit) and ``no_collision`` (the subsample curve)."""
    tables: tuple[tuple[str, int], ...] = ()
    """The (scheme, buckets) tables every hash function was counted in (sizes resolved when automatic)."""
    sampled_keys_cut: int = 0
    """Keys of the sample longer than twice ``LONG_KEY_END_BYTES`` that the avalanche, neighbour and seed checks
    saw as their first and last ``LONG_KEY_END_BYTES`` bytes (``hashaudit.stats.sample``)."""

    @property
    def repeated_keys(self) -> int:
        """Occurrences that repeated an earlier key (0 when every occurrence was counted)."""
        return max(0, self.keys_read - self.keys) if self.keys_read >= 0 else 0

    @property
    def findings(self) -> list[Finding]:
        """Every finding, worst first (fail, warn, info, pass; then by adjusted p-value)."""
        every = [f for h in self.hashes for f in h.findings]
        return sorted(every, key=lambda f: (VERDICT_ORDER[f.verdict], f.p_adjusted, -f.effect.value))

    @property
    def ranking(self) -> list[RankingRow]:
        """With two or more hash functions, one row per function, best first: verdict, worst significant cost,
        failing groups, then the kernel speed measured on the sampled keys (``hashaudit.verdict.ranking``)."""
        return rank(self.hashes, speeds_from_run(self.run))

    @property
    def exit_code(self) -> int:
        """0 when every check passed, 1 when at least one failed."""
        return 1 if self.verdict == "fail" else 0

    def to_dict(self) -> dict:
        """The JSON report as a dict: deterministic apart from ``run``."""
        counts = {v: 0 for v in ("fail", "warn", "info", "pass")}
        for f in self.findings:
            counts[f.verdict] += 1
        summary: dict = {
            "keys": self.keys,
            "keys_read": self.keys_read if self.keys_read >= 0 else self.keys,
            "repeated_keys": self.repeated_keys,
            "checks": counts,
            "worst": [
                {
                    "hash": f.hash_name,
                    "check": f.check,
                    "table": f.table,
                    "verdict": f.verdict,
                    "message": f.message,
                }
                for f in self.findings[:3]
            ],
        }
        if self.sampled_keys_cut:
            from hashaudit.stats.sample import LONG_KEY_END_BYTES

            summary["sampled_keys_cut"] = {"keys": self.sampled_keys_cut, "end_bytes_kept": LONG_KEY_END_BYTES}
        ranking = self.ranking
        run = self.run
        if ranking:  # the rows without timings, in an order that does not depend on them; the timed order in run
            names = [h.name for h in self.hashes]
            run = {**run, "ranking_order": [row.hash_name for row in ranking]}
        return {
            "schema": SCHEMA,
            "verdict": self.verdict,
            "summary": summary,
            "settings": self.settings,
            "tables": [{"scheme": scheme, "buckets": buckets} for scheme, buckets in self.tables],
            "sources": list(self.sources),
            "hashes": [h.to_dict() for h in self.hashes],
            **({"ranking": [row.to_dict() for row in deterministic_order(ranking, names)]} if ranking else {}),
            "run": run,
        }

    def to_dataframe(self):  # type: ignore[no-untyped-def]
        """One row per finding, as a pandas DataFrame (for notebooks)."""
        import pandas as pd

        rows = []
        for f in self.findings:
            rows.append(
                {
                    "hash": f.hash_name,
                    "check": f.check,
                    "scheme": f.scheme,
                    "buckets": f.buckets,
                    "keys": f.keys,
                    "verdict": f.verdict,
                    "direction": f.direction,
                    "statistic": f.statistic,
                    "expected": f.expected,
                    "observed": f.observed,
                    "p_value": f.p_value,
                    "p_adjusted": f.p_adjusted,
                    "effect": f.effect.name,
                    "effect_value": f.effect.value,
                    "threshold": f.threshold,
                    "message": f.message,
                }
            )
        return pd.DataFrame(rows)

    def _repr_html_(self) -> str:
        """A compact HTML summary that notebooks show for the result: the verdict, the worst findings and a table
        per hash of its checks' verdicts; no key, everything escaped (``hashaudit.report.notebook``)."""
        from hashaudit.report.notebook import render_fragment

        return render_fragment(self)
