"""``placement``: where keys land in a system that is really run — a topic's partitions, a cluster's slots and
nodes — under that system's exact placement rule (``hashaudit.placements.rules``), against an ideal hash placed by
the same rule, and how many keys move when the system grows. Each placement is a subject of its own in the reports.

``placement_balance`` also gives, as the shard checks' ``hot_keys`` and ``load_attribution`` do, the unit with the
most load (occurrences, or a weight column) over its fair share: how much of it its heaviest keys carry, and those
keys by handle (fingerprint, the system's hash value, load, unit; the key only with ``--show-keys``); its message says
it when a few keys make that unit hot (``hashaudit.checks._hot``).

Two facts that inform and never fail: ``placement_agreement`` (two rules with the same units, such as a JVM and a
C-client producer of one topic, compared key by key: the share of distinct keys they place on different units,
which is the share whose per-key order mixed producers break) and ``hash_tag_pinning`` (keys sharing a cluster hash
tag all go to one slot: how many keys have a tag, and the largest tag family's share).
"""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import replace
from typing import Any

from hashaudit.checks._base import Check, CheckGroup, Conclusion, Tested
from hashaudit.settings import Setting
from hashaudit.verdict.words import count, excess, num, pct


def _balance(test: Any) -> str:
    d, e = test.details, test.effect
    unit = d.get("unit", "unit")
    sentence = (
        f"the hottest {unit} {d.get('hottest_shard')} holds {num(d.get('hottest_keys', 0))} distinct keys, "
        f"{e.observed:.3f}× its share against an expected maximum of {e.ideal:.3f}× for an ideal hash under the same "
        f"rule ({excess(e.value)}; χ² = {num(test.statistic)} on {num(test.expected)} df)"
    )
    hot = d.get("load_attribution", {}).get("hot_message")
    if not hot:
        return sentence
    # where the shard checks would say hot_keys (a few keys make a unit hot), the finding says it too; whether the
    # rule is to blame for the distinct keys is this finding's own verdict, so the load part leaves that out
    return f"{sentence}; by load, {hot.removesuffix('; the hash is not to blame')}"


def _movement(test: Any) -> str:
    d, e = test.details, test.effect
    return (
        f"growing from {count(d.get('shards', 0), d.get('unit', 'unit'))} to {num(d.get('grown_to', d.get('shards', 0) + 1))} "
        f"moves {pct(e.observed)} of the keys against {pct(e.ideal)} for an ideal hash under the same rule"
    )


def _parse(text: str) -> Any:
    from hashaudit.placements.rules import parse_placement

    return parse_placement(text)


def _show(placements: tuple) -> list[str]:
    return [p.name if hasattr(p, "name") else str(p) for p in placements]


def _partners(subject: Any, placements: tuple) -> list:
    """The other placements with units of the same name and number: the ones compared key by key with it."""
    layout = subject.layout
    return [
        p for p in placements if p.name != subject.name and p.unit == subject.unit and p.layout.shards == layout.shards
    ]


def _accumulators(subject: Any, plan: Any, tables: list, lanes: int) -> dict:
    from hashaudit.stats.shards import ShardCounts

    kinds: dict[str, tuple[tuple[str, ...], list[Any]]] = {
        "units": (("loads", "values"), [ShardCounts(subject.name, subject.width, subject.layout)])
    }
    if _partners(subject, plan.placements):
        from hashaudit.placements.agreement import UnitRecords

        kinds["unit_records"] = (("positions",), [UnitRecords(subject.name, subject.width, subject.layout)])
    return kinds


def _conclude(ctx: Conclusion, state: Any) -> Iterator[Tested]:
    from hashaudit.stats.shards import LISTED_SHARDS, balance_tests, movement_tests

    unit = state.spec.unit
    for counts in state.get("units"):
        keys = int(counts.distinct_.sum())
        named = {"shard_balance": "placement_balance", "shard_movement": "placement_movement"}
        for test in [*balance_tests(counts), *movement_tests(counts)]:
            details = {**test.details, "unit": unit, "rule": state.spec.rule, "placement": state.spec.name}
            units = counts.layout.shards
            if (
                units <= LISTED_SHARDS
            ):  # a table of 2^18 buckets would make every report heavy: counts listed up to this
                if "keys_per_shard" not in details:
                    details["keys_per_shard"] = counts.distinct_.tolist()
                details["load_per_shard"] = [round(float(x), 6) for x in counts.load_]
            else:
                details.pop("keys_per_shard", None)
                details.pop("load_per_shard", None)
            resized = getattr(counts.layout, "resized", None)
            if test.name == "shard_movement" and resized is not None:
                details["grown_to"] = resized(units + 1).shards  # how the system grows: a unit more, or a doubling
            if test.name == "shard_balance":
                details.update(_hot_unit(ctx, state.spec, counts))
            yield None, None, keys, replace(test, name=named[test.name], details=details)


