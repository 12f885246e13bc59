"""``hot_keys`` and ``load_attribution``: is the hottest shard the hash's fault, or a few keys'?

Both are facts about the input more than about the function, so like ``duplicate_keys`` they never fail a hash:
``hot_keys`` is ``info`` when a few keys carry most of the hottest shard's excess load (``pass`` otherwise), and
``load_attribution`` always says, in one sentence an operator can act on, how much of that shard's load comes from
its heaviest keys and whether the hash itself puts more distinct keys there than an ideal hash would. Whether the
hash is to blame is the verdict of ``shard_balance``.
"""

from __future__ import annotations

import math
from typing import Any

from hashaudit.stats.heavy import HeavyKeys
from hashaudit.stats.outcome import Effect
from hashaudit.stats.shards import attribute_load, rounded
from hashaudit.verdict.findings import Finding


def _pct(x: float) -> str:
    return f"{100 * x:.1f} %"


def _points(points: float, excess: float) -> str:
    """``12.3 of its 15.0 points``, or ``all of its 15.0 points`` when the keys explain more than the excess."""
    if points >= excess:
        return f"all of its {100 * excess:.1f} points"
    return f"{100 * points:.1f} of its {100 * excess:.1f} points"


def load_findings(
    hash_name: str, placed: list[tuple[Any, list[tuple[bytes, float, int]]]], heavy: HeavyKeys, shard_imbalance: float
) -> list[Finding]:
    """The ``hot_keys`` and ``load_attribution`` findings of one hash function.

    Parameters
    ----------
    hash_name : str
    placed : list of (ShardCounts, list of (key, load, shard))
        Each shard layout's counts, with the heaviest keys placed on its shards by this hash.
    heavy : HeavyKeys
        The summary the keys come from (whether their loads are exact, its error bound and floor).
    shard_imbalance : float
        The threshold above which the hottest shard's excess counts as hot.
    """
    findings = []
    for counts, keys in placed:
        if float(counts.load_.sum()) <= 0:  # every weight zero: no load to attribute
            continue
        a = attribute_load(counts, keys, float(counts.load_.sum()))
        a["heavy_keys_exact"] = heavy.exact
        a["heavy_count_error"] = rounded(heavy.error_)
        a["heavy_keys_above"] = rounded(heavy.floor_)  # settled: every key heavier than this is listed, exactly
        findings += _findings(hash_name, int(counts.distinct_.sum()), a, shard_imbalance)
    return findings


def _findings(hash_name: str, keys: int, a: dict, shard_imbalance: float) -> list[Finding]:
    shard, share, fair = a["hottest_shard"], a["load_share"], a["fair_share"]
    excess = share - fair
    points = a["points_from_heavy_keys"]
    hot = excess / fair > shard_imbalance and points >= 0.5 * excess
    many = a["heavy_keys_on_shard"]
    keys_word = f"{many} key" + ("" if many == 1 else "s")
    verb = "makes" if many == 1 else "make"
    hash_heavy = a["distinct_share"] > a["ideal_max_distinct_share"]
    hash_part = (
        f"by distinct keys it holds {_pct(a['distinct_share'])}, more than the {_pct(a['ideal_max_distinct_share'])} an "
        "ideal hash gives its fullest shard in 99 cases out of 100: the hash places too many keys there"
        if hash_heavy
        else f"by distinct keys it holds {_pct(a['distinct_share'])} (an ideal hash gives its fullest shard up to "
        f"{_pct(a['ideal_max_distinct_share'])} in 99 cases out of 100): the hash itself is balanced"
    )
    sentence = (
        f"shard {shard} carries {_pct(share)} of the load against a fair {_pct(fair)}; "
        + (
            f"{100 * points:.1f} points of that are {keys_word}; "
            if many
            else "no key there carries even 1 % of a shard's fair load; "
        )
        + hash_part
    )
    hot_sentence = (
        f"{keys_word} {verb} shard {shard} hot: {_points(points, excess)} above a fair share "
        f"(the heaviest alone {_pct(a['heaviest_key_share'])} of all load) — split or cache {'that key' if many == 1 else 'those keys'}; the hash is "
        "not to blame"
        if hot
        else f"no few keys explain shard {shard}'s load ({_pct(share)} against a fair {_pct(fair)})"
    )
    where = {k: a[k] for k in ("shards", "shard_scheme")}
    common = dict(a)

    def finding(check: str, verdict: str, effect: Effect, message: str) -> Finding:
        return Finding(
            hash_name,
            check,
            None,
            None,
            max(keys, 1),
            effect.observed,
            effect.ideal,
            effect.observed,
            1.0,
            1.0,
            1.0,
            "heaviest keys from a Misra-Gries summary, placed on shards by this hash",
            effect,
            shard_imbalance,
            verdict,
            "none",
            message,
            {**where, **common},
        )

    hot_effect = Effect(
        "hot_key_share", points, points, 0.0, "points of the hottest shard's load share from its heaviest keys"
    )
    load_effect = Effect(
        "load_excess",
        excess / fair if fair > 0 else math.nan,
        share,
        fair,
        "hottest shard's share of the load against its fair share",
    )
    return [
        finding("hot_keys", "info" if hot else "pass", hot_effect, hot_sentence),
        finding("load_attribution", "info", load_effect, sentence),
    ]
