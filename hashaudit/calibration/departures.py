"""Power: audits of planted departures of known size, and how often each check finds them.

:func:`power` plants departures (keys forced into a few buckets, weak low bits, a biased output bit, an input bit
that leaks linearly into an output bit, GF(2)-linear functions; :mod:`hashaudit.calibration.defects`; and, under
systems' placement rules, a hash-tag family pinned to one cluster slot and keys whose ``String.hashCode`` values
step in strides of the partition count) at several strengths and counts how often each check fails (or fails or
warns, or is ``info``). Strength 0 is the same construction with nothing planted: its row is the false-detection
rate of that setting. The check groups each departure runs and the check labels it reports are looked up in
:mod:`hashaudit.calibration.checks`.
"""

from __future__ import annotations

import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from hashaudit.calibration import checks
from hashaudit.calibration._common import MASK64, parallel_map, registry_of, round6, stable_number
from hashaudit.calibration.defects import biased_bit, leaky_input_bit, weak_low_bits, xor_rotations
from hashaudit.calibration.nulls import random_keys
from hashaudit.engine.plan import AuditPlan
from hashaudit.engine.runner import audit_batches
from hashaudit.hashes.registry import HashRegistry
from hashaudit.keys.batch import KeyBatch
from hashaudit.tables.sizes import prime_below
from hashaudit.verdict.result import AuditResult

FULL_POWER_RUNS = 40
FORCED_BUCKETS = 4
FORCED_TABLE = 1 << 12


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
        The check labels (:func:`~hashaudit.calibration.checks.finding_label`) its table reports.
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


def _forced_buckets(share: float, rng: np.random.Generator) -> tuple[KeyBatch, AuditPlan, HashRegistry]:
    """Random 64-bit integers through the identity (exactly uniform in a mask table), with a share of them
    replaced by keys whose low 12 bits name one of four buckets drawn per run."""
    keys = 40_000
    values = np.unique(rng.integers(0, MASK64, size=keys, dtype=np.uint64, endpoint=True))
    planted = int(round(share * keys))
    buckets = rng.choice(FORCED_TABLE, size=FORCED_BUCKETS, replace=False).astype(np.uint64)
    high = rng.integers(0, 1 << 52, size=planted, dtype=np.uint64)
    forced = (high << np.uint64(12)) | buckets[rng.integers(0, FORCED_BUCKETS, size=planted)]
    values = np.unique(np.concatenate([values[planted:], forced]))
    plan = AuditPlan(
        hashes=("identity",),
        buckets=(FORCED_TABLE,),
        seed=int(rng.integers(1 << 63)),
        checks=checks.DEPARTURE_GROUPS["forced_buckets"],
    )
    return KeyBatch.from_uint64(rng.permutation(values)), plan, registry_of(builtins=("identity",))


def _weak_low_bits(share: float, rng: np.random.Generator) -> tuple[KeyBatch, AuditPlan, HashRegistry]:
    batch = random_keys(rng, 40_000, "bytes", 16)
    spec = weak_low_bits(share)
    plan = AuditPlan(
        hashes=(spec.name,),
        buckets=(FORCED_TABLE, prime_below(FORCED_TABLE)),
        seed=int(rng.integers(1 << 63)),
        checks=checks.DEPARTURE_GROUPS["weak_low_bits"],
        table_kinds=("chaining", "linear"),
        table_slots=1 << 14,
    )
    return batch, plan, registry_of(spec)


def _biased_bit(ones_share: float, rng: np.random.Generator) -> tuple[KeyBatch, AuditPlan, HashRegistry]:
    batch = random_keys(rng, 100_000, "bytes", 16)
    spec = biased_bit(ones_share)
    plan = AuditPlan(hashes=(spec.name,), seed=int(rng.integers(1 << 63)), checks=checks.DEPARTURE_GROUPS["biased_bit"])
    return batch, plan, registry_of(spec)


def _leaky_input_bit(share: float, rng: np.random.Generator) -> tuple[KeyBatch, AuditPlan, HashRegistry]:
    batch = random_keys(rng, 4_096, "bytes", 16)
    spec = leaky_input_bit(share)
    plan = AuditPlan(
        hashes=(spec.name,),
        seed=int(rng.integers(1 << 63)),
        checks=checks.DEPARTURE_GROUPS["leaky_input_bit"],
        avalanche_keys=1024,
    )
    return batch, plan, registry_of(spec)


