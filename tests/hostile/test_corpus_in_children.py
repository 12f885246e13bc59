"""The whole hostile corpus as ``python -m hashaudit`` child processes, repeated.

A crash at interpreter exit (a reader thread still running while Python shuts down) shows only in a child process
and only some of the time: each case of ``test_no_key_text.CASES`` runs several times in fresh interpreters, with a
few at once so that the machine is busy (which made the crashes more likely), and every run must end with exit 2
and the one error line. The fast suite runs the cases of the readers with a thread of their own (CSV, TSV, Parquet,
Arrow) and one case of each other format once, a few at once; ``-m slow`` runs every case once, then each 20 times.
"""

from __future__ import annotations

import os
import subprocess
import sys
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import pytest
from test_no_key_text import CASES, QUICK, Case, _check

AT_ONCE = max(2, min(4, os.cpu_count() or 2))


def _outcome(case: Case, source: Path) -> str | None:
    """Run the case once in a child; None when it ended as it must, else what happened."""
    cmd = [sys.executable, "-m", "hashaudit", "audit", str(source), *QUICK, *case.options]
    child = subprocess.run(cmd, capture_output=True, timeout=300)
    out, err = child.stdout.decode(errors="replace"), child.stderr.decode(errors="replace")
    try:
        _check(case, source, child.returncode, out, err)
    except AssertionError:
        return f"{case.name}: exit {child.returncode}: {err.strip()[-300:]}"
    return None


def _run_all(runs: list[tuple[Case, Path]]) -> list[str]:
    """Every run, ``AT_ONCE`` at a time; the failures, described."""
    with ThreadPoolExecutor(AT_ONCE) as pool:
        return [problem for problem in pool.map(lambda run: _outcome(*run), runs) if problem is not None]


def _written(tmp_path: Path, cases: list[Case]) -> list[tuple[Case, Path]]:
    sources = []
    for case in cases:
        source = tmp_path / case.name
        case.write(source)
        sources.append((case, source))
    return sources


THREADED = (".csv", ".tsv", ".parquet", ".arrow")  # readers with a thread of their own: the crashes at exit were theirs
FAST_CASES = [c for c in CASES if c.name.endswith(THREADED)] + [
    next(c for c in CASES if c.name.endswith(suffix)) for suffix in (".txt", ".txt.gz", ".jsonl")
]


def test_the_threaded_readers_and_one_case_of_each_other_format_end_cleanly(tmp_path: Path) -> None:
    assert _run_all(_written(tmp_path, FAST_CASES)) == []


@pytest.mark.slow
def test_every_hostile_case_ends_cleanly_in_a_fresh_interpreter(tmp_path: Path) -> None:
    assert _run_all(_written(tmp_path, list(CASES))) == []


@pytest.mark.slow
@pytest.mark.parametrize("case", CASES, ids=[c.name for c in CASES])
def test_every_hostile_case_ends_cleanly_twenty_times(tmp_path: Path, case: Case) -> None:
    assert _run_all(_written(tmp_path, [case]) * 20) == []
