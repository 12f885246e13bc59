"""The small promises of the error path: a full spill disk said in words, one line whatever the file name, --debug
on the out-of-memory path too, a CSV error that does not point at the wrong row, the terminal report out of the
way of a report written to standard output."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from hostile_cli import QUICK, expect_clean, run

import hashaudit.engine.sources
from hashaudit.errors import ResourceError
from hashaudit.stats.collisions import FullCollisions

FULL_DEVICE = Path("/dev/full")  # Linux: every write fails with ENOSPC (a real full disk, not a mock)


def _spill_many(tmp_path: Path) -> None:
    store = FullCollisions("xxh3_64", 0, 64, memory_bytes=1 << 20, spill_dir=str(tmp_path))
    rng = np.random.default_rng(5)
    for _ in range(8):  # 8 MiB of values through a 1 MiB budget: spills
        store.update(rng.integers(0, 2**63, size=1 << 17, dtype=np.uint64))
    store.result()


@pytest.mark.skipif(not FULL_DEVICE.is_char_device(), reason="needs /dev/full")
def test_a_full_spill_disk_is_said_in_words(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(FullCollisions, "_path", lambda self, partition: str(FULL_DEVICE))
    with pytest.raises(ResourceError) as caught:
        _spill_many(tmp_path)
    message = str(caught.value)
    assert "the disk is full" in message and "--spill-dir" in message
    assert "requested" not in message and str(tmp_path) in message


SPILL_UNDER_A_SIZE_LIMIT = """
import resource, signal, sys
import numpy as np
signal.signal(signal.SIGXFSZ, signal.SIG_IGN)  # a write past the limit then fails with EFBIG, as on a full disk
resource.setrlimit(resource.RLIMIT_FSIZE, (1 << 12, 1 << 12))  # spill files are far larger
from hashaudit.errors import ResourceError
from hashaudit.stats.collisions import FullCollisions
store = FullCollisions("xxh3_64", 0, 64, memory_bytes=1 << 20, spill_dir=sys.argv[1])
rng = np.random.default_rng(5)
try:
    for _ in range(8):
        store.update(rng.integers(0, 2**63, size=1 << 17, dtype=np.uint64))
    store.result()
except ResourceError as exc:
    print(exc)
"""


def test_a_spill_write_that_fails_is_said_in_words(tmp_path: Path) -> None:
    """A real failed write (the file-size limit of a child process), not a mock."""
    done = subprocess.run(
        [sys.executable, "-c", SPILL_UNDER_A_SIZE_LIMIT, str(tmp_path)],
        capture_output=True,
        text=True,
        timeout=300,
    )
    assert done.returncode == 0, done.stderr
    message = done.stdout.strip()
    assert message.startswith(f"cannot write the collision check's spill files in {str(tmp_path)!r}: ")
    assert "requested" not in message and "--spill-dir" in message
    assert list(tmp_path.iterdir()) == []  # the private spill folder is gone


def test_a_file_name_with_a_newline_gives_one_error_line(tmp_path: Path) -> None:
    odd = tmp_path / "keys\nsecond line.txt"
    odd.write_bytes(b"\xff\xfe not utf-8\n")
    code, line = expect_clean(run(["audit", str(odd), *QUICK]))
    assert code == 2 and "keys\\nsecond line.txt" in line


def test_debug_shows_the_traceback_when_memory_runs_out(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    keys = tmp_path / "k.txt"
    keys.write_text("a\nb\n")

    def exhausted(*args: object, **kwargs: object) -> None:
        raise MemoryError

    monkeypatch.setattr(hashaudit.engine.sources, "audit", exhausted)  # the command imports it when it runs
    code, _, err = run(["audit", str(keys), *QUICK])
    assert code == 2 and err.strip().splitlines() == [err.strip()] and "out of memory" in err
    assert "Traceback" not in err
    code, _, err = run(["audit", str(keys), *QUICK, "--debug"])
    assert code == 2 and "Traceback" in err and err.rstrip().endswith("fewer hash functions at once)")


def test_a_report_on_standard_output_keeps_standard_output_to_itself(tmp_path: Path) -> None:
    keys = tmp_path / "k.txt"
    keys.write_text("".join(f"k{i}\n" for i in range(300)))
    code, out, err = run(["audit", str(keys), *QUICK, "--json", "-"])
    assert code in (0, 1)
    assert json.loads(out)["schema"] == "hashaudit.audit/1"  # nothing but the report
    assert "verdict:" in err  # the terminal report went to standard error
