"""The command line run in-process the way the console script runs it (the helper of every CLI-level test)."""

from __future__ import annotations

import contextlib
import io
import sys

from hashaudit.cli import main


def run(args: list[str], stdin: bytes | None = None) -> tuple[int, str, str]:
    """Run ``main`` in-process the way the console script does; return (exit code, stdout, stderr)."""
    out, err = io.StringIO(), io.StringIO()
    saved = sys.stdin
    sys.stdin = io.TextIOWrapper(io.BytesIO(stdin or b""))
    try:
        with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
            try:
                main(args)
                code = 0
            except SystemExit as exc:
                code = exc.code if isinstance(exc.code, int) else 2
    finally:
        sys.stdin = saved
    return code, out.getvalue(), err.getvalue()
