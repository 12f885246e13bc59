"""Findings and the verdict rules.

A check fails only when it is both statistically significant after Holm's correction across the whole
audit (upper tail: worse than random) and its effect, in operational units, exceeds a threshold. Significant
but small departures are ``warn``; counts significantly *more even* than random are ``info`` (the keys are
structured and the function preserves the structure, which does a table no harm).
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field

from hashaudit.errors import UsageError
from hashaudit.stats.outcome import Effect, FitTest
from hashaudit.verdict.holm import holm_adjust

VERDICT_ORDER = {"fail": 0, "warn": 1, "info": 2, "pass": 3}


@dataclass(frozen=True)
class Thresholds:
    """Family-wise alpha and the effect sizes above which a significant departure fails.

    Attributes
    ----------
    alpha : float
        Family-wise error rate of one audit (Holm).
    lookup_cost_excess : float
        Relative extra probes per successful chained lookup (0.05 = 5 % more than an ideal hash).
    empty_excess : float
        Extra empty buckets as a fraction of the table (0.02 = two percentage points).
    max_load_ratio : float
        Hottest bucket over the expected maximum under uniform hashing.
    bit_bias_max : float
        Largest deviation of an output bit's share of ones from 1/2 (0.01 = a bit set in 51 % of the keys).
    bit_correlation_max : float
        Largest correlation (phi) between two output bits.
    avalanche_bias_max : float
        Largest deviation from 1/2 of the probability that flipping one input bit flips one output bit.
    bit_independence_max : float
        Largest correlation (phi) between the flips of two output bits.
    collision_excess : float
        Full-width colliding pairs over the birthday expectation, (observed - expected) / max(expected, 1).
    probe_cost_excess : float
        Relative extra probes per lookup in a simulated table over an ideal hash (0.1 = 10 % more).
    order_cost_ratio : float
        Probes to build a growing table from keys in some order, over the same in random order.
    tag_match_excess : float
        Relative extra false tag matches per lookup over an ideal hash (0.25 = a quarter more).
    shard_imbalance : float
        Hottest shard's distinct keys over its expected maximum under an ideal hash, minus one (0.05 = 5 % over).
    movement_excess : float
        Relative extra keys that move when a shard is added, over an ideal hash under the same scheme.
    """

    alpha: float = 0.01
    lookup_cost_excess: float = 0.05
    empty_excess: float = 0.02
    max_load_ratio: float = 1.25
    bit_bias_max: float = 0.01
    bit_correlation_max: float = 0.05
    avalanche_bias_max: float = 0.15
    bit_independence_max: float = 0.05
    collision_excess: float = 0.1
    probe_cost_excess: float = 0.1
    order_cost_ratio: float = 4.0
    tag_match_excess: float = 0.25
    shard_imbalance: float = 0.05
    movement_excess: float = 0.1

    def __post_init__(self) -> None:
        if not 0 < self.alpha < 1:
            raise UsageError(f"--alpha must be between 0 and 1, not {self.alpha}")
        for name in self.effect_names():
            value = getattr(self, name)
            if not (isinstance(value, (int, float)) and math.isfinite(value) and value >= 0):
                raise UsageError(f"threshold {name} must be a non-negative number, not {value!r}")

    @classmethod
    def effect_names(cls) -> list[str]:
        """Every effect that has a threshold."""
        return [f for f in cls.__dataclass_fields__ if f != "alpha"]

    def for_effect(self, effect_name: str) -> float:
        """The threshold that applies to an effect of this name."""
        if effect_name not in self.effect_names():
            raise UsageError(f"no threshold for the effect {effect_name!r}")
        return float(getattr(self, effect_name))


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


def table_label(scheme: str | None, buckets: int | None) -> str:
    """``mask 2^16`` for powers of two, ``mod 65521`` otherwise; ``full value`` for checks without a table."""
    if scheme is None or buckets is None:
        return "full value"
    if buckets > 1 and buckets & (buckets - 1) == 0:
        return f"{scheme} 2^{buckets.bit_length() - 1}"
    return f"{scheme} {buckets}"


def _num(x: float) -> str:
    """A number for a sentence: thousands separators, or M/G suffixes for large values."""
    if not math.isfinite(x):
        return "∞"
    if abs(x) >= 1e9:
        return f"{x / 1e9:.3g} G"
    if abs(x) >= 1e6:
        return f"{x / 1e6:.3g} M"
    if abs(x) >= 100 or float(x).is_integer():
        return f"{x:,.0f}"
    return f"{x:.3g}"


def _pct(fraction: float) -> str:
    return f"{100 * fraction:.2f} %" if 0 < abs(fraction) < 0.1 or abs(fraction) > 0.999 else f"{100 * fraction:.1f} %"


def _excess(relative: float) -> str:
    """+12.3 % for moderate excesses, 3.4× for large ones."""
    return f"{_num(relative + 1)}× the ideal" if relative >= 1 else f"{100 * relative:+.1f} %"


ORDER_WORDS = {
    "source": "in source order",
    "iteration_2x": "in the slot order of a same-hash table twice its size (a copy of a bigger table)",
    "iteration_1x": "in the slot order of a same-hash table of its size (a copy)",
    "iteration_half": "in the slot order of a same-hash table half its size",
    "sorted_by_hash": "sorted by hash value",
}


def _p(p: float) -> str:
    return "p < 1e-300" if p < 1e-300 else f"p = {p:.2g}"


def _neighbour_sentence(test: FitTest) -> str:
    d, e = test.details, test.effect
    family = f"neighbour keys '{d.get('family')}' ({_num(d.get('family_keys', 0))} keys made from yours: {d.get('transformation')})"
    if e.name == "lookup_cost_excess":
        return (
            f"{family}: in {d.get('worst')}, {_num(test.observed)} colliding pairs against {_num(test.expected)} "
            f"expected; a chained lookup costs {_num(e.observed)} probes against {_num(e.ideal)} ({_excess(e.value)})"
        )
    return f"{family}: {_num(test.observed)} full-value colliding pairs against {test.expected:.3g} expected"


def _seed_sentence(test: FitTest) -> str:
    d, e = test.details, test.effect
    seeds = len(d.get("seeds", []))
    if test.name == "seed_independent_collisions":
        return (
            f"{_num(d.get('keys_in_collisions', 0))} keys of the sample collide under every one of {seeds} seeds "
            f"({_num(d.get('groups', 0))} groups): crafted keys could flood a table whatever its secret seed — use a "
            "keyed hash such as siphash24 and follow your security policy"
        )
    table = d.get("costliest_table") or {}
    where = table_label(table.get("scheme"), table.get("buckets"))
    return (
        f"changing the seed does not change how the keys spread: over {seeds} seeds the per-seed p-values pile up "
        f"near 0; in {where} a chained lookup costs {_num(e.observed)} probes (median over seeds) against "
        f"{_num(e.ideal)} ({_excess(e.value)})"
    )


def _skew_sentence(test: FitTest) -> str:
    e = test.effect
    if test.name.startswith("neighbour_"):
        return _neighbour_sentence(test)
    if test.name.startswith("seed_"):
        return _seed_sentence(test)
    if e.name == "lookup_cost_excess":
        core = (
            f"a successful chained lookup costs {_num(e.observed)} probes against {_num(e.ideal)} for an ideal hash "
            f"({_excess(e.value)})"
        )
        if test.name == "colliding_pairs":
            return f"{_num(test.observed)} colliding pairs against {_num(test.expected)} expected; {core}"
        symbol = "χ²" if test.name == "chi_square" else "G"
        return f"bucket counts more uneven than random ({symbol} = {_num(test.statistic)} vs {_num(test.expected)}); {core}"
    if e.name == "empty_excess":
        return (
            f"{_pct(e.observed)} of buckets stay empty against {_pct(e.ideal)} for an ideal hash "
            f"({100 * e.value:+.1f} points)"
        )
    if e.name == "bit_bias_max":
        bit = test.details.get("worst_bit")
        share = test.details.get("worst_bit_ones_fraction", 0.5)
        return (
            f"output bit {bit} is set in {100 * share:.2f} % of the keys (largest deviation {100 * e.observed:.2f} "
            f"points against {100 * e.ideal:.2f} expected by chance)"
        )
    if e.name == "collision_excess":
        d = test.details
        return (
            f"{_num(d.get('keys_in_collisions', 0))} distinct keys share their full {d.get('width')}-bit value "
            f"({_num(d.get('groups', 0))} groups): {_num(test.observed)} colliding pairs against "
            f"{test.expected:.3g} expected by the birthday bound"
        )
    if e.name == "shard_imbalance":
        d = test.details
        return (
            f"{d.get('shard_scheme')} over {d.get('shards')} shards: the hottest shard {d.get('hottest_shard')} holds "
            f"{_num(d.get('hottest_keys', 0))} distinct keys, {e.observed:.3f}× its share against an expected "
            f"maximum of {e.ideal:.3f}× for an ideal hash ({_excess(e.value)}; χ² = {_num(test.statistic)} on "
            f"{_num(test.expected)} df)"
        )
    if e.name == "movement_excess":
        d = test.details
        return (
            f"{d.get('shard_scheme')}: going from {d.get('shards')} to {d.get('shards', 0) + 1} shards moves "
            f"{_pct(e.observed)} of the keys against {_pct(e.ideal)} for an ideal hash under this scheme"
        )
    if e.name == "tag_match_excess":
        d = test.details
        return (
            f"tag bits {d.get('tag_shift')}..{d.get('tag_shift', 0) + d.get('tag_bits', 0) - 1}: a lookup meets "
            f"{e.observed:.3g} false tag matches against {e.ideal:.3g} for an ideal hash ({_excess(e.value)}; the "
            f"commonest tag holds {100 * d.get('worst_tag_share', 0):.2f} % of the keys, "
            f"{d.get('dependence_ratio') or 1:.2f}× the matches its bucket and tag shares alone explain)"
        )
    if e.name == "order_cost_ratio":
        d = test.details
        worst = ORDER_WORDS.get(d.get("worst_order", ""), d.get("worst_order"))
        return (
            f"building a growing {d.get('table_kind')} table ({d.get('growth')}) from the keys {worst} costs "
            f"{'over ' if d.get('worst_order') in d.get('stopped_orders', []) else ''}{_num(e.observed)} probes, "
            f"{'over ' if d.get('worst_order') in d.get('stopped_orders', []) else ''}{_num(e.value)}× a random order — copy tables in random order, size the "
            "target before filling it, or give each table its own seed"
        )
    if e.name == "probe_cost_excess" and test.name == "growth_cost":
        d = test.details
        g = d.get("growth", {})
        search = "a successful" if d.get("search") == "hit" else "an unsuccessful"
        return (
            f"growing {d.get('table_kind')} table ({g.get('policy')}, {g.get('resizes')} resizes moving "
            f"{_num(g.get('keys_moved', 0))} keys, {_num(g.get('slots', 0))} slots at the end): {d.get('moment')} "
            f"at {_num(d.get('slots', 0))} slots, {search} lookup costs {_num(e.observed)} probes against "
            f"{_num(e.ideal)} for an ideal hash ({_excess(e.value)})"
        )
    if e.name == "probe_cost_excess":
        d = test.details
        search = "a successful" if d.get("search") == "hit" else "an unsuccessful"
        return (
            f"{d.get('table_kind')} table of {_num(d.get('slots', 0))} slots at load {d.get('load')}: {search} lookup "
            f"costs {_num(e.observed)} probes against {_num(e.ideal)} for an ideal hash ({_excess(e.value)})"
        )
    if e.name == "avalanche_bias_max":
        d = test.details
        cell = f"input bit {d.get('worst_input_bit')} → output bit {d.get('worst_output_bit')}"
        return (
            f"flipping one input bit does not flip each output bit half the time: {cell} flips with probability "
            f"{d.get('worst_flip_probability', float('nan')):.2f} (largest deviation {e.observed:.3f} against "
            f"{e.ideal:.3f} by chance)"
        )
    if e.name == "bit_independence_max":
        return (
            f"output bits flip together: bits {test.details.get('worst_output_bits')} have phi = {e.observed:.3f} against "
            f"{e.ideal:.3f} by chance"
        )
    if e.name == "bit_correlation_max":
        pair = test.details.get("worst_pair")
        return f"output bits {pair} are correlated (phi = {e.observed:.3f} against {e.ideal:.3f} expected by chance)"
    return (
        f"the hottest bucket holds {_num(e.observed)} keys against an expected maximum of {_num(e.ideal)} "
        f"({e.value:,.3g}×)"
    )


def judge(tests: list[tuple[str, str | None, int | None, int, FitTest]], thresholds: Thresholds) -> list[Finding]:
    """Turn the tests of one audit into findings.

    Parameters
    ----------
    tests : list of (hash_name, scheme, buckets, keys, FitTest)
        Every test of the audit: the Holm family.
    thresholds : Thresholds

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
        if p_up_adj <= thresholds.alpha:
            verdict, direction, p_adjusted = ("fail" if big else "warn"), "skewed", p_up_adj
            sentence = _skew_sentence(test)
            if not big:
                sentence = f"significant but small ({_p(test.p_upper)}): {sentence}"
            else:
                sentence = f"{sentence}; {_p(test.p_upper)}"
        elif p_low_adj <= thresholds.alpha:
            verdict, direction, p_adjusted = "info", "too_regular", p_low_adj
            sentence = (
                f"more even than random ({_p(test.p_lower)}): the keys are structured and the function keeps "
                "the structure — harmless for a table"
            )
            if test.name == "seed_spread":
                sentence = (
                    f"the seeds give suspiciously alike tables ({_p(test.p_lower)}): the seed may not reach the bits "
                    "a table uses"
                )
        else:
            verdict, direction, p_adjusted = "pass", "none", p_up_adj
            sentence = f"consistent with uniform hashing ({_p(test.p_upper)})"
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
