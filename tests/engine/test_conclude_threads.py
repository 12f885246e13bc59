"""The conclusion step on several threads: the same result as on one, shared work built once, and a failure or a
signal stops it without running the rest."""

from __future__ import annotations

import json
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pytest

from hashaudit.checks import Conclusion
from hashaudit.engine.conclude import _conclude_groups
from hashaudit.engine.plan import AuditPlan
from hashaudit.engine.runner import audit_batches
from hashaudit.keys.batch import KeyBatch
from hashaudit.report.json_report import report_dict


def _keys() -> list[bytes]:
    rng = np.random.default_rng(20261203)
    return [b"sku-%d-%s" % (i, bytes(rng.integers(97, 123, size=6, dtype=np.uint8))) for i in range(6000)]


def test_groups_concluded_on_four_threads_give_the_one_thread_result_and_figures():
    plan = AuditPlan(hashes=("murmur3_32", "fnv1a_32", "xxh3_64"), buckets=(1024, 1021), schemes=("mod", "mask"))
    batches = [KeyBatch.from_keys(_keys())]
    one = audit_batches(batches, plan, threads=1, figures=True)
    four = audit_batches(batches, plan, threads=4, figures=True)
    docs = [report_dict(r) for r in (one, four)]
    for doc in docs:
        doc.pop("run")
    assert json.dumps(docs[0]) == json.dumps(docs[1])  # same findings, in the same order
    assert list(one.plots) == list(four.plots) == list(plan.hashes)
    for name in plan.hashes:
        assert list(one.plots[name]) == list(four.plots[name])  # the figures in the groups' order
        assert "no_collision" in one.plots[name]


def test_once_builds_shared_work_once_while_threads_ask_for_it():
    ctx = Conclusion(plan=None, states=[], tables=[], keys=0, occurrences=0)
    built = []

    def build():
        built.append(threading.get_ident())
        time.sleep(0.05)  # long enough for every other thread to ask meanwhile
        return len(built)

    got: list[int] = []
    threads = [
        threading.Thread(target=lambda: got.append(ctx.for_one_group().once("families", build))) for _ in range(8)
    ]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert built and len(built) == 1
    assert got == [1] * 8
    assert ctx.shared == {"families": 1}


def _units(count: int, ran: list[int], failing: int | None = None) -> list[tuple[SimpleNamespace, SimpleNamespace]]:
    def conclude_of(i: int):
        def conclude(ctx, state):
            ran.append(i)
            if i == failing:
                raise ValueError(f"unit {i} failed")
            time.sleep(0.1)
            ctx.plot(state.spec.name, f"figure {i}", i)
            return [(None, None, i, f"test {i}")]

        return conclude

    state = SimpleNamespace(spec=SimpleNamespace(name="h"))
    return [(state, SimpleNamespace(name=f"g{i}", conclude=conclude_of(i))) for i in range(count)]


def test_units_come_back_in_their_order_with_their_own_figures():
    ran: list[int] = []
    ctx = Conclusion(plan=None, states=[], tables=[], keys=0, occurrences=0)
    got = list(_conclude_groups(ctx, _units(6, ran), workers=3, phase=None))
    assert [tested for _, tested in got] == [[("h", None, None, i, f"test {i}")] for i in range(6)]
    assert [plots for plots, _ in got] == [{"h": {f"figure {i}": i}} for i in range(6)]
    assert ctx.plots == {}  # merged by the caller, in order
    assert sorted(ran) == list(range(6))


def test_a_failing_group_reaches_the_caller_and_the_groups_not_started_never_run():
    ran: list[int] = []
    ctx = Conclusion(plan=None, states=[], tables=[], keys=0, occurrences=0)
    with pytest.raises(ValueError, match="unit 0 failed"):
        list(_conclude_groups(ctx, _units(40, ran, failing=0), workers=2, phase=None))
    time.sleep(0.3)  # the units under way finish
    assert 0 in ran and len(ran) < 10, ran


