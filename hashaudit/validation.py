"""Calibration and power of the checks: many audits of an ideal hash, and audits of planted departures.

**Calibration.** Under simple uniform hashing the upper-tail p-value of a check whose null law is continuous
should be uniform on (0, 1); one whose law is discrete (Poisson counts, the maximum load, Monte Carlo nulls) or a
Bonferroni combination (``avalanche``, ``bit_independence``, ``probe_cost``) should be *super-uniform*:
P(p <= a) <= a for every a. And an audit, all of whose tests form one Holm family at ``alpha``, should report a
significant upper-tail departure (``warn`` or ``fail``) in at most a share ``alpha`` of null audits, and so fail in
at most that share. :func:`calibration` runs independent null audits — random distinct keys (byte strings or
64-bit integers), strong keyed functions under a seed drawn per audit (SipHash-2-4, XXH3, and SipHash truncated
to 32 bits so that full-width collisions happen at all), key counts drawn log-uniformly, one power-of-two table
(``mask``) and one prime table (``mod``) at load factors from 0.1 to 8 — and summarises every check's p-values.

**Power.** :func:`power` plants departures of known size (keys forced into a few buckets, weak low bits, a
biased output bit, an input bit that leaks linearly into an output bit, GF(2)-linear functions) at several
strengths and counts how often each check fails (or fails or warns). Strength 0 is the same construction with
nothing planted: its row is the false-detection rate of that setting.

Everything returns plain dicts (JSON-able) and is a pure function of its arguments and seeds: the same seed gives
the same numbers, whatever the number of worker processes.

References
----------
A. N. Kolmogorov, "Sulla determinazione empirica di una legge di distribuzione", G. Ist. Ital. Attuari 4 (1933)
83-91; N. Smirnov, "Table for estimating the goodness of fit of empirical distributions", Ann. Math. Statist. 19
(1948) 279-281 (the one- and two-sided Kolmogorov-Smirnov tests).
C. J. Clopper, E. S. Pearson, "The use of confidence or fiducial limits illustrated in the case of the binomial",
Biometrika 26 (1934) 404-413.
S. Holm, "A simple sequentially rejective multiple test procedure", Scand. J. Statist. 6 (1979) 65-70.
A. F. Webster, S. E. Tavares, "On the design of S-boxes", CRYPTO '85, LNCS 218 (1986) 523-534 (avalanche).
"""

from __future__ import annotations

import functools
import hashlib
import math
import multiprocessing
import re
import time
from collections.abc import Callable, Iterable, Sequence
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass
from typing import Any

import numpy as np

from hashaudit.engine.local import AuditPlan, audit_batches
from hashaudit.hashes.registry import REGISTRY, HashRegistry, HashSpec
from hashaudit.keys.batch import KeyBatch
from hashaudit.stats.outcome import FitTest
from hashaudit.tables.sizes import prime_below
from hashaudit.verdict.findings import Finding, Thresholds, judge
from hashaudit.verdict.holm import holm_adjust
from hashaudit.verdict.result import AuditResult

LEVELS = (0.01, 0.05, 0.1)
CONFIDENCE = 0.95  # of the one-sided Clopper-Pearson bounds and of the excess tests
STUDY_ALPHA = 0.05  # family-wise level (Holm) at which the calibration table flags a check
NULL_LOADS = (0.1, 0.25, 0.5, 1.0, 2.0, 4.0, 8.0)
NULL_HASHES = ("siphash24", "xxh3_64", "siphash24_low32")
NULL_GROUPS = ("buckets", "bits", "collisions", "avalanche", "tables")
KEY_KINDS = ("bytes", "uint64")
KEY_BYTES = (8, 12, 16, 24, 32)
COMBINED_CHECKS = ("avalanche", "bit_independence", "probe_cost")  # p = k * min(p_i): conservative by design
DISCRETE_WORDS = ("Poisson", "simulated", "multinomial maximum")
FULL_NULL_RUNS = 2000
MIN_KS_RUNS = 20
FULL_POWER_RUNS = 40

_MASK64 = (1 << 64) - 1
_COIN_SALT = 0x5EED_C01E_0F_A11  # seeds the per-key coin of a departure apart from the hash it perturbs
_BIT_SALT = 0x0B17_1EA4


# ---------------------------------------------------------------------------------------------------------
# Keys and hash functions


