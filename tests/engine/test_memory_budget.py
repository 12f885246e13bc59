"""One memory budget shared by the stores (--memory), the peak memory in ``run``, and results that do not depend
on either."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from cli_runner import run

from hashaudit.engine.memory import BASE_BYTES, DEFAULT_CAP, MIN_DISTINCT, count_bytes, default_memory
from hashaudit.engine.plan import AuditPlan
from hashaudit.settings import SettingError


def test_the_default_budget_is_a_quarter_of_the_machine_at_most_one_gib():
    assert default_memory() <= DEFAULT_CAP
    assert default_memory() >= 64 << 20


@pytest.mark.parametrize("memory", ["512m", "1g", "3g"])
def test_the_stores_share_the_budget(memory):
    plan = AuditPlan(memory=memory)
    total = {"512m": 512 << 20, "1g": 1 << 30, "3g": 3 << 30}[memory]
    tables = count_bytes(
        {"checks": plan.checks, "buckets": plan.buckets, "schemes": plan.schemes, "hashes": plan.hashes}
    )
    stores = plan.distinct_memory + plan.collision_memory * len(plan.hashes)
    assert stores <= max(total - BASE_BYTES - tables, 32 << 20) + 1
    assert plan.distinct_memory >= MIN_DISTINCT
    assert plan.distinct_memory > plan.collision_memory  # another read costs more than a spill


def test_more_memory_gives_every_store_more():
    small, large = AuditPlan(memory="768m"), AuditPlan(memory="4g")
    assert large.distinct_memory > small.distinct_memory
    assert large.collision_memory > small.collision_memory


def test_a_store_given_outright_keeps_its_budget_and_the_others_share_the_rest():
    plan = AuditPlan(memory="2g", distinct_memory="100m")
    assert plan.distinct_memory == 100 << 20
    assert plan.collision_memory > AuditPlan(memory="2g").collision_memory
    assert AuditPlan(collision_memory="5m").collision_memory == 5 << 20


def test_without_the_collision_check_the_distinct_keys_take_every_store_byte():
    both, alone = AuditPlan(memory="1g"), AuditPlan(memory="1g", checks="buckets")
    tables = count_bytes({"checks": alone.checks, "buckets": alone.buckets, "schemes": alone.schemes,
                          "hashes": alone.hashes})  # fmt: skip
    assert alone.distinct_memory == (1 << 30) - BASE_BYTES - tables  # 18 M distinct keys fit in one read
    assert alone.distinct_memory > both.distinct_memory


def test_every_occurrence_counted_leaves_the_distinct_share_to_the_collisions():
    assert AuditPlan(memory="2g", all_keys=True).collision_memory > AuditPlan(memory="2g").collision_memory


def test_a_budget_below_the_floor_names_the_setting():
    with pytest.raises(SettingError) as caught:
        AuditPlan(memory="1m")
    assert caught.value.setting == "memory"


def test_results_do_not_depend_on_the_budget_and_run_shows_the_peak(tmp_path: Path):
    keys = tmp_path / "k.txt"
    keys.write_text("".join(f"order-{i * 7919 % 100_003}\n" for i in range(60_000)))
    reports = []
    for extra in ([], ["--memory", "64m"], ["--memory", "64m", "--collision-memory", "0"]):
        report = tmp_path / f"r{len(reports)}.json"
        code, _, err = run(["audit", str(keys), "-H", "xxh3_64", "-H", "crc32", "-q", "--json", str(report), *extra])
        assert code in (0, 1), err
        reports.append(json.loads(report.read_text()))
    peaks = [r["run"]["peak_memory_bytes"] for r in reports]
    assert all(isinstance(p, int) and p > 10 << 20 for p in peaks)
    for r in reports:
        r.pop("run")
    assert reports[0] == reports[1] == reports[2]
