"""What an ideal hash would give, computed once per machine: null results kept on disk between audits.

Some references of the tests depend only on the table and the number of keys, never on the keys: the expected
fullest bucket of n keys in m buckets (:mod:`hashaudit.stats.maxload`, ~0.2 s per table) and the simulated tables
filled with seeded random values (:mod:`hashaudit.stats.probes`, ~0.5 s per table size and width). An audit that
runs again on the same sizes (a CI job, the next day's dump) would compute them again; instead each one is kept in

    $HASHAUDIT_CACHE_DIR/nulls/<stamp>/<kind>-<digest of its arguments>.json

beside the kernel cache (``$HASHAUDIT_CACHE_DIR`` defaults to ``~/.cache/hashaudit``; see
:mod:`hashaudit._numba_setup`). ``<stamp>`` is a digest of the source of every module of ``hashaudit.stats`` and
``hashaudit.tables`` and of the Python, numpy and scipy versions: a changed statistic or a new numpy (whose random
generator draws the simulated values) starts a new folder, so a stored value is always what this code would
compute. The values are JSON (floats in their exact shortest form, arrays as lists with their dtype), written to a
temporary file and renamed into place; a file that cannot be read or does not hold the arguments it is named for
is computed again. Nothing here can fail an audit: a folder that cannot be written only means computing every time.
``HASHAUDIT_NULL_CACHE=0`` turns the disk off (values are then kept for the process only).

Within a process every value is also kept in memory, and two threads asking for the same one (two hash functions
of one width concluding at once) wait for one computation.
"""

from __future__ import annotations

import hashlib
import json
import math
import os
import sys
import tempfile
import threading
from collections.abc import Callable
from pathlib import Path
from typing import Any, TypeVar

T = TypeVar("T")

_MEMORY: dict[tuple, Any] = {}
_GUARD = threading.Lock()
_BUILDING: dict[tuple, threading.Lock] = {}
_STAMP: list[str] = []
_PACKAGES = ("stats", "tables")  # the code every kept value comes from


def _stamp() -> str:
    """A digest of the statistics' sources and the numeric libraries' versions (computed once per process)."""
    if not _STAMP:
        import numpy
        import scipy

        digest = hashlib.sha256(f"{sys.version_info[:3]} {numpy.__version__} {scipy.__version__}".encode())
        root = Path(__file__).resolve().parent.parent
        for package in _PACKAGES:
            for path in sorted((root / package).glob("*.py")):
                digest.update(path.name.encode() + b"\0" + path.read_bytes())
        _STAMP.append(digest.hexdigest()[:20])
    return _STAMP[0]


def folder() -> Path | None:
    """Where the null results are kept (made when missing), or None when the disk cache is off or unwritable."""
    if os.environ.get("HASHAUDIT_NULL_CACHE", "1") == "0":
        return None
    from hashaudit._numba_setup import cache_root

    root = cache_root()
    if root is None:
        return None
    path = root / "nulls" / _stamp()
    try:
        path.mkdir(parents=True, exist_ok=True)
    except OSError:
        return None
    return path


def remembered(kind: str, key: tuple, compute: Callable[[], T]) -> T:
    """``compute()``, or the value kept for ``(kind, key)`` by an earlier call in this process or on this machine.

    ``key`` holds the arguments the value depends on (ints, floats, strings and tuples of them); the value may be
    a float, an int, a string, a numpy array, a frozen dataclass of those, or a tuple or list of any of these.
    """
    whole = (kind, key)
    with _GUARD:
        if whole in _MEMORY:
            return _MEMORY[whole]
        lock = _BUILDING.setdefault(whole, threading.Lock())
    with lock:
        if whole not in _MEMORY:
            _MEMORY[whole] = _from_disk_or(kind, key, compute)
        return _MEMORY[whole]


def _from_disk_or(kind: str, key: tuple, compute: Callable[[], T]) -> T:
    where = folder()
    text = repr(key)
    path = None if where is None else where / f"{kind}-{hashlib.sha256(text.encode()).hexdigest()[:32]}.json"
    if path is not None:
        try:
            stored = json.loads(path.read_text(encoding="utf-8"))
            if stored["key"] == text:
                return _decode(stored["value"])
        except (OSError, ValueError, KeyError, TypeError):
            pass  # missing, unreadable or foreign: computed again below
    value = compute()
    if path is not None:
        try:
            encoded = json.dumps({"key": text, "value": _encode(value)})
        except (TypeError, ValueError):  # a value of a kind this file cannot hold: kept for the process only
            return value
        _write(path, encoded)
    return value


def _write(path: Path, text: str) -> None:
    try:
        handle, temporary = tempfile.mkstemp(dir=path.parent, prefix=".part-")
        try:
            with os.fdopen(handle, "w", encoding="utf-8") as f:
                f.write(text)
            os.replace(temporary, path)
        except BaseException:
            os.unlink(temporary)
            raise
    except OSError:
        pass  # a full or read-only disk: the value is only kept for this process


def _encode(value: Any) -> Any:
    import dataclasses

    import numpy as np

    if isinstance(value, bool | int | str) or value is None:
        return value
    if isinstance(value, float):
        return {"float": repr(value)} if not math.isfinite(value) else value
    if isinstance(value, np.ndarray):
        return {"array": [_encode(v) for v in value.tolist()], "dtype": value.dtype.str, "shape": list(value.shape)}
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        kind = type(value)
        fields = {f.name: _encode(getattr(value, f.name)) for f in dataclasses.fields(value)}
        return {"dataclass": f"{kind.__module__}:{kind.__qualname__}", "fields": fields}
    if isinstance(value, tuple | list):
        return {"tuple" if isinstance(value, tuple) else "list": [_encode(v) for v in value]}
    raise TypeError(f"cannot keep a {type(value).__name__} on disk")


def _decode(value: Any) -> Any:
    import importlib

    import numpy as np

    if not isinstance(value, dict):
        return value
    if "float" in value:
        return float(value["float"])
    if "array" in value:
        items = [_decode(v) for v in value["array"]]
        return np.array(items, dtype=np.dtype(value["dtype"])).reshape(value["shape"])
    if "dataclass" in value:
        module, _, name = value["dataclass"].partition(":")
        if not module.startswith("hashaudit."):
            raise TypeError(f"not one of hashaudit's classes: {value['dataclass']}")
        kind: Any = importlib.import_module(module)
        for part in name.split("."):
            kind = getattr(kind, part)
        if not isinstance(kind, type):
            raise TypeError(f"not a class: {value['dataclass']}")
        return kind(**{k: _decode(v) for k, v in value["fields"].items()})
    if "tuple" in value:
        return tuple(_decode(v) for v in value["tuple"])
    if "list" in value:
        return [_decode(v) for v in value["list"]]
    raise TypeError("unknown stored value")


def forget() -> None:
    """Drop the values kept in this process (for tests; the files stay)."""
    with _GUARD:
        _MEMORY.clear()
        _BUILDING.clear()
