"""``avalanche``: the strict avalanche criterion (one flipped input bit flips each output bit half the time) and
the independence of output-bit flips, on a sample of the keys."""

from __future__ import annotations

from collections.abc import Iterator
from typing import Any

from hashaudit.checks._base import Check, CheckGroup, Conclusion, Tested
from hashaudit.settings import Setting


def _avalanche(test: Any) -> str:
    d, e = test.details, test.effect
    cell = f"input bit {d.get('worst_input_bit')} → output bit {d.get('worst_output_bit')}"
    return (
        f"flipping one input bit does not flip each output bit half the time: {cell} flips with probability "
        f"{d.get('worst_flip_probability', float('nan')):.2f} (largest deviation {e.observed:.3f} against "
        f"{e.ideal:.3f} by chance)"
    )


def _independence(test: Any) -> str:
    e = test.effect
    return (
        f"output bits flip together: bits {test.details.get('worst_output_bits')} have phi = {e.observed:.3f} "
        f"against {e.ideal:.3f} by chance"
    )


def _conclude(ctx: Conclusion, state: Any) -> Iterator[Tested]:
    from hashaudit.stats.avalanche import avalanche_flips, avalanche_matrix, avalanche_tests

    if ctx.sample is None or not len(ctx.sample):
        return
    spec, plan = state.spec, ctx.plan
    hash_seed = plan.seed if spec.seeded else 0
    # the flipped keys and which of them are sample keys do not depend on the hash: made once for all
    flips = ctx.once(
        ("avalanche flips", plan.avalanche_bytes), lambda: avalanche_flips(ctx.sample, plan.avalanche_bytes)
    )
    matrix = avalanche_matrix(
        spec.hash_batch,
        spec.width,
        ctx.sample,
        seed=hash_seed,
        max_bytes=plan.avalanche_bytes,
        name=spec.name,
        flips=flips,
    )
    for test in avalanche_tests(matrix):
        yield None, None, matrix.keys, test
    if ctx.figures:
        ctx.plot(spec.name, "avalanche", matrix.flip_probability())


def _warm_up(plan: Any, sample: Any, widths: tuple[int, ...], stand_in: Any) -> None:
    """The avalanche kernels: flips, membership (made once, as in the audit), counts."""
    from hashaudit.stats.avalanche import avalanche_flips, avalanche_matrix

    flips = avalanche_flips(sample, plan.avalanche_bytes)
    for width in widths:
        avalanche_matrix(stand_in(width), width, sample, seed=plan.seed, max_bytes=plan.avalanche_bytes, flips=flips)


GROUP = CheckGroup(
    "avalanche",
    "strict avalanche criterion and output-bit independence on a key sample",
    (
        Check(
            "avalanche",
            _avalanche,
            null_law="conservative_combined",
            help="flip probability of every input × output bit",
        ),
        Check(
            "bit_independence",
            _independence,
            null_law="conservative_combined",
            help="pairs of output bits flipping together",
        ),
    ),
    settings=(
        Setting(
            "avalanche_keys",
            "checks",
            "Keys sampled for the avalanche, neighbour and seed checks.",
            default=4096,
            kind="int",
            minimum=1,
        ),
        Setting(
            "avalanche_bytes",
            "checks",
            "Leading bytes of each sampled key whose bits are flipped.",
            default=16,
            kind="int",
            minimum=1,
            maximum=4096,
        ),
        Setting(
            "avalanche_bias_max",
            "thresholds",
            "Fail above this deviation from 1/2 of the probability that one flipped input bit flips an output bit.",
            default=0.15,
            kind="float",
            minimum=0,
        ),
        Setting(
            "bit_independence_max",
            "thresholds",
            "Fail above this correlation (phi) between the flips of two output bits.",
            default=0.05,
            kind="float",
            minimum=0,
        ),
    ),
    conclude=_conclude,
    warm_up=_warm_up,
    needs_sample=True,
)
