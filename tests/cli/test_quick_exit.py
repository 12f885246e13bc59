"""The console script ends the process without tearing the interpreter down (``hashaudit.cli.run``): the exit code,
the reports, what is piped out and the exit hooks must be exactly those of an ordinary exit. Each case runs in a
child process, as a user runs the command."""

from __future__ import annotations

import json
import pstats
import subprocess
import sys
import textwrap
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]
QUICK = ["--checks", "buckets", "-H", "fnv1a_32", "-m", "2^10"]


def _command(*args: str) -> subprocess.CompletedProcess:
    return subprocess.run(
        [sys.executable, "-m", "hashaudit", *args], capture_output=True, cwd=ROOT, timeout=300, check=False
    )


@pytest.fixture(scope="module")
def keys(tmp_path_factory: pytest.TempPathFactory) -> Path:
    path = tmp_path_factory.mktemp("keys") / "keys.txt"
    path.write_text("".join(f"order-{i:07d}\n" for i in range(20_000)))
    return path


@pytest.mark.parametrize("landing", range(3))
def test_a_report_piped_to_standard_output_arrives_whole(keys: Path, landing: int) -> None:
    done = _command("audit", str(keys), *QUICK, "--json", "-", "--all")
    assert done.returncode in (0, 1), done.stderr
    report = json.loads(done.stdout)  # the whole document, flushed before the process ended
    assert report["summary"]["keys"] == 20_000
    assert done.returncode == (1 if report["verdict"] == "fail" else 0)


def test_a_report_file_is_complete_and_the_terminal_report_printed(keys: Path, tmp_path: Path) -> None:
    out = tmp_path / "report.json"
    done = _command("audit", str(keys), *QUICK, "--json", str(out))
    assert done.returncode in (0, 1), done.stderr
    assert json.loads(out.read_text())["summary"]["keys"] == 20_000
    assert b"fnv1a_32" in done.stdout


def test_a_usage_error_still_exits_2_with_one_line(tmp_path: Path) -> None:
    done = _command("audit", str(tmp_path / "missing.txt"), *QUICK)
    assert done.returncode == 2
    assert done.stderr.decode().count("\n") == 1 and done.stderr.startswith(b"hashaudit: error:")


LEAVE = """
import atexit, sys, threading, time
from pathlib import Path
from hashaudit.cli import _leave
folder = Path(sys.argv[1])
atexit.register(lambda: (folder / "hook").write_text("ran"))
if sys.argv[2] == "thread":
    def late() -> None:
        time.sleep(0.3)
        (folder / "thread").write_text("done")
    threading.Thread(target=late).start()  # not a daemon: the exit waits for it
print("buffered line", end="")  # no newline: still in the buffer when _leave is called
_leave(3)
"""


@pytest.mark.parametrize("thread", ["thread", "none"])
def test_leave_runs_the_exit_hooks_flushes_and_waits_for_threads(tmp_path: Path, thread: str) -> None:
    done = subprocess.run(
        [sys.executable, "-c", textwrap.dedent(LEAVE), str(tmp_path), thread],
        capture_output=True,
        text=True,
        timeout=120,
        check=False,
    )
    assert done.returncode == 3, done.stderr
    assert done.stdout == "buffered line"
    assert (tmp_path / "hook").read_text() == "ran"
    assert (tmp_path / "thread").exists() == (thread == "thread")


def test_a_profiler_still_writes_its_figures(keys: Path, tmp_path: Path) -> None:
    """``python -m cProfile`` writes its file after the command returns: the quick exit must leave it the time."""
    out = tmp_path / "audit.prof"
    done = subprocess.run(
        [sys.executable, "-m", "cProfile", "-o", str(out), "-m", "hashaudit", "audit", str(keys), *QUICK, "-q"],
        capture_output=True,
        cwd=ROOT,
        timeout=300,
        check=False,
    )
    assert done.returncode in (0, 1), done.stderr
    assert pstats.Stats(str(out)).total_calls > 0
