"""The helper that compiles half the kernels of a first audit (hashaudit.engine.warmup): when it starts, what it
audits, that it compiles the kernels the audit will ask for (same signatures), and that it changes no result."""

from __future__ import annotations

import json
import os
import pickle
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

from hashaudit.engine import warmup
from hashaudit.engine.plan import AuditPlan
from hashaudit.keys.batch import KeyBatch

ORDERS = Path(__file__).resolve().parents[2] / "sample_keys" / "orders.txt"


def test_the_helper_plan_reverses_the_hashes_and_shrinks_the_tables():
    plan = AuditPlan(hashes=("murmur3_32", "xxh3_64", "crc32"), buckets=(1 << 24, 1000003), schemes=("mod", "mask"))
    small = warmup.helper_plan(plan)
    assert small.hashes == ("crc32", "xxh3_64", "murmur3_32")
    assert small.buckets == (warmup.SMALL_TABLE, warmup.SMALL_PRIME)
    assert small.all_keys and small.spill_dir is None
    assert small.checks == plan.checks and small.schemes == plan.schemes and small.seed == plan.seed


def test_the_stand_in_hashes_have_the_width_and_shape_of_real_ones():
    batch = KeyBatch.from_keys(warmup.helper_keys(5000) + [b""])
    for width in (32, 64, 128):
        values = warmup.stand_in(width)(batch, 7)
        assert values.dtype == np.uint64 and values.flags.c_contiguous
        assert values.shape == ((len(batch), 2) if width == 128 else (len(batch),))
        if width == 32:
            assert int(values.max()) < 1 << 32
        assert len(np.unique(values, axis=0)) >= len(batch) - 1  # distinct keys, distinct values (all but chance)
        np.testing.assert_array_equal(values, warmup.stand_in(width)(batch, 7))


_COLD = """
import sys
from hashaudit.engine.warmup import cache_is_cold
print(cache_is_cold())
if sys.argv[1] == "compile":
    from hashaudit.hashes.fingerprint import key_fingerprints_128
    from hashaudit.keys.batch import KeyBatch
    key_fingerprints_128(KeyBatch.from_keys([b"a", b"bc"]))
    print(cache_is_cold())
"""


def test_the_cache_is_cold_until_the_fingerprint_kernel_is_saved(tmp_path):
    env = {k: v for k, v in os.environ.items() if k != "NUMBA_CACHE_DIR"}
    env["HASHAUDIT_CACHE_DIR"] = str(tmp_path / "cache")  # read when the kernels are defined: in a child
    run = [sys.executable, "-c", _COLD]
    out = subprocess.run([*run, "compile"], env=env, capture_output=True, text=True, check=True, timeout=300)
    assert out.stdout.split() == ["True", "False"]
    out = subprocess.run([*run, "look"], env=env, capture_output=True, text=True, check=True, timeout=300)
    assert out.stdout.split() == ["False"]  # another process finds it saved


def test_no_helper_when_turned_off_when_the_cache_is_warm_or_numba_caches_elsewhere(monkeypatch, tmp_path):
    plan = AuditPlan(hashes=("fnv1a_32",))
    monkeypatch.delenv("NUMBA_CACHE_DIR", raising=False)
    monkeypatch.setattr(os, "cpu_count", lambda: 2)
    monkeypatch.setattr(warmup, "cache_is_cold", lambda: True)
    monkeypatch.setenv("HASHAUDIT_WARM_UP", "0")
    assert warmup.start(plan) is None
    monkeypatch.setenv("HASHAUDIT_WARM_UP", "1")
    monkeypatch.setattr(os, "cpu_count", lambda: 1)
    assert warmup.start(plan) is None  # no second core
    monkeypatch.undo()
    monkeypatch.delenv("HASHAUDIT_WARM_UP", raising=False)
    monkeypatch.setenv("NUMBA_CACHE_DIR", str(tmp_path / "numba"))
    assert not warmup.cache_is_cold() and warmup.start(plan) is None
    monkeypatch.delenv("NUMBA_CACHE_DIR")
    from hashaudit.hashes.fingerprint import key_fingerprints_128

    key_fingerprints_128(KeyBatch.from_keys([b"a"]))  # compiled and saved, if no audit of this process did it yet
    assert not warmup.cache_is_cold() and warmup.start(plan) is None


