"""``bits``: the bias of every output bit and the correlation of every pair of output bits."""

from __future__ import annotations

from collections.abc import Iterator
from typing import Any

from hashaudit.checks._base import Check, CheckGroup, Conclusion, Tested
from hashaudit.settings import Setting


def _bias(test: Any) -> str:
    e = test.effect
    bit = test.details.get("worst_bit")
    share = test.details.get("worst_bit_ones_fraction", 0.5)
    return (
        f"output bit {bit} is set in {100 * share:.2f} % of the keys (largest deviation {100 * e.observed:.2f} "
        f"points against {100 * e.ideal:.2f} expected by chance)"
    )


def _correlation(test: Any) -> str:
    e = test.effect
    pair = test.details.get("worst_pair")
    return f"output bits {pair} are correlated (phi = {e.observed:.3f} against {e.ideal:.3f} expected by chance)"


def _accumulators(spec: Any, plan: Any, tables: list, lanes: int) -> dict:
    from hashaudit.stats.bits import BitCounts

    return {"bits": (("values",), [BitCounts(spec.name, plan.seed, spec.width)])}


def _conclude(ctx: Conclusion, state: Any) -> Iterator[Tested]:
    from hashaudit.stats.bits import bit_tests

    for counts in state.get("bits"):
        result = counts.result()
        for test in bit_tests(result, seed=ctx.plan.seed):
            yield None, None, result.keys, test


GROUP = CheckGroup(
    "bits",
    "output-bit bias and correlation over the full hash value",
    (
        Check("bit_bias", _bias, help="the share of ones of every output bit"),
        Check("bit_correlation", _correlation, help="the correlation of every pair of output bits"),
    ),
    settings=(
        Setting(
            "bit_bias_max",
            "thresholds",
            "Fail above this deviation of an output bit's share of ones from 1/2 (0.01 = set in 51 % of the keys).",
            default=0.01,
            kind="float",
            minimum=0,
            aliases=("--max-bit-bias",),
        ),
        Setting(
            "bit_correlation_max",
            "thresholds",
            "Fail above this correlation (phi) between two output bits.",
            default=0.05,
            kind="float",
            minimum=0,
            aliases=("--max-bit-correlation",),
        ),
    ),
    accumulators=_accumulators,
    conclude=_conclude,
)
