"""Null audits: random distinct keys through strong keyed functions, and every check's p-value under the null.

:func:`calibration` runs independent null audits — random distinct keys (byte strings or 64-bit integers), strong
keyed functions under a seed drawn per audit (SipHash-2-4, XXH3, and SipHash truncated to 32 bits so that
full-width collisions happen at all), key counts drawn log-uniformly, one power-of-two table (``mask``) and one
prime table (``mod``) at load factors from 0.1 to 8, and the same keys under a few systems' placement rules
(``NULL_PLACEMENTS``: their own hashes of uniform random key bytes) — and summarises every check's p-values
(:mod:`hashaudit.calibration.rates`). :func:`probe_cost_null` does the same for ``probe_cost`` alone, by simulated
table size. Which checks are combined, which are facts and how findings are labelled is looked up in
:mod:`hashaudit.calibration.checks`.
"""

from __future__ import annotations

import functools
import math
import time
from collections.abc import Iterable, Sequence
from typing import Any

import numpy as np

from hashaudit.calibration import checks
from hashaudit.calibration._common import MASK64, kernel_spec, parallel_map, registry_of, round6, stable_number
from hashaudit.calibration.rates import judge_calibration, rate_summary, summarise_p_values
from hashaudit.checks import Thresholds, judge
from hashaudit.engine.plan import AuditPlan
from hashaudit.engine.runner import audit_batches
from hashaudit.hashes.registry import HashSpec
from hashaudit.keys.batch import KeyBatch
from hashaudit.stats.outcome import FitTest
from hashaudit.tables.sizes import prime_below
from hashaudit.verdict.findings import Finding

NULL_LOADS = (0.1, 0.25, 0.5, 1.0, 2.0, 4.0, 8.0)
NULL_HASHES = ("siphash24", "xxh3_64", "siphash24_low32")
KEY_KINDS = ("bytes", "uint64")
KEY_BYTES = (8, 12, 16, 24, 32)
FULL_NULL_RUNS = 2000


def random_keys(rng: np.random.Generator, keys: int, kind: str = "bytes", key_bytes: int = 16) -> KeyBatch:
    """``keys`` distinct random keys in random order: byte strings of ``key_bytes`` bytes, or 64-bit integers
    (8-byte little-endian words, ``kind="uint64"``). A duplicate drawn by chance is dropped, so the batch may hold
    fewer keys (about keys² / 2^(8·key_bytes + 1) fewer: none in practice)."""
    if kind == "uint64":
        values = np.unique(rng.integers(0, MASK64, size=keys, dtype=np.uint64, endpoint=True))
        return KeyBatch.from_uint64(rng.permutation(values))
    if kind != "bytes":
        raise ValueError(f"unknown key kind {kind!r}; choose from {', '.join(KEY_KINDS)}")
    rows = rng.integers(0, 256, size=(keys, key_bytes), dtype=np.uint8)
    distinct = np.unique(rows.view(np.dtype((np.void, key_bytes))).ravel())
    data = rng.permutation(distinct).view(np.uint8).reshape(-1)
    offsets = np.arange(0, len(data) + 1, key_bytes, dtype=np.int64)
    return KeyBatch(np.ascontiguousarray(data), offsets)


def siphash24_low32() -> HashSpec:
    """SipHash-2-4 truncated to its low 32 bits: an ideal 32-bit function, whose full-width collisions are
    frequent enough (C(n, 2) / 2^32: 4.7 pairs at 200,000 keys) to calibrate ``full_collisions``."""

    def function(batch: KeyBatch, seed: int) -> np.ndarray:
        from hashaudit.hashes.siphash import siphash24

        return siphash24(batch, seed) & np.uint64(0xFFFF_FFFF)

    return kernel_spec("siphash24_low32", 32, function, "SipHash-2-4, low 32 bits")


def rejudge(findings: Iterable[Finding], thresholds: Thresholds, leave_out: Sequence[str] = ()) -> list[Finding]:
    """The verdicts the audit would have given without the checks ``leave_out``: Holm's family is rebuilt from
    the findings' own tests (facts such as ``duplicate_keys``, which are not part of it, are left out too)."""
    family = [
        (
            f.hash_name,
            f.scheme,
            f.buckets,
            f.keys,
            FitTest(
                f.check, f.statistic, f.expected, f.observed, f.p_value, f.p_value_lower, f.method, f.effect, f.details
            ),
        )
        for f in findings
        if not checks.is_fact(f.check) and f.check not in leave_out
    ]
    return judge(family, thresholds)