def test_a_helper_is_stopped_and_leaves_no_plan_file(monkeypatch, tmp_path):
    monkeypatch.setenv("HASHAUDIT_CACHE_DIR", str(tmp_path / "cache"))
    monkeypatch.delenv("NUMBA_CACHE_DIR", raising=False)
    monkeypatch.delenv("HASHAUDIT_WARM_UP", raising=False)
    monkeypatch.setattr(os, "cpu_count", lambda: 2)
    monkeypatch.setattr(warmup, "cache_is_cold", lambda: True)
    helper = warmup.start(AuditPlan(hashes=("fnv1a_32",)))
    assert helper is not None
    plan_file = Path(helper.args[-1])
    time.sleep(0.2)
    warmup.stop(helper)
    assert helper.returncode is not None
    assert not plan_file.exists()


def _compiled_kernels(env: dict, args: list[str]) -> list[str]:
    """The hashaudit kernels an audit compiled (not loaded from the cache), in a child process."""
    code = (
        "import sys\n"
        "from numba.core import event\n"
        "seen = []\n"
        "class L(event.Listener):\n"
        "    def on_start(self, ev): pass\n"
        "    def on_end(self, ev):\n"
        "        f = ev.data['dispatcher'].py_func\n"
        "        seen.append(f.__module__ + '.' + f.__qualname__)\n"
        "event.register('numba:compile', L())\n"
        "from hashaudit.cli import main\n"
        "try:\n"
        "    main(sys.argv[1:])\n"
        "except SystemExit:\n"
        "    pass\n"
        "print('\\n'.join(s for s in seen if s.startswith('hashaudit.')), file=sys.stderr)\n"
    )
    out = subprocess.run([sys.executable, "-c", code, *args], env=env, capture_output=True, text=True, timeout=600)
    return [line for line in out.stderr.splitlines() if line.startswith("hashaudit.")]


# a helper and an audit compiling from an empty cache: about 25 s
@pytest.mark.slow
def test_the_helper_compiles_the_kernels_the_audit_asks_for(tmp_path):
    env = {k: v for k, v in os.environ.items() if k not in ("NUMBA_CACHE_DIR",)}
    env["HASHAUDIT_CACHE_DIR"] = str(tmp_path / "cache")
    env["HASHAUDIT_WARM_UP"] = "0"
    plan = AuditPlan(hashes=("fnv1a_32", "xxh3_64"), checks=("buckets", "avalanche", "neighbours", "tables"))
    plan_file = tmp_path / "plan.pickle"
    plan_file.write_bytes(pickle.dumps(plan))
    subprocess.run([sys.executable, "-m", "hashaudit.engine.warmup", str(plan_file)], env=env, check=True, timeout=600)
    assert not plan_file.exists()  # the helper removes its plan once read
    args = ["audit", str(ORDERS), "-H", "fnv1a_32", "-H", "xxh3_64", "--checks", "buckets,avalanche,neighbours,tables"]
    compiled = _compiled_kernels(env, [*args, "-q"])
    late = [k for k in compiled if k.split(".")[2] in ("avalanche", "_neighbour_kernels", "neighbours", "simulate")]
    hashes = [k for k in compiled if k.startswith(("hashaudit.hashes.fnv", "hashaudit.hashes.xxh"))]
    assert late == [] and hashes == [], compiled  # everything the helper reached was loaded, not compiled


# two audits from an empty cache each: about 45 s
@pytest.mark.slow
def test_an_audit_reads_the_same_with_and_without_the_helper(tmp_path):
    reports = []
    for on in ("0", "1"):
        env = {k: v for k, v in os.environ.items() if k not in ("NUMBA_CACHE_DIR",)}
        env["HASHAUDIT_CACHE_DIR"] = str(tmp_path / f"cache-{on}")
        env["HASHAUDIT_WARM_UP"] = on
        out = tmp_path / f"r{on}.json"
        cmd = [sys.executable, "-m", "hashaudit", "audit", str(ORDERS), "-q", "--json", str(out)]
        assert subprocess.run(cmd, env=env, timeout=600).returncode in (0, 1)
        doc = json.loads(out.read_text())
        doc.pop("run")
        reports.append(json.dumps(doc))
    assert reports[0] == reports[1]
