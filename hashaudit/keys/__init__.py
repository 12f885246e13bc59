"""Key sources: files and standard input, read as batches of keys.

``open_keys(path, SourceOptions(...))`` returns a :class:`KeyStream`, an iterable of :class:`KeyBatch`.
The reading machinery (numba kernels, pyarrow) is imported on first use of ``open_keys`` / ``KeyStream`` /
``SourceStats``, and numpy on first use of ``KeyBatch``: the command line's options load none of it.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

from hashaudit.keys.options import KEY_FORMATS, SOURCE_FORMATS, SourceOptions

if TYPE_CHECKING:
    from hashaudit.keys.batch import KeyBatch
    from hashaudit.keys.records import SourceStats
    from hashaudit.keys.stream import KeyStream, open_keys

__all__ = ["KEY_FORMATS", "KeyBatch", "KeyStream", "SOURCE_FORMATS", "SourceOptions", "SourceStats", "open_keys"]

_LAZY = {
    "KeyBatch": "hashaudit.keys.batch",
    "KeyStream": "hashaudit.keys.stream",
    "open_keys": "hashaudit.keys.stream",
    "SourceStats": "hashaudit.keys.records",
}


def __getattr__(name: str) -> Any:
    module = _LAZY.get(name)
    if module is None:
        raise AttributeError(f"module 'hashaudit.keys' has no attribute {name!r}")
    import importlib

    value = getattr(importlib.import_module(module), name)
    globals()[name] = value
    return value
