"""The progress line names the phases after the reading once they take long, and a whole audit tells it each one."""

from __future__ import annotations

import io
import time
from pathlib import Path

import hashaudit.report.progress as progress_module
from hashaudit.engine.plan import AuditPlan
from hashaudit.engine.sources import audit
from hashaudit.report.progress import ProgressLine

ORDERS = Path(__file__).parents[2] / "sample_keys" / "orders.txt"


class Recorder:
    """A progress callable that keeps the phases it is told."""

    def __init__(self) -> None:
        self.keys = 0
        self.phases: list[str] = []

    def __call__(self, keys: int) -> None:
        self.keys += keys

    def phase(self, label: str) -> None:
        self.phases.append(label)


def test_every_check_group_of_every_hash_is_announced():
    recorder = Recorder()
    plan = AuditPlan(hashes=("xxh3_64", "crc32"), buckets=(1 << 12,), shards=(8,))
    audit([ORDERS], plan, progress=recorder)
    assert recorder.keys == 120_000
    for name in ("xxh3_64", "crc32"):
        for group in plan.checks:
            if group not in ("shards",):  # a group that only adds facts is announced once, as facts
                assert f"{group} checks of {name}" in recorder.phases, (group, recorder.phases)
    assert "shards facts" in recorder.phases
    assert recorder.phases.index("concluding") < recorder.phases.index("buckets checks of xxh3_64")


def test_a_long_phase_is_drawn_with_its_time_and_erased_at_the_end(monkeypatch):
    monkeypatch.setattr(progress_module, "PHASE_DELAY", 0.05)
    out = io.StringIO()
    line = ProgressLine(out, delay=0.0, interval=0.02)
    line(1000)
    line.phase("avalanche checks of xxh3_64")
    time.sleep(0.3)
    line.close()
    drawn = out.getvalue()
    assert "hashaudit: 1,000 keys read; avalanche checks of xxh3_64 (0 s)" in drawn
    assert drawn.endswith("\r")  # erased: the report that follows starts on a clean line


def test_a_short_phase_draws_nothing(monkeypatch):
    monkeypatch.setattr(progress_module, "PHASE_DELAY", 60.0)
    out = io.StringIO()
    line = ProgressLine(out, delay=100.0)
    line.phase("bits checks of crc32")
    time.sleep(0.3)
    line.close()
    assert out.getvalue() == ""
