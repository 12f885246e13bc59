"""The command holds the BLAS library to one thread unless the user set its thread count (``hashaudit.cli.run``);
the library, imported by someone else's program, changes nothing. Each case runs in a child process."""

from __future__ import annotations

import os
import subprocess
import sys
import textwrap
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]

CHILD = textwrap.dedent(
    """
    import os, sys
    import hashaudit.cli as cli

    def report():
        # numpy (and its BLAS) must not be loaded yet, or the variables would come too late
        print(os.environ.get("OPENBLAS_NUM_THREADS"), os.environ.get("MKL_NUM_THREADS"), "numpy" in sys.modules)
        sys.exit(0)

    if sys.argv[1] == "command":
        cli.main = report
        cli.run()
    else:
        print(os.environ.get("OPENBLAS_NUM_THREADS"), os.environ.get("MKL_NUM_THREADS"))
    """
)


def _child(mode: str, **env: str) -> str:
    environ = {k: v for k, v in os.environ.items() if k not in ("OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS")}
    done = subprocess.run(
        [sys.executable, "-c", CHILD, mode],
        capture_output=True,
        text=True,
        cwd=ROOT,
        env={**environ, **env},
        timeout=120,
        check=True,
    )
    return done.stdout.strip()


def test_the_command_sets_one_blas_thread_before_numpy_loads() -> None:
    assert _child("command") == "1 1 False"


@pytest.mark.parametrize("value", ["4", "2"])
def test_a_thread_count_the_user_set_is_kept(value: str) -> None:
    assert _child("command", OPENBLAS_NUM_THREADS=value) == f"{value} 1 False"


def test_importing_the_library_sets_nothing() -> None:
    assert _child("library") == "None None"