_KEY_ALPHABET = np.frombuffer(b"ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz0123456789-_", dtype=np.uint8)


def _text_keys(rng: np.random.Generator, keys: int, length: int = 16) -> list[bytes]:
    """``keys`` distinct random keys of ``length`` characters from a 64-letter alphabet (no braces)."""
    rows = _KEY_ALPHABET[rng.integers(0, len(_KEY_ALPHABET), size=(keys, length))]
    return list(dict.fromkeys(bytes(row) for row in rows))


def _tag_family(share: float, rng: np.random.Generator) -> tuple[KeyBatch, AuditPlan, HashRegistry]:
    """Random untagged keys, a share of them replaced by keys sharing one hash tag ``{tag}`` (drawn per run), which
    the cluster's rule hashes alone: the whole family lands on one slot."""
    keys = _text_keys(rng, 20_000)
    planted = int(round(share * len(keys)))
    tag = bytes(_KEY_ALPHABET[rng.integers(0, len(_KEY_ALPHABET), size=10)])
    family = [b"{" + tag + b"}:" + key for key in keys[:planted]]
    plan = AuditPlan(
        seed=int(rng.integers(1 << 63)),
        checks=checks.DEPARTURE_GROUPS["tag_family"],
        placements=(checks.TAG_FAMILY_PLACEMENT,),
        avalanche_keys=len(keys),  # the key sample holds every key: the tag counts are exact
    )
    return KeyBatch.from_keys(family + keys[planted:]), plan, registry_of()


def _key_stride(share: float, rng: np.random.Generator) -> tuple[KeyBatch, AuditPlan, HashRegistry]:
    """Random keys, a share of them replaced by keys of one prefix (drawn per run) whose last three characters
    ``a b c`` satisfy ``a - b + c ≡ 0 (mod 16)``: as 31 ≡ -1 (mod 16), their ``String.hashCode`` values then step in
    strides of 16, and ``abs(h % 16)`` sends the family to at most two of 16 partitions."""
    keys = _text_keys(rng, 20_000)
    planted = int(round(share * len(keys)))
    prefix = bytes(_KEY_ALPHABET[rng.integers(0, len(_KEY_ALPHABET), size=10)])
    codes = _KEY_ALPHABET.astype(np.int64)
    a, b, c = np.meshgrid(codes, codes, codes, indexing="ij")
    triples = np.stack([a.ravel(), b.ravel(), c.ravel()], axis=1)[(a - b + c).ravel() % 16 == 0]
    chosen = triples[rng.choice(len(triples), size=planted, replace=False)]
    family = [prefix + bytes(int(x) for x in row) for row in chosen]
    plan = AuditPlan(
        seed=int(rng.integers(1 << 63)),
        checks=checks.DEPARTURE_GROUPS["key_stride"],
        placements=checks.STRIDE_PLACEMENTS,
    )
    return KeyBatch.from_keys(family + keys[planted:]), plan, registry_of()


def _linear(name: str, rng: np.random.Generator) -> tuple[KeyBatch, AuditPlan, HashRegistry]:
    batch = random_keys(rng, 4_096, "bytes", 16)
    registry = registry_of(xor_rotations()) if name == "xor_rotations" else registry_of(builtins=(name,))
    plan = AuditPlan(
        hashes=(name,), seed=int(rng.integers(1 << 63)), checks=checks.DEPARTURE_GROUPS["linear"], avalanche_keys=256
    )
    return batch, plan, registry


