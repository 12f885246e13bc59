"""One screen says one thing: each line names its check, a hot key's numbers say what each one is, a warning's
words agree with the sign of its effect, the baseline says a number once, and a count of one takes the singular."""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pytest

from hashaudit import AuditPlan, KeyBatch, SourceOptions, audit, audit_batches
from hashaudit.checks import CHECKS
from hashaudit.report.baseline import compare, comparison_text
from hashaudit.report.terminal import render
from hashaudit.stats.outcome import Effect, FitTest
from hashaudit.verdict.words import count

SAMPLE_KEYS = Path(__file__).resolve().parents[2] / "sample_keys"


def test_count_takes_the_singular_for_one_only():
    assert count(1, "probe") == "1 probe" and count(1.0, "probe") == "1 probe"
    assert count(2.04, "probe") == "2.04 probes" and count(0, "group") == "0 groups"
    assert count(1_250_000, "key") == "1.25 M keys" and count(1_250_000, "key", exact=True) == "1,250,000 keys"
    assert count(1, "hash function") == "1 hash function" and count(3, "shelf", "shelves") == "3 shelves"


def _test(name: str, effect: Effect, **details: object) -> FitTest:
    return FitTest(name, 1.0, 1.0, 1.0, 0.0, 1.0, "hand-made", effect, dict(details))


@pytest.mark.parametrize(
    ("check", "effect", "details", "singular"),
    [
        ("colliding_pairs", Effect("lookup_cost_excess", 0.0, 1.0, 1.0, "probes"), {}, "costs 1 probe against"),
        ("max_load", Effect("max_load_ratio", 1.0, 1.0, 1.0, "keys"), {}, "holds 1 key against"),
        (
            "probe_cost",
            Effect("probe_cost_excess", 0.0, 1.0, 1.0, "probes"),
            {"table_kind": "linear", "slots": 1, "load": 0.5, "search": "hit"},
            "table of 1 slot at load 0.5: a successful lookup costs 1 probe against",
        ),
        (
            "full_collisions",
            Effect("colliding_pairs", 1.0, 1.0, 0.0, "pairs"),
            {"keys_in_collisions": 2, "groups": 1, "width": 32},
            "(1 group): 1 colliding pair against",
        ),
        (
            "seed_independent_collisions",
            Effect("colliding_pairs", 1.0, 1.0, 0.0, "pairs"),
            {"keys_in_collisions": 2, "groups": 1, "seeds": [7]},
            "under every one of 1 seed (1 group)",
        ),
    ],
)
def test_sentences_of_one_take_the_singular(check, effect, details, singular):
    sentence = CHECKS[check].sentence(_test(check, effect, **details))
    assert singular in sentence
    assert not re.search(r"\b1 (probes|keys|slots|groups|seeds|colliding pairs)\b", sentence)


@pytest.fixture(scope="module")
def light_and_empty():
    """Identity-hashed integers on 2^14 buckets: 45 % of the buckets hold two keys, 45 % none, 10 % one. G weighs
    the empty and light buckets and finds the counts uneven; the colliding pairs (and so the chained lookup cost)
    are fewer than random."""
    m = 1 << 14
    buckets = np.arange(m, dtype=np.uint64)
    twos, ones = buckets[: int(0.45 * m)], buckets[int(0.45 * m) : int(0.55 * m)]
    keys = KeyBatch.from_uint64(np.concatenate([twos, twos + np.uint64(m), ones]))
    plan = AuditPlan(hashes=("identity",), buckets=(m,), schemes=("mask",), checks=("buckets",))
    return audit_batches([keys], plan)


def test_an_uneven_g_with_a_cheaper_lookup_says_so(light_and_empty):
    (g,) = [f for f in light_and_empty.findings if f.check == "g_test"]
    assert g.verdict == "warn" and g.effect.value < 0
    assert "more uneven than random (G = " in g.message
    assert "in the light and empty buckets, not in the cost of lookups" in g.message
    assert re.search(r"costs [\d.]+ probes against [\d.]+ for an ideal hash \(-\d+\.\d %\)$", g.message)