def random_keys(rng: np.random.Generator, keys: int, kind: str = "bytes", key_bytes: int = 16) -> KeyBatch:
    """``keys`` distinct random keys in random order: byte strings of ``key_bytes`` bytes, or 64-bit integers
    (8-byte little-endian words, ``kind="uint64"``). A duplicate drawn by chance is dropped, so the batch may hold
    fewer keys (about keys² / 2^(8·key_bytes + 1) fewer: none in practice)."""
    if kind == "uint64":
        values = np.unique(rng.integers(0, _MASK64, size=keys, dtype=np.uint64, endpoint=True))
        return KeyBatch.from_uint64(rng.permutation(values))
    if kind != "bytes":
        raise ValueError(f"unknown key kind {kind!r}; choose from {', '.join(KEY_KINDS)}")
    rows = rng.integers(0, 256, size=(keys, key_bytes), dtype=np.uint8)
    distinct = np.unique(rows.view(np.dtype((np.void, key_bytes))).ravel())
    data = rng.permutation(distinct).view(np.uint8).reshape(-1)
    offsets = np.arange(0, len(data) + 1, key_bytes, dtype=np.int64)
    return KeyBatch(np.ascontiguousarray(data), offsets)


def _xxh3(batch: KeyBatch, seed: int) -> np.ndarray:
    from hashaudit.hashes.xxh import xxh3_64

    return xxh3_64(batch, seed & _MASK64)


def _coin(batch: KeyBatch, seed: int, salt: int = _COIN_SALT) -> np.ndarray:
    """A uniform number in [0, 1) per key, a fixed function of the key (a hash must be a function)."""
    return (_xxh3(batch, seed ^ salt) >> np.uint64(11)).astype(np.float64) * 2.0**-53


def _spec(name: str, width: int, function: Callable[[KeyBatch, int], np.ndarray], description: str) -> HashSpec:
    return HashSpec(name, width, True, "kernel", function, description)


def siphash24_low32() -> HashSpec:
    """SipHash-2-4 truncated to its low 32 bits: an ideal 32-bit function, whose full-width collisions are
    frequent enough (C(n, 2) / 2^32: 4.7 pairs at 200,000 keys) to calibrate ``full_collisions``."""

    def function(batch: KeyBatch, seed: int) -> np.ndarray:
        from hashaudit.hashes.siphash import siphash24

        return siphash24(batch, seed) & np.uint64(0xFFFF_FFFF)

    return _spec("siphash24_low32", 32, function, "SipHash-2-4, low 32 bits")


def weak_low_bits(share: float, bits: int = 4) -> HashSpec:
    """XXH3 whose low ``bits`` bits are cleared for a share ``share`` of the keys (chosen by a hash of the key):
    a ``mask`` table of m buckets sends those keys to m / 2^bits of its buckets."""

    def function(batch: KeyBatch, seed: int) -> np.ndarray:
        out = _xxh3(batch, seed)
        out[_coin(batch, seed) < share] &= np.uint64(_MASK64 ^ ((1 << bits) - 1))
        return out

    return _spec(f"weak_low_bits_{share:g}", 64, function, f"XXH3, low {bits} bits cleared for {share:.1%} of keys")


def biased_bit(ones_share: float, bit: int = 7) -> HashSpec:
    """XXH3 whose output bit ``bit`` is forced to 1 for a share 2·(``ones_share`` − ½) of the keys, so that the
    bit is set in a share ``ones_share`` of them; every other bit, and the pairs, stay fair and independent."""
    forced = 2.0 * (ones_share - 0.5)
    if not 0.0 <= forced <= 1.0:
        raise ValueError(f"ones_share must be between 0.5 and 1, not {ones_share}")

    def function(batch: KeyBatch, seed: int) -> np.ndarray:
        out = _xxh3(batch, seed)
        out[_coin(batch, seed) < forced] |= np.uint64(1 << bit)
        return out

    return _spec(f"biased_bit_{ones_share:g}", 64, function, f"XXH3, bit {bit} set in {ones_share:.2%} of keys")


def leaky_input_bit(share: float) -> HashSpec:
    """XXH3, except that for a share ``share`` of the keys output bit 0 is input bit 0 (the lowest bit of the first
    byte) XORed with a hash of the rest of the key.

    Which keys leak, and the hash of the rest, are computed with input bit 0 cleared, so a key and its neighbour
    across that bit agree on both: flipping input bit 0 flips output bit 0 with probability ½ + share / 2 (an
    avalanche bias of share / 2 in one cell of the input × output matrix), and every other cell stays at ½.
    """

    def function(batch: KeyBatch, seed: int) -> np.ndarray:
        out = _xxh3(batch, seed)
        starts = batch.offsets[:-1][batch.lengths() > 0]
        cleared = batch.data.copy()
        cleared[starts] &= np.uint8(0xFE)
        rest = KeyBatch(cleared, batch.offsets)
        leak = np.zeros(len(batch), dtype=bool)
        leak[batch.lengths() > 0] = _coin(rest, seed)[batch.lengths() > 0] < share
        first_bit = np.zeros(len(batch), dtype=np.uint64)
        first_bit[batch.lengths() > 0] = batch.data[starts] & np.uint8(1)
        linear = (_xxh3(rest, seed ^ _BIT_SALT) ^ first_bit) & np.uint64(1)
        out[leak] = (out[leak] & np.uint64(_MASK64 ^ 1)) | linear[leak]
        return out

    return _spec(f"leaky_input_bit_{share:g}", 64, function, f"XXH3, input bit 0 leaks into output bit 0 ({share:.0%})")


