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
from hashaudit.verdict.words import count


def _pct(x: float) -> str:
    return f"{100 * x:.1f} %"


def load_findings(
    hash_name: str,
    placed: list[tuple[Any, list[tuple[bytes, float, int]]]],
    heavy: HeavyKeys,
    shard_imbalance: float,
    unit: str = "shard",
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
    unit : str, default "shard"
        What the sentences call a shard (a placement's ``partition``, ``node``, ``slot``).
    """
    findings = []
    for counts, keys in placed:
        if float(counts.load_.sum()) <= 0:  # every weight zero: no load to attribute
            continue
        a = attribute_load(counts, keys, float(counts.load_.sum()))
        a["heavy_keys_exact"] = heavy.exact
        a["heavy_count_error"] = rounded(heavy.error_)
        a["heavy_keys_above"] = rounded(heavy.floor_)  # settled: every key heavier than this is listed, exactly
        findings += _findings(hash_name, int(counts.distinct_.sum()), a, shard_imbalance, unit)
    return findings


def _findings(hash_name: str, keys: int, a: dict, shard_imbalance: float, unit: str) -> list[Finding]:
    shard, share, fair = a["hottest_shard"], a["load_share"], a["fair_share"]
    excess = share - fair
    points = a["points_from_heavy_keys"]
    hot = excess / fair > shard_imbalance and points >= 0.5 * excess
    many = a["heavy_keys_on_shard"]
    keys_word = count(many, "key")
    total = a["total_load"] or 1.0
    without = a["share_without_heavy_keys"]
    # every share below is of the whole load (or, "without", of the load the other keys carry), and every
    # "points" is a difference of two such shares: the shard's share above its fair share
    carried = (
        f"that key alone carries {_pct(a['heaviest_key_share'])} of all load"
        if many == 1
        else f"those keys carry {_pct(a['heavy_load_on_shard'] / total)} of all load (the heaviest alone "
        f"{_pct(a['heaviest_key_share'])})"
    )
    hash_heavy = a["distinct_share"] > a["ideal_max_distinct_share"]
    hash_part = (
        f"by distinct keys it holds {_pct(a['distinct_share'])}, more than the {_pct(a['ideal_max_distinct_share'])} an "
        f"ideal hash gives its fullest {unit} in 99 cases out of 100: the hash places too many keys there"
        if hash_heavy
        else f"by distinct keys it holds {_pct(a['distinct_share'])} (an ideal hash gives its fullest {unit} up to "
        f"{_pct(a['ideal_max_distinct_share'])} in 99 cases out of 100): the hash itself is balanced"
    )
    above = f"{100 * excess:.1f} points above"
    sentence = (
        f"{unit} {shard} carries {_pct(share)} of the load against a fair {_pct(fair)} ({above}); "
        + (
            f"{count(many, 'heavy key')} there: {carried}, and without {'it' if many == 1 else 'them'} the {unit} would carry "
            f"{_pct(without)} of the rest; "
            if many
            else f"no key there carries even 1 % of a {unit}'s fair load; "
        )
        + hash_part
    )
    left = without - fair
    gone = (
        "all of the excess goes"
        if left <= 0
        else f"{100 * left:.1f} of the {100 * excess:.1f} points above a fair share stay"
    )
    hot_sentence = (
        f"{keys_word} {'makes' if many == 1 else 'make'} {unit} {shard} hot ({_pct(share)} of the load against a fair "
        f"{_pct(fair)}): {carried}; without {'it' if many == 1 else 'them'} the {unit} would carry {_pct(without)} "
        f"of the rest, so {gone} — split or cache {'that key' if many == 1 else 'those keys'}; the hash is not to "
        "blame"
        if hot
        else f"no few keys explain {unit} {shard}'s load ({_pct(share)} against a fair {_pct(fair)})"
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
        "hot_key_share",
        points,
        points,
        0.0,
        "how far the hottest shard's share of the load falls without its heaviest keys (a difference of shares)",
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
