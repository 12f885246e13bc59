"""The JSON report (schema ``hashaudit.audit/1``; JSON Schema in ``hashaudit/report/schema/audit-1.json``)."""

from __future__ import annotations

import json
import math
import os
import tempfile
from importlib import resources
from pathlib import Path
from typing import Any

from hashaudit.errors import InputError
from hashaudit.verdict.result import AuditResult


def _clean(value: Any) -> Any:
    """Replace non-finite floats by None and numpy scalars by Python numbers, recursively."""
    if isinstance(value, dict):
        return {str(k): _clean(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_clean(v) for v in value]
    if hasattr(value, "item") and not isinstance(value, (str, bytes)):
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


def report_dict(result: AuditResult) -> dict:
    """The report as plain JSON-able data."""
    return _clean(result.to_dict())


def to_json(result: AuditResult) -> str:
    """The report as JSON text; byte-identical for the same input and options apart from ``run``."""
    return json.dumps(report_dict(result), indent=2, ensure_ascii=False, allow_nan=False) + "\n"


def write_json(result: AuditResult, path: str | os.PathLike) -> None:
    """Write the report atomically (a temporary file renamed into place), so a failed write loses nothing."""
    write_text_atomically(path, to_json(result))


def write_text_atomically(path: str | os.PathLike, text: str) -> None:
    """Write ``text`` to ``path`` through a temporary file renamed into place; one-line ``InputError`` on failure."""
    target = Path(path)
    directory = target.parent if str(target.parent) else Path(".")
    if not directory.is_dir():
        raise InputError(f"cannot write report {str(path)!r}: folder {str(directory)!r} does not exist")
    tmp = None
    try:
        fd, tmp = tempfile.mkstemp(dir=directory, prefix=f".{target.name}.", suffix=".tmp")
        with os.fdopen(fd, "w", encoding="utf-8") as f:
            f.write(text)
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(tmp, 0o666 & ~umask)  # the mode of a file written the ordinary way, not mkstemp's 0600
        os.replace(tmp, target)
    except OSError as exc:
        if tmp is not None and os.path.exists(tmp):
            os.unlink(tmp)
        raise InputError(f"cannot write report {str(path)!r}: {exc.strerror or exc}") from None


def schema() -> dict:
    """The JSON Schema of the report."""
    text = resources.files("hashaudit.report").joinpath("schema/audit-1.json").read_text(encoding="utf-8")
    return json.loads(text)