def _rotl(x: np.ndarray, r: int) -> np.ndarray:
    return (x << np.uint64(r)) | (x >> np.uint64(64 - r))


def xor_rotations() -> HashSpec:
    """A GF(2)-linear function of 16-byte keys: x = w0 XOR rotl(w1, 29), h = x XOR rotl(x, 13) XOR rotl(x, 41) for
    the two little-endian 64-bit words w0, w1. Its values are uniform on random keys, so only the avalanche checks
    can see it: every input bit flips the same three output bits, always."""

    def function(batch: KeyBatch, seed: int) -> np.ndarray:
        lengths = batch.lengths()
        if len(batch) and not np.all(lengths == 16):
            raise ValueError("xor_rotations hashes 16-byte keys only")
        words = batch.data[batch.offsets[0] : batch.offsets[-1]].copy().view("<u8").reshape(-1, 2).astype(np.uint64)
        x = words[:, 0] ^ _rotl(words[:, 1], 29)
        return x ^ _rotl(x, 13) ^ _rotl(x, 41) ^ np.uint64(seed & _MASK64)

    return _spec("xor_rotations", 64, function, "x ^ rotl(x, 13) ^ rotl(x, 41): linear over GF(2)")


def _registry(*specs: HashSpec, builtins: Sequence[str] = ()) -> HashRegistry:
    return HashRegistry([*(REGISTRY.get(name) for name in builtins), *specs])


# ---------------------------------------------------------------------------------------------------------
# Findings to numbers


def finding_label(finding: Finding) -> str:
    """``chi_square mask``, ``probe_cost linear``, ``bit_bias``: a check and, where it has several, its table."""
    if finding.check == "probe_cost":
        return f"probe_cost {finding.details.get('table_kind')}"
    if finding.scheme is not None and finding.check in (
        "chi_square",
        "g_test",
        "empty_buckets",
        "colliding_pairs",
        "max_load",
    ):
        return f"{finding.check} {finding.scheme}"
    return finding.check


def null_law(check: str, method: str) -> tuple[str, str]:
    """A short name of the null law behind a p-value (numbers written ``k``), and its kind: ``continuous``,
    ``discrete`` or ``combined`` (a Bonferroni combination of several p-values: conservative by design)."""
    if check in ("avalanche", "bit_independence"):
        return "aggregate chi-square and worst cell, Bonferroni", "combined"
    if check == "probe_cost":
        return "Welch t on region means, Bonferroni over cells", "combined"
    label = re.sub(r"\d+", "k", re.sub(r"\s*\([^)]*\)", "", method)).strip()
    return label, "discrete" if any(word in label for word in DISCRETE_WORDS) else "continuous"


def _round(x: float) -> float:
    return float(f"{x:.6g}")


# ---------------------------------------------------------------------------------------------------------
# Summaries


def clopper_pearson(count: int, runs: int, confidence: float = CONFIDENCE) -> tuple[float, float]:
    """One-sided Clopper-Pearson bounds ``(lower, upper)`` of a binomial rate, each at ``confidence``.

    References
    ----------
    C. J. Clopper, E. S. Pearson, Biometrika 26 (1934) 404-413.
    """
    from scipy import stats

    if runs <= 0:
        return 0.0, 1.0
    tail = 1.0 - confidence
    lower = 0.0 if count <= 0 else float(stats.beta.ppf(tail, count, runs - count + 1))
    upper = 1.0 if count >= runs else float(stats.beta.ppf(confidence, count + 1, runs - count))
    return lower, upper


def rate_summary(count: int, runs: int, rate: float, confidence: float = CONFIDENCE) -> dict[str, Any]:
    """``count`` events in ``runs`` against a largest acceptable ``rate``: the observed rate, its one-sided bounds,
    and the p-value of the one-sided exact binomial test of "true rate <= ``rate``" (small: too many events)."""
    from scipy import stats

    lower, upper = clopper_pearson(count, runs, confidence)
    p_excess = 1.0 if count <= 0 else float(stats.binom.sf(count - 1, runs, rate))
    return {
        "count": int(count),
        "runs": int(runs),
        "rate": count / runs if runs else math.nan,
        "bound": rate,
        "cp_lower": lower,
        "cp_upper": upper,
        "p_excess": p_excess,
        "consistent": p_excess > 1.0 - confidence,
    }


