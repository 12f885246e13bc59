"""Spill files are removed when an audit is stopped by a signal, not only when it ends.

Each case runs ``python -m hashaudit audit`` in a child process with a collision budget of 16 KiB, so the hash values
of a few MB of keys are spilled to disk under ``--spill-dir``; as soon as spill files exist it sends the signal and
checks that the child ended the way the command line promises (143 for SIGTERM, 130 for Ctrl-C; no crash at
interpreter exit) and that the spill folder it was given is empty again. What can go wrong at exit depends on where
the signal lands, so SIGTERM is sent several times.
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

pytestmark = pytest.mark.skipif(sys.platform == "win32", reason="POSIX signals")

KEYS = 400_000  # about 8 MB of keys: the child spills for a few seconds before it could finish
CRASH_CODES = (134, 139, -signal.SIGABRT, -signal.SIGSEGV)  # abort or segmentation fault, by the shell or by Python


@pytest.fixture(scope="module")
def big_file(tmp_path_factory) -> Path:
    """A file of distinct keys, one per line (``user-<16 hex digits>``)."""
    rng = np.random.default_rng(20240607)
    words = rng.integers(0, 2**63, size=KEYS, dtype=np.int64)
    path = tmp_path_factory.mktemp("spill") / "big.txt"
    path.write_text("".join(f"user-{w:016x}\n" for w in words.tolist()))
    return path


def _spill_files(spill_dir: Path) -> int:
    """Files inside the private folders the child made in ``spill_dir``."""
    count = 0
    for entry in spill_dir.iterdir():
        if entry.is_dir():
            count += sum(1 for _ in entry.iterdir())
    return count


def _stopped_audit(big_file: Path, spill_dir: Path, signum: int) -> tuple[int, str]:
    """Start an audit that spills, send ``signum`` once spill files exist; return (exit code, stderr)."""
    cmd = [sys.executable, "-m", "hashaudit", "audit", str(big_file), "--collision-memory", "16k",
           "--spill-dir", str(spill_dir), "--checks", "collisions", "-H", "xxh3_64", "-q"]  # fmt: skip
    # SIGINT is restored to its default in the child: a shell that started the tests in the background ignores it,
    # and Python keeps an ignored SIGINT ignored.
    child = subprocess.Popen(
        cmd,
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        preexec_fn=lambda: signal.signal(signal.SIGINT, signal.SIG_DFL),  # noqa: PLW1509
    )
    try:
        deadline = time.monotonic() + 60
        while _spill_files(spill_dir) == 0:
            if child.poll() is not None:
                pytest.fail(f"the audit ended (code {child.returncode}) before it spilled: {child.stderr.read()!r}")
            if time.monotonic() > deadline:
                pytest.fail("no spill file appeared within 60 s")
            time.sleep(0.005)
        child.send_signal(signum)
        _, err = child.communicate(timeout=60)
    finally:
        if child.poll() is None:
            child.kill()
            child.wait()
    return child.returncode, err.decode("utf-8", "replace")


def _assert_clean_exit(code: int, err: str, spill_dir: Path, expected: int) -> None:
    assert code not in CRASH_CODES, (code, err)
    assert "Fatal Python error" not in err and "Traceback" not in err, err
    assert code == expected, (code, err)
    assert sorted(os.listdir(spill_dir)) == [], "spill files left behind"


@pytest.mark.parametrize("attempts", [2, pytest.param(10, marks=pytest.mark.slow)])
def test_sigterm_removes_the_spill_files(big_file, tmp_path, attempts):
    for attempt in range(attempts):
        spill_dir = tmp_path / f"spill-{attempt}"
        spill_dir.mkdir()
        code, err = _stopped_audit(big_file, spill_dir, signal.SIGTERM)
        _assert_clean_exit(code, err, spill_dir, 143)
        assert err == "", err  # the one who sent SIGTERM knows why: nothing to say


def test_ctrl_c_removes_the_spill_files(big_file, tmp_path):
    code, err = _stopped_audit(big_file, tmp_path, signal.SIGINT)
    _assert_clean_exit(code, err, tmp_path, 130)
    assert err.strip() == "hashaudit: interrupted", err


_LEFT_OPEN = """
import sys
import numpy as np
from hashaudit.stats.collisions import FullCollisions

kept = FullCollisions("xxh3_64", 0, 64, memory_bytes=0, spill_dir=sys.argv[1])
kept.update(np.arange(1000, dtype=np.uint64))
assert kept.spilled and kept._folder.rsplit("/", 1)[-1].startswith("hashaudit-spill-")
kept.cycle = kept  # a reference cycle: only the exit hook can remove the folder now
raise RuntimeError("the run fails with the folder still open")
"""


def test_a_run_that_fails_without_closing_leaves_no_spill_folder(tmp_path):
    child = subprocess.run([sys.executable, "-c", _LEFT_OPEN, str(tmp_path)], capture_output=True, timeout=120)
    assert child.returncode == 1 and b"RuntimeError" in child.stderr, child.stderr
    assert os.listdir(tmp_path) == []
