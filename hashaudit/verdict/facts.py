"""Findings that are facts about the input rather than verdicts on a hash: ``duplicate_keys`` (and, in
``hashaudit.verdict.attribution``, ``hot_keys`` and ``load_attribution``). They inform and never fail."""

from __future__ import annotations

import math

from hashaudit.stats.outcome import Effect
from hashaudit.verdict.findings import Finding
from hashaudit.verdict.words import count


def duplicate_finding(hash_name: str, distinct: int, occurrences: int) -> Finding:
    """``duplicate_keys``: repeated keys are counted first and kept out of every other check; they are a fact about
    the input, not the hash, so this finding informs and never fails."""
    repeats = occurrences - distinct
    share = repeats / occurrences if occurrences else 0.0
    effect = Effect("repeated_share", share, float(repeats), 0.0, "share of occurrences repeating an earlier key")
    message = (
        f"{repeats:,} of {occurrences:,} keys repeat an earlier key ({100 * share:.1f} %); every check counts each "
        "distinct key once — repeats are not the hash's fault"
        if repeats
        else f"no key repeats: {count(occurrences, 'distinct key', exact=True)}"
    )
    return Finding(
        hash_name,
        "duplicate_keys",
        None,
        None,
        distinct,
        float(repeats),
        0.0,
        float(repeats),
        1.0,
        1.0,
        1.0,
        "exact count through 128-bit key fingerprints (a false match has probability about d^2/2^129)",
        effect,
        math.nan,
        "info" if repeats else "pass",
        "none",
        message,
    )