def summarise_p_values(
    p_values: Sequence[float], *, continuous: Sequence[bool] | bool, levels: Sequence[float] = LEVELS
) -> dict:
    """How far a set of null p-values is from uniform.

    Parameters
    ----------
    p_values : sequence of float
        Upper-tail p-values of one check over independent null runs.
    continuous : bool or sequence of bool
        Whether each p-value comes from a continuous null law (it should then be uniform); discrete laws and
        Bonferroni combinations need only be super-uniform.
    levels : sequence of float
        Levels a at which P(p <= a) is counted.

    Returns
    -------
    dict
        ``runs``; ``ks_runs`` and ``ks_p``: the two-sided Kolmogorov-Smirnov test against the uniform law over the
        p-values of continuous laws (None with fewer than ``MIN_KS_RUNS``); ``ks_excess_p``: the one-sided test
        over every p-value whose alternative is that their distribution function exceeds the uniform one
        somewhere — too many small p-values; it is valid for super-uniform laws too; ``share_of_ones``; and
        ``levels``: per level a, :func:`rate_summary` of the count of p <= a against a.

    References
    ----------
    Kolmogorov (1933); Smirnov (1948); Clopper & Pearson (1934).
    """
    from scipy import stats

    p = np.clip(np.asarray(p_values, dtype=np.float64), 0.0, 1.0)
    smooth = np.broadcast_to(np.asarray(continuous, dtype=bool), p.shape)
    out: dict[str, Any] = {
        "runs": len(p),
        "ks_runs": int(smooth.sum()),
        "ks_p": None,
        "ks_excess_p": None,
        "share_of_ones": None,
        "levels": {},
    }
    if len(p) == 0:
        return out
    out["share_of_ones"] = float(np.mean(p >= 1.0 - 1e-12))
    if smooth.sum() >= MIN_KS_RUNS:
        out["ks_p"] = float(stats.kstest(p[smooth], "uniform").pvalue)
    out["ks_excess_p"] = float(stats.kstest(p, "uniform", alternative="greater").pvalue)
    for a in levels:
        out["levels"][f"{a:g}"] = rate_summary(int(np.count_nonzero(p <= a)), len(p), a)
    return out


def judge_calibration(rows: list[dict], alpha: float = STUDY_ALPHA) -> list[dict]:
    """Give every summary row a ``status``, with Holm's procedure at ``alpha`` over every test of the table.

    ``too many small p-values``: the one-sided KS test or the excess test at some level rejects (the check is
    anti-conservative: it would flag good hashes too often). ``not uniform (conservative)``: the two-sided KS test
    of the continuous laws rejects while no excess test does. Otherwise ``uniform`` when every law of the row is
    continuous, ``valid`` when none is (discrete laws and combinations: super-uniform, as they should be), and
    ``uniform where continuous`` in between. The Holm-adjusted p-values are kept (``holm_excess``,
    ``holm_uniform``).
    """
    tests: list[tuple[int, str, float]] = []
    for i, row in enumerate(rows):
        summary = row["summary"]
        if summary["ks_excess_p"] is not None:
            tests.append((i, "excess", summary["ks_excess_p"]))
        for level in summary["levels"].values():
            tests.append((i, "excess", level["p_excess"]))
        if summary["ks_p"] is not None:
            tests.append((i, "uniform", summary["ks_p"]))
    adjusted = holm_adjust([p for *_, p in tests])
    for row in rows:
        row["holm_excess"] = row["holm_uniform"] = 1.0
    for (i, kind, _), adj in zip(tests, adjusted, strict=True):
        key = f"holm_{kind}"
        rows[i][key] = min(rows[i][key], float(adj))
    for row in rows:
        if row["holm_excess"] <= alpha:
            row["status"] = "too many small p-values"
        elif row["holm_uniform"] <= alpha:
            row["status"] = "not uniform (conservative)"
        elif row["summary"]["ks_runs"] == row["runs"]:
            row["status"] = "uniform"
        elif row["summary"]["ks_p"] is None:
            row["status"] = "valid"
        else:
            row["status"] = "uniform where continuous"
    return rows


def rejudge(findings: Iterable[Finding], thresholds: Thresholds, leave_out: Sequence[str] = ()) -> list[Finding]:
    """The verdicts the audit would have given without the checks ``leave_out``: Holm's family is rebuilt from
    the findings' own tests (``duplicate_keys``, which is not part of it, is left out too)."""
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
        if f.check != "duplicate_keys" and f.check not in leave_out
    ]
    return judge(family, thresholds)


# ---------------------------------------------------------------------------------------------------------
# Calibration


