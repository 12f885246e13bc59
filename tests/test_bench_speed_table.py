"""bench/speed_table.py runs end to end on one row (a smoke run: no assertion on the timings themselves)."""

from __future__ import annotations

import re
import subprocess
import sys
from pathlib import Path

import pytest

SCRIPT = Path(__file__).parents[1] / "bench" / "speed_table.py"


@pytest.mark.slow  # a smoke run of the benchmark (a dozen seconds): with the slow tests
def test_quick_run_of_row_3_prints_the_row_with_its_seconds(tmp_path):
    proc = subprocess.run(
        [sys.executable, str(SCRIPT), "--quick", "--rows", "3", "--workdir", str(tmp_path)],
        capture_output=True,
        text=True,
        check=False,
        timeout=600,
    )
    assert proc.returncode == 0, proc.stderr
    (row,) = [line for line in proc.stdout.splitlines() if line.startswith("3 ")]
    assert "start-up" in row
    # the median seconds, then min–max: numbers such as 1.23 (no bound on their size)
    assert re.search(r"\s\d+\.\d{2}\s+\d+\.\d{2}–\d+\.\d{2}\s", row), row
    assert "≤ 0.6 s" in row


def test_rows_outside_the_table_are_refused():
    proc = subprocess.run(
        [sys.executable, str(SCRIPT), "--rows", "0,10"], capture_output=True, text=True, check=False, timeout=60
    )
    assert proc.returncode == 2
    assert "--rows" in proc.stderr