def test_no_uneven_warning_or_failure_reads_against_its_effect(eight_hashes, light_and_empty):
    for result in (eight_hashes, light_and_empty):
        for f in result.findings:
            if f.check in ("chi_square", "g_test") and f.verdict in ("warn", "fail"):
                cheaper = f.effect.value <= 0
                assert cheaper == ("not in the cost of lookups" in f.message), f.message


def test_a_simulated_table_that_is_too_even_names_its_check_and_table(poly_and_crc):
    """crc32's bucket table of mask 2^16 fails while its simulated tables are more even than random: two checks,
    two tables, each line says which."""
    lines = render(poly_and_crc).splitlines()
    failing = next(ln for ln in lines if ln.startswith("FAIL") and re.search(r"crc32 +mask 2\^16 ", ln))
    assert re.search(r"mask 2\^16 +colliding_pairs +\d", failing)
    even = [ln for ln in lines if ln.startswith("INFO") and re.search(r"crc32 +chaining mask 2\^16 ", ln)]
    assert len(even) == 1
    assert re.search(
        r"chaining mask 2\^16 +probe_cost +chaining table of 65,536 slots filled with the first keys", even[0]
    )
    assert "lookups cost fewer probes than random" in even[0]


@pytest.fixture(scope="module")
def hot_parcel():
    """The sample tracking lookups weighted by response bytes: one parcel carries most of the bytes."""
    options = SourceOptions(columns=["parcel"], weight_column="bytes")
    plan = AuditPlan(hashes=("xxh3_64", "fnv1a_32"), shards=(8,), checks=("shards",))
    return audit([SAMPLE_KEYS / "tracking_lookups.csv"], plan, options)


def _percent(text: str, before: str) -> float:
    return float(re.search(rf"(\d+\.\d) % {before}", text).group(1))  # type: ignore[union-attr]


def test_a_hot_key_s_numbers_agree_and_say_what_they_are(hot_parcel):
    for hash_name in ("xxh3_64", "fnv1a_32"):
        mine = {f.check: f for f in hot_parcel.findings if f.hash_name == hash_name}
        attribution, hot = mine["load_attribution"].message, mine["hot_keys"].message
        assert mine["hot_keys"].verdict == "info"
        share = _percent(attribution, "of the load against a fair")
        fair = float(re.search(r"against a fair (\d+\.\d) %", attribution).group(1))  # type: ignore[union-attr]
        above = float(re.search(r"\((\d+\.\d) points above\)", attribution).group(1))  # type: ignore[union-attr]
        assert abs(share - fair - above) <= 0.11  # the points are the share above the fair share
        key = _percent(attribution, "of all load")
        assert _percent(hot, "of all load") == key and key > above
        assert f"{share:.1f} % of the load against a fair {fair:.1f} %" in hot
        rest = _percent(hot, "of the rest")
        assert rest == _percent(attribution, "of the rest") and rest < share
        # every number called points is the share above the fair share, said once per sentence
        assert re.findall(r"(\d+\.\d) points", attribution) == [f"{above:.1f}"]
        assert set(re.findall(r"(\d+\.\d) points", hot)) <= {f"{above:.1f}"}


def test_the_baseline_says_each_effect_once():
    def report(effect: float) -> dict:
        check = {
            "name": "chi_square",
            "scheme": "mask",
            "buckets": 65536,
            "verdict": "pass",
            "effect": {"value": effect},
        }
        return {"schema": "hashaudit.audit/1", "hashes": [{"name": "crc32", "checks": [check]}]}

    rows = compare(report(0.3619), report(0.2605), 0.05)
    assert rows[0]["reason"] == "effect grew by 0.1014, more than the tolerance 0.05"
    first, line = comparison_text(rows).splitlines()
    assert first == "against the baseline: 1 check compared, 1 regressed, 0 unchanged"
    assert line.count("0.2605") == 1 and line.count("0.3619") == 1
    assert line.endswith("effect 0.2605 → 0.3619  (effect grew by 0.1014, more than the tolerance 0.05)")