def _sigterm_once_marked(argv: list[str], marker: Path, delay: float) -> tuple[int, bytes, float]:
    """Run ``argv`` in a child, send SIGTERM ``delay`` seconds after ``marker`` appears; (exit code, stderr, seconds
    from the signal to the end)."""
    child = subprocess.Popen(argv, stderr=subprocess.PIPE)
    try:
        deadline = time.monotonic() + 120
        while not marker.exists():
            assert child.poll() is None, child.stderr.read() if child.stderr else b""
            assert time.monotonic() < deadline, "the conclusion step never started"
            time.sleep(0.002)
        time.sleep(delay)
        sent = time.monotonic()
        child.send_signal(signal.SIGTERM)
        _, err = child.communicate(timeout=60)
        return child.returncode, err, time.monotonic() - sent
    finally:
        if child.poll() is None:
            child.kill()
            child.wait()


_CHILD = """
import dataclasses, sys, time
from pathlib import Path
import hashaudit.engine.plan as plan_module
from hashaudit import cli

marker, log = Path(sys.argv[1]), Path(sys.argv[2])

def slow(conclude):
    def run(ctx, state):
        with log.open("a") as f:
            f.write("unit\\n")
        marker.touch()
        time.sleep(0.5)
        return conclude(ctx, state)
    return run

plan_module.GROUPS = tuple(
    dataclasses.replace(g, conclude=slow(g.conclude)) if g.conclude is not None else g for g in plan_module.GROUPS
)
cli.main(sys.argv[3:])
"""


@pytest.mark.skipif(sys.platform == "win32", reason="POSIX signals")
@pytest.mark.parametrize("attempt", range(3))
def test_sigterm_while_groups_conclude_on_threads_ends_promptly_with_143(tmp_path: Path, attempt: int):
    keys = tmp_path / "keys.txt"
    keys.write_text("".join(f"order-{i:07d}\n" for i in range(3000)))
    marker, log = tmp_path / "concluding", tmp_path / "units"
    args = ["audit", str(keys), "-H", "murmur3_32", "-H", "fnv1a_32", "-H", "xxh3_64", "--threads", "2", "-q"]
    code, err, waited = _sigterm_once_marked(
        [sys.executable, "-c", _CHILD, str(marker), str(log), *args],
        marker,
        0.05 * attempt,  # several moments
    )
    assert code == 143, err
    assert err == b"", err
    assert waited < 5, waited  # the two groups under way finish (0.5 s each), no more
    units = log.read_text().count("unit")
    assert units <= 4, units  # of the audit's 18 groups of three hashes, the rest never started


_SPILL_CHILD = """
import dataclasses, sys, time
from pathlib import Path
import hashaudit.engine.plan as plan_module
from hashaudit import cli

marker = Path(sys.argv[1])

def marked(conclude):
    def run(ctx, state):
        marker.touch()  # the collision values of this hash are read back from the spill files now
        return conclude(ctx, state)
    return run

plan_module.GROUPS = tuple(
    dataclasses.replace(g, conclude=marked(g.conclude)) if g.name == "collisions" else g for g in plan_module.GROUPS
)
cli.main(sys.argv[2:])
"""


@pytest.mark.skipif(sys.platform == "win32", reason="POSIX signals")
@pytest.mark.parametrize("delay", [0.0, 0.02, 0.06])
def test_sigterm_while_spilled_values_are_read_back_on_threads_leaves_no_spill_file(tmp_path: Path, delay: float):
    rng = np.random.default_rng(20261203)
    keys = tmp_path / "keys.txt"
    keys.write_text("".join(f"parcel-{v:016x}\n" for v in rng.integers(0, 2**63, size=300_000).tolist()))
    spill = tmp_path / "spill"
    spill.mkdir()
    marker = tmp_path / "concluding"
    args = ["audit", str(keys), "-H", "xxh3_64", "-H", "murmur3_128", "-H", "fnv1a_64", "--checks", "collisions",
            "--collision-memory", "64k", "--spill-dir", str(spill), "--threads", "2", "-q"]  # fmt: skip
    code, err, _ = _sigterm_once_marked([sys.executable, "-c", _SPILL_CHILD, str(marker), *args], marker, delay)
    assert code == 143, err
    assert err == b"", err
    assert list(spill.iterdir()) == [], "spill files left behind"