def null_configs(runs: int, seed: int, *, min_keys: int = 2_000, max_keys: int = 200_000) -> list[dict]:
    """The settings of ``runs`` independent null audits (pure function of ``seed``).

    Each audit draws: its hash (cycling through ``NULL_HASHES``), its keys (byte strings of a length from
    ``KEY_BYTES`` or 64-bit integers, alternating), a key count log-uniform in [``min_keys``, ``max_keys``], a
    seed for the hash and the samples, and two load factors from ``NULL_LOADS``: one for a power-of-two ``mask``
    table (the nearest power of two to n / load) and one for a prime ``mod`` table (the largest prime below
    n / load).
    """
    configs = []
    for run in range(runs):
        rng = np.random.default_rng([seed, run, 0x4E11])
        keys = int(round(math.exp(rng.uniform(math.log(min_keys), math.log(max_keys)))))
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


def null_run(config: dict, *, avalanche_keys: int = 256, threads: int = 0) -> dict:
    """One null audit (see :func:`null_configs`).

    Returns
    -------
    dict
        The config with ``keys`` (distinct keys audited), ``table_slots`` of the simulated tables, ``seconds``,
        ``p``, ``p_lower`` and ``law`` per check label (:func:`finding_label`, :func:`null_law`; the avalanche
        checks add their aggregate chi-square part, ``avalanche aggregate`` and ``bit_independence aggregate``,
        whose law is continuous), ``fails`` (labels failing), and ``audit``: per family (``all`` checks, and
        ``without probe_cost``, judged again by :func:`rejudge`) whether the audit failed, had an upper-tail
        rejection (``warn`` or ``fail``) or a lower-tail one (``info``).
    """
    rng = np.random.default_rng([config["seed"], 0xC0FFEE])
    batch = random_keys(rng, config["keys"], config["key_kind"], config["key_bytes"])
    plan = AuditPlan(
        hashes=(config["hash"],),
        buckets=(config["mask_buckets"], config["mod_buckets"]),
        seed=config["seed"],
        checks=NULL_GROUPS,
        avalanche_keys=avalanche_keys,
    )
    registry = _registry(siphash24_low32(), builtins=NULL_HASHES[:2])
    started = time.perf_counter()
    result = audit_batches([batch], plan, registry=registry, threads=threads)
    seconds = time.perf_counter() - started
    findings = [f for f in result.findings if f.check != "duplicate_keys"]
    p, p_lower, law = {}, {}, {}
    slots = None
    for finding in findings:
        label = finding_label(finding)
        p[label] = _round(finding.p_value)
        p_lower[label] = _round(finding.p_value_lower)
        law[label] = null_law(finding.check, finding.method)[0]
        if finding.check == "probe_cost":
            slots = finding.details["slots"]
            law[label] += f", {slots:,} slots"
        if finding.check in ("avalanche", "bit_independence"):
            part = f"{finding.check} aggregate"
            p[part] = _round(finding.details["chi_square_p_upper"])
            law[part] = "chi-square with k degrees of freedom"
    audit = {"all": _outcome(findings)}
    audit["without probe_cost"] = _outcome(rejudge(findings, plan.thresholds, ("probe_cost",)))
    return {
        **config,
        "keys": result.keys,
        "table_slots": slots,
        "seconds": round(seconds, 4),
        "fails": sorted(finding_label(f) for f in findings if f.verdict == "fail"),
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
        (:func:`summarise_p_values`) and ``status`` (:func:`judge_calibration`); ``laws``: the same per (label,
        law) for the labels with more than one law; ``audits``: per family of :func:`null_run`, the rates of
        ``fail`` (a failed audit), ``upper`` (any warn or fail: a Holm rejection in the upper tail) and ``lower``
        (any info) against ``alpha`` (:func:`rate_summary`).
    """
    by_label: dict[str, list[tuple[float, str]]] = {}
    for row in runs:
        for label, p in row["p"].items():
            by_label.setdefault(label, []).append((p, row["law"][label]))
    check_rows, law_rows = [], []
    for label in sorted(by_label, key=_label_order):
        pairs = by_label[label]
        laws: dict[str, int] = {}
        for _, law in pairs:
            laws[law] = laws.get(law, 0) + 1
        smooth = {law: _law_kind(label, law) == "continuous" for law in laws}
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


def _law_kind(label: str, law: str) -> str:
    if label.endswith(" aggregate"):
        return "continuous"
    return null_law(label.split(" ")[0], law)[1]


_CHECK_ORDER = (
    "chi_square",
    "g_test",
    "empty_buckets",
    "colliding_pairs",
    "max_load",
    "bit_bias",
    "bit_correlation",
    "full_collisions",
    "avalanche",
    "bit_independence",
    "probe_cost",
)


def _label_order(label: str) -> tuple[int, str]:
    check = label.split(" ")[0]
    return (_CHECK_ORDER.index(check) if check in _CHECK_ORDER else len(_CHECK_ORDER), label)


def _map(function: Callable[[Any], dict], items: Iterable[Any], workers: int) -> list[dict]:
    items = list(items)
    if workers <= 1:
        return [function(item) for item in items]
    # spawn: a forked child would inherit numba's and the audit's threads half-way
    context = multiprocessing.get_context("spawn")
    with ProcessPoolExecutor(max_workers=workers, mp_context=context) as pool:
        return list(pool.map(function, items, chunksize=max(1, len(items) // (8 * workers))))


def calibration(
    runs: int,
    seed: int,
    *,
    min_keys: int = 2_000,
    max_keys: int = 200_000,
    avalanche_keys: int = 256,
    alpha: float = 0.01,
    workers: int = 1,
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
    avalanche_keys : int
        Key sample of the avalanche checks (small keeps the study quick).
    alpha : float
        Family-wise alpha of each audit (the default of ``Thresholds``).
    workers : int
        Processes; 1 runs in this process with an audit's own threads. The numbers do not depend on it.

    Returns
    -------
    dict
        ``settings``, ``runs`` (the rows of :func:`null_run`), ``seconds``, and the tables of
        :func:`summarise_null_runs`.
    """
    started = time.perf_counter()
    configs = null_configs(runs, seed, min_keys=min_keys, max_keys=max_keys)
    task = functools.partial(null_run, avalanche_keys=avalanche_keys, threads=1 if workers > 1 else 0)
    rows = _map(task, configs, workers)
    settings = {
        "runs": runs,
        "seed": seed,
        "min_keys": min_keys,
        "max_keys": max_keys,
        "avalanche_keys": avalanche_keys,
        "alpha": alpha,
        "loads": list(NULL_LOADS),
        "hashes": list(NULL_HASHES),
        "groups": list(NULL_GROUPS),
    }
    summary = summarise_null_runs(rows, alpha)
    return {"settings": settings, **summary, "runs": rows, "seconds": round(time.perf_counter() - started, 2)}


# ---------------------------------------------------------------------------------------------------------
# Power


@dataclass(frozen=True)
class Departure:
    """A planted departure from uniform hashing.

    Attributes
    ----------
    name : str
    strength_name : str
        What the strength measures.
    strengths : tuple
        The strengths of the full study (numbers; 0 plants nothing) or names of functions.
    keys : int
    checks : tuple of str
        The check labels (:func:`finding_label`) its table reports.
    build : callable
        ``build(strength, rng) -> (KeyBatch, AuditPlan, HashRegistry)``.
    description : str
    """

    name: str
    strength_name: str
    strengths: tuple
    keys: int
    checks: tuple[str, ...]
    build: Callable[[Any, np.random.Generator], tuple[KeyBatch, AuditPlan, HashRegistry]]
    description: str


FORCED_BUCKETS = 4
FORCED_TABLE = 1 << 12


def _forced_buckets(share: float, rng: np.random.Generator) -> tuple[KeyBatch, AuditPlan, HashRegistry]:
    """Random 64-bit integers through the identity (exactly uniform in a mask table), with a share of them
    replaced by keys whose low 12 bits name one of four buckets drawn per run."""
    keys = 40_000
    values = np.unique(rng.integers(0, _MASK64, size=keys, dtype=np.uint64, endpoint=True))
    planted = int(round(share * keys))
    buckets = rng.choice(FORCED_TABLE, size=FORCED_BUCKETS, replace=False).astype(np.uint64)
    high = rng.integers(0, 1 << 52, size=planted, dtype=np.uint64)
    forced = (high << np.uint64(12)) | buckets[rng.integers(0, FORCED_BUCKETS, size=planted)]
    values = np.unique(np.concatenate([values[planted:], forced]))
    plan = AuditPlan(
        hashes=("identity",), buckets=(FORCED_TABLE,), seed=int(rng.integers(1 << 63)), checks=("buckets",)
    )
    return KeyBatch.from_uint64(rng.permutation(values)), plan, _registry(builtins=("identity",))


def _weak_low_bits(share: float, rng: np.random.Generator) -> tuple[KeyBatch, AuditPlan, HashRegistry]:
    batch = random_keys(rng, 40_000, "bytes", 16)
    spec = weak_low_bits(share)
    plan = AuditPlan(
        hashes=(spec.name,),
        buckets=(FORCED_TABLE, prime_below(FORCED_TABLE)),
        seed=int(rng.integers(1 << 63)),
        checks=("buckets", "tables"),
        table_kinds=("chaining", "linear"),
        table_slots=1 << 14,
    )
    return batch, plan, _registry(spec)


def _biased_bit(ones_share: float, rng: np.random.Generator) -> tuple[KeyBatch, AuditPlan, HashRegistry]:
    batch = random_keys(rng, 100_000, "bytes", 16)
    spec = biased_bit(ones_share)
    plan = AuditPlan(hashes=(spec.name,), seed=int(rng.integers(1 << 63)), checks=("bits",))
    return batch, plan, _registry(spec)


def _leaky_input_bit(share: float, rng: np.random.Generator) -> tuple[KeyBatch, AuditPlan, HashRegistry]:
    batch = random_keys(rng, 4_096, "bytes", 16)
    spec = leaky_input_bit(share)
    plan = AuditPlan(hashes=(spec.name,), seed=int(rng.integers(1 << 63)), checks=("avalanche",), avalanche_keys=1024)
    return batch, plan, _registry(spec)


def _linear(name: str, rng: np.random.Generator) -> tuple[KeyBatch, AuditPlan, HashRegistry]:
    batch = random_keys(rng, 4_096, "bytes", 16)
    registry = _registry(xor_rotations()) if name == "xor_rotations" else _registry(builtins=(name,))
    plan = AuditPlan(hashes=(name,), seed=int(rng.integers(1 << 63)), checks=("avalanche",), avalanche_keys=256)
    return batch, plan, registry


BUCKET_LABELS = ("chi_square", "g_test", "empty_buckets", "colliding_pairs", "max_load")

DEPARTURES: dict[str, Departure] = {
    d.name: d
    for d in (
        Departure(
            "forced_buckets",
            "share of keys forced into 4 buckets",
            (0.0, 0.001, 0.002, 0.005, 0.01, 0.02, 0.05),
            40_000,
            tuple(f"{c} mask" for c in BUCKET_LABELS),
            _forced_buckets,
            "identity hash on random 64-bit integers, mask 2^12 (load 9.8); a share of the keys replaced by keys "
            "whose low 12 bits name one of 4 buckets",
        ),
        Departure(
            "weak_low_bits",
            "share of keys with their low 4 bits cleared",
            (0.0, 0.01, 0.02, 0.03, 0.05, 0.1, 0.2),
            40_000,
            (
                "chi_square mask",
                "colliding_pairs mask",
                "empty_buckets mask",
                "max_load mask",
                "chi_square mod",
                "probe_cost chaining",
                "probe_cost linear",
            ),
            _weak_low_bits,
            "XXH3 of random 16-byte keys with the low 4 bits cleared for a share of keys; tables mask 2^12 and "
            "mod 4093, simulated chained and linear tables of 2^14 slots",
        ),
        Departure(
            "biased_bit",
            "share of keys with output bit 7 set",
            (0.5, 0.5025, 0.505, 0.5075, 0.51, 0.515, 0.52),
            100_000,
            ("bit_bias", "bit_correlation"),
            _biased_bit,
            "XXH3 of random 16-byte keys, output bit 7 forced to 1 for some keys",
        ),
        Departure(
            "leaky_input_bit",
            "share of keys whose output bit 0 is input bit 0 XOR a hash of the rest",
            (0.0, 0.1, 0.2, 0.3, 0.4, 0.6, 1.0),
            4_096,
            ("avalanche", "bit_independence"),
            _leaky_input_bit,
            "XXH3 of random 16-byte keys, avalanche sample of 1,024 keys; flip probability of cell (0, 0) is "
            "1/2 + share/2",
        ),
        Departure(
            "linear",
            "GF(2)-linear function",
            ("crc32", "xor_rotations"),
            4_096,
            ("avalanche", "bit_independence"),
            _linear,
            "random 16-byte keys, avalanche sample of 256 keys",
        ),
    )
}


def power_run(name: str, strength: Any, seed: int, run: int, threads: int = 0) -> dict:
    """One audit of departure ``name`` at ``strength``; returns per check label its verdict and effect."""
    departure = DEPARTURES[name]
    rng = np.random.default_rng([seed, _stable_number(name), _stable_number(repr(strength)), run])
    batch, plan, registry = departure.build(strength, rng)
    result: AuditResult = audit_batches([batch], plan, registry=registry, threads=threads)
    return {
        "departure": name,
        "strength": strength,
        "run": run,
        "keys": result.keys,
        "verdicts": {finding_label(f): f.verdict for f in result.findings},
        "effects": {finding_label(f): _round(f.effect.value) for f in result.findings},
    }


def _stable_number(text: str) -> int:
    """A 64-bit number from a text, the same in every process (``hash`` of a str is salted per process)."""
    return int.from_bytes(hashlib.blake2b(text.encode(), digest_size=8).digest(), "little")


def _power_task(item: tuple[str, Any, int, int, int]) -> dict:
    return power_run(*item)


def power(
    runs: int,
    seed: int,
    *,
    departures: Sequence[str] | None = None,
    strengths: dict[str, Sequence[Any]] | None = None,
    workers: int = 1,
) -> dict:
    """Detection rates of planted departures.

    Parameters
    ----------
    runs : int
        Audits per (departure, strength), each with its own keys and seed.
    seed : int
    departures : sequence of str, optional
        Names from ``DEPARTURES`` (default: all).
    strengths : dict, optional
        Strengths per departure name, instead of the departure's own.
    workers : int
        Processes (the numbers do not depend on it).

    Returns
    -------
    dict
        ``rows``: one per (departure, strength, check label) with ``keys``, ``runs``, ``fail`` and
        ``warn_or_fail`` counts, their rates and the median effect; ``departures``: the description of each;
        ``seconds``.
    """
    started = time.perf_counter()
    names = list(departures or DEPARTURES)
    chosen = {name: tuple((strengths or {}).get(name, DEPARTURES[name].strengths)) for name in names}
    items = [
        (name, strength, seed, run, 1 if workers > 1 else 0)
        for name in names
        for strength in chosen[name]
        for run in range(runs)
    ]
    results = _map(_power_task, items, workers)
    rows = []
    for name in names:
        for strength in chosen[name]:
            mine = [r for r in results if r["departure"] == name and r["strength"] == strength]
            for label in DEPARTURES[name].checks:
                verdicts = [r["verdicts"].get(label, "missing") for r in mine]
                effects = [r["effects"][label] for r in mine if label in r["effects"]]
                fail = sum(v == "fail" for v in verdicts)
                either = sum(v in ("warn", "fail") for v in verdicts)
                rows.append(
                    {
                        "departure": name,
                        "strength": strength,
                        "check": label,
                        "keys": int(np.median([r["keys"] for r in mine])),
                        "runs": len(mine),
                        "fail": fail,
                        "warn_or_fail": either,
                        "fail_rate": fail / len(mine),
                        "detection_rate": either / len(mine),
                        "median_effect": float(np.median(effects)) if effects else None,
                    }
                )
    return {
        "settings": {"runs": runs, "seed": seed, "strengths": {k: list(v) for k, v in chosen.items()}},
        "departures": {
            name: {"strength": DEPARTURES[name].strength_name, "description": DEPARTURES[name].description}
            for name in names
        },
        "rows": rows,
        "seconds": round(time.perf_counter() - started, 2),
    }


# ---------------------------------------------------------------------------------------------------------
# probe_cost by table size


def probe_cost_null(
    slots: Sequence[int], kinds: Sequence[str], runs: int, seed: int, *, scheme: str = "mask"
) -> list[dict]:
    """Null p-values of ``probe_cost`` for simulated tables of each size and kind, without an audit around them.

    Each run fills a table with uniformly random 64-bit values up to the highest default load and tests it
    against the ideal simulation under its own seed, exactly as an audit does (``hashaudit.stats.probes``).

    Returns
    -------
    list of dict
        One row per (slots, kind): ``runs``, ``summary`` (:func:`summarise_p_values`, combined law) and
        ``effect_over_threshold`` (share of runs whose worst-cell excess is above the default
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
                rng = np.random.default_rng([seed, size, _stable_number(kind), run])
                values = rng.integers(0, _MASK64, size=int(max(DEFAULT_LOADS) * size), dtype=np.uint64, endpoint=True)
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


# ---------------------------------------------------------------------------------------------------------
# The whole study

STUDY_SEED = 20_240_917
PROBE_COST_SLOTS = (1 << 11, 1 << 12, 1 << 13, 1 << 14, 1 << 16)
PROBE_COST_KINDS = ("chaining", "linear", "robin-hood")
PROBE_COST_RUNS = 200


def study(
    *,
    null_runs: int = FULL_NULL_RUNS,
    power_runs: int = FULL_POWER_RUNS,
    probe_cost_runs: int = PROBE_COST_RUNS,
    seed: int = STUDY_SEED,
    workers: int = 1,
) -> dict:
    """The full calibration and power study: :func:`calibration` (keys 2,000 to 200,000, avalanche sample of 256
    keys), :func:`power` of every departure, and :func:`probe_cost_null` by table size."""
    started = time.perf_counter()
    null = calibration(null_runs, seed, workers=workers)
    detection = power(power_runs, seed, workers=workers)
    probe_started = time.perf_counter()
    probe_rows = probe_cost_null(PROBE_COST_SLOTS, PROBE_COST_KINDS, probe_cost_runs, seed)
    return {
        "calibration": null,
        "power": detection,
        "probe_cost_null": {"rows": probe_rows, "seconds": round(time.perf_counter() - probe_started, 2)},
        "seconds": round(time.perf_counter() - started, 2),
        "workers": workers,
    }