TINY_KEY_COUNTS = (1, 2, 3, 10, 100)
"""Key counts of the tiny null audits: every check must be valid (or decline to judge) down to one key."""


def null_configs(
    runs: int, seed: int, *, min_keys: int = 2_000, max_keys: int = 200_000, key_counts: Sequence[int] = ()
) -> list[dict]:
    """The settings of ``runs`` independent null audits (pure function of ``seed``).

    Each audit draws: its hash (cycling through ``NULL_HASHES``), its keys (byte strings of a length from
    ``KEY_BYTES`` or 64-bit integers, alternating), a key count log-uniform in [``min_keys``, ``max_keys``] (or,
    when ``key_counts`` is given, the counts in turn, e.g. ``TINY_KEY_COUNTS``), a
    seed for the hash and the samples, and two load factors from ``NULL_LOADS``: one for a power-of-two ``mask``
    table (the nearest power of two to n / load) and one for a prime ``mod`` table (the largest prime below
    n / load).
    """
    configs = []
    for run in range(runs):
        rng = np.random.default_rng([seed, run, 0x4E11])
        keys = int(round(math.exp(rng.uniform(math.log(min_keys), math.log(max_keys)))))
        if key_counts:
            keys = int(key_counts[(run // len(NULL_HASHES) // len(KEY_KINDS)) % len(key_counts)])
        mask_load, mod_load = (float(x) for x in rng.choice(NULL_LOADS, size=2))
        kind = KEY_KINDS[(run // len(NULL_HASHES)) % len(KEY_KINDS)]
        configs.append(
            {
                "run": run,
                "seed": int(rng.integers(0, 1 << 63)),
                "hash": NULL_HASHES[run % len(NULL_HASHES)],
                "key_kind": kind,
                "key_bytes": 8 if kind == "uint64" else int(rng.choice(KEY_BYTES)),
                "keys": keys,
                "mask_buckets": 1 << max(5, round(math.log2(keys / mask_load))),
                "mod_buckets": prime_below(max(37, round(keys / mod_load))),
            }
        )
    return configs


def null_run(
    config: dict,
    *,
    avalanche_keys: int = 256,
    threads: int = 0,
    groups: Sequence[str] = checks.NULL_GROUPS,
    placements: Sequence[str] = checks.NULL_PLACEMENTS,
) -> dict:
    """One null audit (see :func:`null_configs`) of the check ``groups``, with the system ``placements`` when the
    ``placement`` group is among them.

    Returns
    -------
    dict
        The config with ``keys`` (distinct keys audited), ``table_slots`` of the simulated tables, ``seconds``,
        ``p``, ``p_lower`` and ``law`` per check label (:func:`~hashaudit.calibration.checks.finding_label`,
        :func:`~hashaudit.calibration.checks.null_law`; the combined checks with an aggregate chi-square part,
        ``avalanche`` and ``bit_independence``, add it as ``avalanche aggregate`` and ``bit_independence
        aggregate``, whose law is continuous), ``fails`` (labels failing), and ``audit``: per family (``all``
        checks, and, judged again by :func:`rejudge`, ``without probe_cost`` and ``placement checks alone``)
        whether the audit failed, had an upper-tail rejection (``warn`` or ``fail``) or a lower-tail one (``info``).
    """
    rng = np.random.default_rng([config["seed"], 0xC0FFEE])
    batch = random_keys(rng, config["keys"], config["key_kind"], config["key_bytes"])
    plan = AuditPlan(
        hashes=(config["hash"],),
        buckets=(config["mask_buckets"], config["mod_buckets"]),
        seed=config["seed"],
        checks=tuple(groups),
        avalanche_keys=avalanche_keys,
        placements=tuple(placements) if "placement" in groups else (),
    )
    registry = registry_of(siphash24_low32(), builtins=NULL_HASHES[:2])
    started = time.perf_counter()
    result = audit_batches([batch], plan, registry=registry, threads=threads)
    seconds = time.perf_counter() - started
    findings = [f for f in result.findings if not checks.is_fact(f.check)]
    p, p_lower, law = {}, {}, {}
    slots = None
    for finding in findings:
        label = checks.finding_label(finding)
        p[label] = round6(finding.p_value)
        p_lower[label] = round6(finding.p_value_lower)
        law[label] = checks.null_law(finding.check, finding.method)[0]
        if finding.check in checks.TABLE_LABELS:
            slots = finding.details["slots"]
            law[label] += f", {slots:,} slots"
        if finding.check in checks.AGGREGATE_PARTS:
            part = checks.aggregate_label(finding.check)
            p[part] = round6(finding.details[checks.AGGREGATE_PARTS[finding.check]])
            law[part] = checks.AGGREGATE_LAW
    audit = {"all": _outcome(findings)}
    audit[f"without {', '.join(checks.REJUDGED_WITHOUT)}"] = _outcome(
        rejudge(findings, plan.thresholds, checks.REJUDGED_WITHOUT)
    )
    others = sorted({f.check for f in findings} - set(checks.PLACEMENT_LABELS))
    audit[checks.PLACEMENT_FAMILY] = _outcome(rejudge(findings, plan.thresholds, others))
    return {
        **config,
        "keys": result.keys,
        "table_slots": slots,
        "seconds": round(seconds, 4),
        "fails": sorted(checks.finding_label(f) for f in findings if f.verdict == "fail"),
        "audit": audit,
        "p": p,
        "p_lower": p_lower,
        "law": law,
    }


def _outcome(findings: Sequence[Finding]) -> dict[str, bool]:
    return {
        "fail": any(f.verdict == "fail" for f in findings),
        "upper": any(f.verdict in ("warn", "fail") for f in findings),
        "lower": any(f.verdict == "info" for f in findings),
    }


def summarise_null_runs(runs: list[dict], alpha: float = 0.01) -> dict:
    """The calibration tables from the rows of :func:`null_run`.

    Returns
    -------
    dict
        ``checks``: one row per check label with ``runs``, ``laws`` (run counts per null law), ``summary``
        (:func:`~hashaudit.calibration.rates.summarise_p_values`) and ``status``
        (:func:`~hashaudit.calibration.rates.judge_calibration`); ``laws``: the same per (label, law) for the
        labels with more than one law; ``audits``: per family of :func:`null_run`, the rates of ``fail`` (a failed
        audit), ``upper`` (any warn or fail: a Holm rejection in the upper tail) and ``lower`` (any info) against
        ``alpha`` (:func:`~hashaudit.calibration.rates.rate_summary`).
    """
    by_label: dict[str, list[tuple[float, str]]] = {}
    for row in runs:
        for label, p in row["p"].items():
            by_label.setdefault(label, []).append((p, row["law"][label]))
    check_rows, law_rows = [], []
    for label in sorted(by_label, key=checks.label_order):
        pairs = by_label[label]
        laws: dict[str, int] = {}
        for _, law in pairs:
            laws[law] = laws.get(law, 0) + 1
        smooth = {law: checks.label_law_kind(label, law) == "continuous" for law in laws}
        summary = summarise_p_values([p for p, _ in pairs], continuous=[smooth[law] for _, law in pairs])
        check_rows.append({"check": label, "runs": len(pairs), "laws": laws, "summary": summary})
        if len(laws) > 1:
            for law in laws:
                subset = [p for p, other in pairs if other == law]
                law_rows.append(
                    {
                        "check": label,
                        "law": law,
                        "runs": len(subset),
                        "laws": {law: len(subset)},
                        "summary": summarise_p_values(subset, continuous=smooth[law]),
                    }
                )
    judge_calibration(check_rows)
    judge_calibration(law_rows)
    count = len(runs)
    audits: dict[str, Any] = {"alpha": alpha}
    for family in runs[0]["audit"] if runs else ():
        audits[family] = {
            outcome: rate_summary(sum(r["audit"][family][outcome] for r in runs), count, alpha)
            for outcome in ("fail", "upper", "lower")
        }
    return {"checks": check_rows, "laws": law_rows, "audits": audits}


def calibration(
    runs: int,
    seed: int,
    *,
    min_keys: int = 2_000,
    max_keys: int = 200_000,
    key_counts: Sequence[int] = (),
    avalanche_keys: int = 256,
    alpha: float = 0.01,
    workers: int = 1,
    groups: Sequence[str] = checks.NULL_GROUPS,
    placements: Sequence[str] = checks.NULL_PLACEMENTS,
) -> dict:
    """Run ``runs`` independent null audits and summarise them (:func:`null_configs`, :func:`null_run`,
    :func:`summarise_null_runs`).

    Parameters
    ----------
    runs : int
    seed : int
        Every audit's settings and keys derive from it.
    min_keys, max_keys : int
        Range of the key counts (log-uniform).
    key_counts : sequence of int, optional
        Key counts taken in turn instead (``TINY_KEY_COUNTS``: the tiny audits), each with every hash and key kind.
    avalanche_keys : int
        Key sample of the avalanche checks (small keeps the study quick).
    alpha : float
        Family-wise alpha of each audit (the default of ``Thresholds``).
    workers : int
        Processes; 1 runs in this process with an audit's own threads. The numbers do not depend on it.
    groups : sequence of str
        The check groups of every audit (default: ``NULL_GROUPS``, every group the study calibrates).
    placements : sequence of str
        The system placements of every audit, when ``groups`` has ``placement`` (default: ``NULL_PLACEMENTS``).

    Returns
    -------
    dict
        ``settings``, ``runs`` (the rows of :func:`null_run`), ``seconds``, and the tables of
        :func:`summarise_null_runs`.
    """
    started = time.perf_counter()
    configs = null_configs(runs, seed, min_keys=min_keys, max_keys=max_keys, key_counts=key_counts)
    task = functools.partial(
        null_run,
        avalanche_keys=avalanche_keys,
        threads=1 if workers > 1 else 0,
        groups=tuple(groups),
        placements=tuple(placements),
    )
    rows = parallel_map(task, configs, workers)
    settings = {
        "runs": runs,
        "seed": seed,
        "min_keys": min_keys,
        "key_counts": list(key_counts),
        "max_keys": max_keys,
        "avalanche_keys": avalanche_keys,
        "alpha": alpha,
        "loads": list(NULL_LOADS),
        "hashes": list(NULL_HASHES),
        "groups": list(groups),
        "placements": list(placements) if "placement" in groups else [],
    }
    summary = summarise_null_runs(rows, alpha)
    return {"settings": settings, **summary, "runs": rows, "seconds": round(time.perf_counter() - started, 2)}


def probe_cost_null(
    slots: Sequence[int], kinds: Sequence[str], runs: int, seed: int, *, scheme: str = "mask"
) -> list[dict]:
    """Null p-values of ``probe_cost`` for simulated tables of each size and kind, without an audit around them.

    Each run fills a table with uniformly random 64-bit values up to the highest default load and tests it
    against the ideal simulation under its own seed, exactly as an audit does (``hashaudit.stats.probes``).

    Returns
    -------
    list of dict
        One row per (slots, kind): ``runs``, ``summary`` (:func:`~hashaudit.calibration.rates.summarise_p_values`,
        combined law) and ``effect_over_threshold`` (share of runs whose worst-cell excess is above the default
        ``probe_cost_excess``, which a significant p-value would turn into a failure).
    """
    from hashaudit.stats.probes import ideal_cells, probe_tests
    from hashaudit.tables.simulate import DEFAULT_LOADS, simulate

    threshold = Thresholds().probe_cost_excess
    rows = []
    for size in slots:
        for kind in kinds:
            p_values, over = [], 0
            for run in range(runs):
                rng = np.random.default_rng([seed, size, stable_number(kind), run])
                values = rng.integers(0, MASK64, size=int(max(DEFAULT_LOADS) * size), dtype=np.uint64, endpoint=True)
                cells = simulate(values, 64, kind, size, scheme, DEFAULT_LOADS)
                ideal = ideal_cells(64, kind, size, scheme, DEFAULT_LOADS, int(rng.integers(1 << 63)))
                (test,) = probe_tests(cells, ideal, scheme)
                p_values.append(test.p_upper)
                over += test.effect.value > threshold
            rows.append(
                {
                    "slots": size,
                    "kind": kind,
                    "runs": runs,
                    "effect_over_threshold": over / runs,
                    "summary": summarise_p_values(p_values, continuous=False),
                }
            )
    return rows