def _hot_unit(ctx: Conclusion, spec: Any, counts: Any) -> dict:
    """The shard checks' hot keys and attribution for the unit with the most load over its fair share: the heavy
    keys there by handle (``heavy_keys``; the key only with ``--show-keys``) and ``load_attribution``, with the
    sentences of ``hot_keys`` and ``load_attribution`` in the unit's own word."""
    from hashaudit.checks._hot import attribution_findings

    found = {f.check: f for f in attribution_findings(ctx, spec, [counts], spec.unit)}
    if not found:  # no heavy-key summary, or no load at all
        return {}
    hot, attribution = found["hot_keys"], found["load_attribution"]
    summary = {k: v for k, v in attribution.details.items() if k not in ("shards", "shard_scheme", "heavy_keys")}
    summary["hot"] = hot.verdict == "info"  # a few keys carry most of the excess: ``hot_keys`` would be info
    summary["message"] = attribution.message
    if summary["hot"]:
        summary["hot_message"] = hot.message
    return {"heavy_keys": attribution.details.get("heavy_keys", []), "load_attribution": summary}


def _facts(ctx: Conclusion) -> list:
    """``placement_agreement`` for every pair of placements with the same units (the finding goes to the later
    one, naming the earlier), and ``hash_tag_pinning`` for every cluster placement with hash tags."""
    states = [s for s in ctx.states if s.spec.path == "placement"]
    findings = []
    for j, later in enumerate(states):
        for earlier in states[:j]:
            if (
                later.get("unit_records")
                and earlier.get("unit_records")
                and earlier.spec in _partners(later.spec, tuple(s.spec for s in states))
            ):
                findings.append(_agreement_finding(earlier, later))
    if ctx.sample is not None:
        findings += [_pinning_finding(ctx, s) for s in states if s.spec.rule == "redis-cluster"]
    return findings


def _fact(
    subject: Any,
    check: str,
    keys: int,
    effect: Any,
    expected: float,
    method: str,
    verdict: str,
    message: str,
    details: dict,
) -> Any:
    import math

    from hashaudit.verdict.findings import Finding

    observed = float(effect.value)
    return Finding(
        subject.name,
        check,
        None,
        None,
        keys,
        observed,
        expected,
        observed,
        1.0,
        1.0,
        1.0,
        method,
        effect,
        math.nan,
        verdict,
        "none",
        message,
        details,
    )


def _agreement_finding(earlier: Any, later: Any) -> Any:
    from hashaudit.placements.agreement import agreement
    from hashaudit.stats.outcome import Effect

    a, b = earlier.spec, later.spec
    result = agreement(earlier.get("unit_records")[0], later.get("unit_records")[0])
    unit, units = b.unit, b.layout.shards
    effect = Effect(
        "disagreeing_share", result.share, result.share, 0.0, f"share of distinct keys on a different {unit}"
    )
    if result.exact:
        method = f"every distinct key compared ({num(result.compared)})"
        amount = f"{num(result.differing)} of {num(result.keys)} distinct keys ({pct(result.share)})"
    else:
        low, high = result.interval
        method = (
            f"a uniform sample of {num(result.compared)} of {num(result.keys)} distinct keys (bottom-k by stream "
            "position), 95 % Wilson interval"
        )
        amount = f"{pct(result.share)} of the distinct keys (95 % interval {pct(low)} to {pct(high)})"
    if result.differing:
        message = (
            f"{b.name} and {a.name} place {amount} on a different {unit}; producers of one topic that mix the two "
            f"lose per-key order for those keys (two unrelated rules would disagree on {pct(result.independent_share)})"
        )
    else:
        message = f"{b.name} and {a.name} place every one of {num(result.keys)} distinct keys on the same {unit}"
    details = {
        "unit": unit,
        "shards": units,
        "rule": b.rule,
        "placement": b.name,
        "compared_with": a.name,
        "keys_compared": result.compared,
        "keys_differing": result.differing,
        "share_interval": [result.interval[0], result.interval[1]],
        "independent_share": result.independent_share,
        "exact": result.exact,
    }
    verdict = "info" if result.differing else "pass"
    return _fact(
        b, "placement_agreement", result.keys, effect, result.independent_share, method, verdict, message, details
    )


