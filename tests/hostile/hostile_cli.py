"""Run the command line in-process and judge its outcome the way a user sees it (helpers for tests/hostile).

The one rule every hostile input must keep: exit 0 or 1 with a report that keeps the contract, or exit 2 with
exactly one line on standard error that names the source and says what is wrong — never a traceback, never an
"internal error".
"""

from __future__ import annotations

import importlib.util
import json
from pathlib import Path
from typing import Any

from cli_runner import run  # noqa: F401  (re-exported for the tests of this folder)

CONTRACT = Path(__file__).resolve().parents[3] / "shared" / "contract" / "check_report.py"
QUICK = ["-H", "xxh3_64", "-m", "2^10"]


def _contract_problems() -> Any:
    if not CONTRACT.exists():
        return None
    spec = importlib.util.spec_from_file_location("hashaudit_contract_check", CONTRACT)
    assert spec is not None and spec.loader is not None
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module.problems


_PROBLEMS = _contract_problems()


def _no_constants(name: str) -> float:
    raise ValueError(f"the report holds {name}, which is not JSON")


def read_report(path: Path) -> dict:
    """A JSON report, parsed strictly (NaN and Infinity are refused), checked against the shared contract."""
    document = json.loads(path.read_text(encoding="utf-8"), parse_constant=_no_constants)
    if _PROBLEMS is not None:
        problems = list(_PROBLEMS(document))
        assert problems == [], problems
    return document


def expect_clean(
    result: tuple[int, str, str], *, names: str | None = None, report: Path | None = None, usage_ok: bool = False
) -> tuple[int, str]:
    """Assert the outcome keeps the rule above; return (exit code, the error line or "").

    ``names``: text the error line must contain (the source). ``report``: the JSON report written on exit 0/1.
    ``usage_ok``: also accept click's own usage error (a usage line, a hint and an ``Error:`` line).
    """
    code, out, err = result
    assert "Traceback" not in err and "Traceback" not in out, err
    assert "internal error" not in err, err
    assert code in (0, 1, 2), (code, err)
    if code == 2:
        lines = [line for line in err.splitlines() if line.strip()]
        if usage_ok and lines and lines[0].startswith("Usage:"):
            assert lines[-1].startswith("Error: "), err
            return code, lines[-1]
        assert len(lines) == 1, err
        assert lines[0].startswith("hashaudit: error: "), err
        if names is not None:
            assert names in lines[0], (names, lines[0])
        return code, lines[0]
    assert err == "", err  # a run that succeeds prints no warning either
    if report is not None:
        document = read_report(report)
        assert document["verdict"] == ("pass" if code == 0 else "fail")
    return code, ""
