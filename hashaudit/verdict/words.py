"""Numbers and phrases for the plain-language sentences of findings (shared by every check's sentence)."""

from __future__ import annotations

import math


def num(x: float) -> str:
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


def count(n: float, noun: str, plural: str | None = None, *, exact: bool = False) -> str:
    """``1 probe``, ``2.04 probes``, ``12,000 keys``: a number (as :func:`num` writes it, or every digit with
    ``exact``) and its noun, singular only when the number reads as 1; ``plural`` for nouns that take no ``s``."""
    text = f"{n:,}" if exact else num(n)
    return f"{text} {noun if text == '1' else plural or noun + 's'}"


def pct(fraction: float) -> str:
    """A fraction as a percentage, with two decimals when small or near one."""
    return f"{100 * fraction:.2f} %" if 0 < abs(fraction) < 0.1 or abs(fraction) > 0.999 else f"{100 * fraction:.1f} %"


def excess(relative: float) -> str:
    """+12.3 % for moderate excesses, 3.4× for large ones."""
    return f"{num(relative + 1)}× the ideal" if relative >= 1 else f"{100 * relative:+.1f} %"


def p_text(p: float) -> str:
    """``p = 0.0012`` or ``p < 1e-300``."""
    return "p < 1e-300" if p < 1e-300 else f"p = {p:.2g}"


def table_label(scheme: str | None, buckets: int | None) -> str:
    """``mask 2^16`` for powers of two, ``mod 65521`` otherwise; ``full value`` for checks without a table."""
    if scheme is None or buckets is None:
        return "full value"
    if buckets > 1 and buckets & (buckets - 1) == 0:
        return f"{scheme} 2^{buckets.bit_length() - 1}"
    return f"{scheme} {buckets}"