def _pinning_finding(ctx: Conclusion, state: Any) -> Any:
    import numpy as np

    from hashaudit.placements.redis_cluster import SLOTS, crc16, hash_tag_spans
    from hashaudit.stats.outcome import Effect

    spec, sample = state.spec, ctx.sample
    keys = sample.keys()
    start, stop = hash_tag_spans(keys)
    tagged = np.flatnonzero((start > 0) | (stop < keys.lengths()))
    data, offsets = keys.data, keys.offsets
    tags = [bytes(data[offsets[i] + start[i] : offsets[i] + stop[i]]) for i in tagged.tolist()]  # a sample only
    families: dict[bytes, int] = {}
    for tag in tags:
        families[tag] = families.get(tag, 0) + 1
    largest_tag, largest = max(families.items(), key=lambda item: (item[1], item[0]), default=(b"", 0))
    sampled, distinct = len(sample), max(ctx.keys, len(sample))
    exact = sampled >= distinct or sampled < sample.size
    scale = 1.0 if exact else distinct / sampled
    share = largest / sampled if sampled else 0.0
    tagged_share = len(tags) / sampled if sampled else 0.0
    slot = int(crc16(type(keys).from_keys([largest_tag]))[0]) % SLOTS if largest else None
    node = int(spec.layout.owners[slot]) if slot is not None else None
    effect = Effect("pinned_share", share, share, 1.0 / SLOTS, "share of distinct keys in the largest tag family")
    how = "" if exact else f" (estimated from a uniform sample of {num(sampled)} distinct keys)"
    # the tag is part of the keys, which reports never show: it is named by its slot and node, and its length
    if largest > 1:
        message = (
            f"{num(round(len(tags) * scale))} distinct keys ({pct(tagged_share)}) carry a hash tag{how}; the largest "
            f"tag family (a tag of {count(len(largest_tag), 'byte')}) pins {num(round(largest * scale))} keys ({pct(share)}) to slot {slot} on node "
            f"{node}: a key-design observation, not the hash's doing"
        )
    elif tags:
        message = (
            f"{num(round(len(tags) * scale))} distinct keys ({pct(tagged_share)}) carry a hash tag{how}; no tag "
            "is shared by two keys"
        )
    else:
        message = f"no key carries a hash tag{how}: every key is hashed whole"
    details = {
        "unit": spec.unit,
        "shards": spec.layout.shards,
        "rule": spec.rule,
        "placement": spec.name,
        "keys_sampled": sampled,
        "exact": exact,
        "tagged_keys": round(len(tags) * scale),
        "tagged_share": tagged_share,
        "tag_families": len(families),
        "largest_family_keys": round(largest * scale),
        "largest_family_tag_bytes": len(largest_tag),
        "largest_family_slot": slot,
        "largest_family_node": node,
    }
    method = "every distinct key" if exact else f"a uniform sample of {sampled} distinct keys (bottom-k)"
    return _fact(
        spec,
        "hash_tag_pinning",
        distinct,
        effect,
        1.0 / SLOTS,
        method,
        "info" if largest > 1 else "pass",
        message,
        details,
    )


GROUP = CheckGroup(
    "placement",
    "keys over a real system's units under its exact placement rule (--placement turns it on)",
    (
        Check(
            "placement_balance",
            _balance,
            null_law="uniform_p",
            help="distinct keys per unit (partition, node) under the system's rule",
            figure="shards",
        ),
        Check(
            "placement_movement",
            _movement,
            null_law="uniform_p",
            help="keys moving when the system gains a unit",
        ),
        Check(
            "placement_agreement",
            facts_only=True,
            null_law="facts",
            help="share of distinct keys two rules with the same units place differently (mixed producers)",
        ),
        Check(
            "hash_tag_pinning",
            facts_only=True,
            null_law="facts",
            help="keys a cluster hash tag pins to one slot: tagged keys and the largest tag family",
        ),
    ),
    default=False,
    settings=(
        Setting(
            "placements",
            "checks",
            "A system's placement rule with its parameters (repeatable), e.g. kafka:partitions=12; "
            "hashaudit placements lists every rule and its parameters.",
            default=(),
            kind="text",
            parse=_parse,
            show=_show,
            repeatable=True,
            flag="--placement",
            metavar="NAME:PARAM=N",
        ),
    ),
    requires="placements",
    subjects="placements",
    accumulators=_accumulators,
    conclude=_conclude,
    facts=_facts,
    needs_sample=True,
    needs_heavy=True,
)