DEPARTURES: dict[str, Departure] = {
    d.name: d
    for d in (
        Departure(
            "forced_buckets",
            "share of keys forced into 4 buckets",
            (0.0, 0.001, 0.002, 0.005, 0.01, 0.02, 0.05),
            40_000,
            checks.DEPARTURE_LABELS["forced_buckets"],
            _forced_buckets,
            "identity hash on random 64-bit integers, mask 2^12 (load 9.8); a share of the keys replaced by keys "
            "whose low 12 bits name one of 4 buckets",
        ),
        Departure(
            "weak_low_bits",
            "share of keys with their low 4 bits cleared",
            (0.0, 0.01, 0.02, 0.03, 0.05, 0.1, 0.2),
            40_000,
            checks.DEPARTURE_LABELS["weak_low_bits"],
            _weak_low_bits,
            "XXH3 of random 16-byte keys with the low 4 bits cleared for a share of keys; tables mask 2^12 and "
            "mod 4093, simulated chained and linear tables of 2^14 slots",
        ),
        Departure(
            "biased_bit",
            "share of keys with output bit 7 set",
            (0.5, 0.5025, 0.505, 0.5075, 0.51, 0.515, 0.52),
            100_000,
            checks.DEPARTURE_LABELS["biased_bit"],
            _biased_bit,
            "XXH3 of random 16-byte keys, output bit 7 forced to 1 for some keys",
        ),
        Departure(
            "leaky_input_bit",
            "share of keys whose output bit 0 is input bit 0 XOR a hash of the rest",
            (0.0, 0.1, 0.2, 0.3, 0.4, 0.6, 1.0),
            4_096,
            checks.DEPARTURE_LABELS["leaky_input_bit"],
            _leaky_input_bit,
            "XXH3 of random 16-byte keys, avalanche sample of 1,024 keys; flip probability of cell (0, 0) is "
            "1/2 + share/2",
        ),
        Departure(
            "linear",
            "GF(2)-linear function",
            ("crc32", "xor_rotations"),
            4_096,
            checks.DEPARTURE_LABELS["linear"],
            _linear,
            "random 16-byte keys, avalanche sample of 256 keys",
        ),
        Departure(
            "tag_family",
            "share of keys in one hash-tag family",
            (0.0, 0.005, 0.01, 0.02, 0.05, 0.1),
            20_000,
            checks.DEPARTURE_LABELS["tag_family"],
            _tag_family,
            f"random 16-character keys (no braces) under `{checks.TAG_FAMILY_PLACEMENT}`; a share of them replaced "
            "by keys `{tag}:…` sharing one hash tag, drawn per run",
        ),
        Departure(
            "key_stride",
            "share of keys whose String.hashCode steps in strides of 16",
            (0.0, 0.005, 0.01, 0.02, 0.05, 0.1),
            20_000,
            checks.DEPARTURE_LABELS["key_stride"],
            _key_stride,
            f"random 16-character keys under `{'` and `'.join(checks.STRIDE_PLACEMENTS)}`; a share of them replaced "
            "by keys of one 10-character prefix whose last three characters a, b, c have a − b + c ≡ 0 (mod 16), so "
            "that their String.hashCode values (31 ≡ −1 mod 16) step in strides of 16",
        ),
    )
}


def power_run(name: str, strength: Any, seed: int, run: int, threads: int = 0) -> dict:
    """One audit of departure ``name`` at ``strength``; returns per check label its verdict and effect."""
    departure = DEPARTURES[name]
    rng = np.random.default_rng([seed, stable_number(name), stable_number(repr(strength)), run])
    batch, plan, registry = departure.build(strength, rng)
    result: AuditResult = audit_batches([batch], plan, registry=registry, threads=threads)
    return {
        "departure": name,
        "strength": strength,
        "run": run,
        "keys": result.keys,
        "verdicts": {checks.finding_label(f): f.verdict for f in result.findings},
        "effects": {checks.finding_label(f): round6(f.effect.value) for f in result.findings},
    }


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
        ``rows``: one per (departure, strength, check label) with ``keys``, ``runs``, ``fail``, ``warn_or_fail``
        and ``info`` counts, their rates and the median effect; ``departures``: the description of each;
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
    results = parallel_map(_power_task, items, workers)
    rows = []
    for name in names:
        for strength in chosen[name]:
            mine = [r for r in results if r["departure"] == name and r["strength"] == strength]
            for label in DEPARTURES[name].checks:
                verdicts = [r["verdicts"].get(label, "missing") for r in mine]
                effects = [r["effects"][label] for r in mine if label in r["effects"]]
                fail = sum(v == "fail" for v in verdicts)
                either = sum(v in ("warn", "fail") for v in verdicts)
                info = sum(v == "info" for v in verdicts)
                rows.append(
                    {
                        "departure": name,
                        "strength": strength,
                        "check": label,
                        "keys": int(np.median([r["keys"] for r in mine])),
                        "runs": len(mine),
                        "fail": fail,
                        "warn_or_fail": either,
                        "info": info,
                        "fail_rate": fail / len(mine),
                        "detection_rate": either / len(mine),
                        "info_rate": info / len(mine),
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
