"""Modules loaded on first use: accumulators are created before the keys stream, their tests run only after, and
scipy takes a while to import (the engine imports it on a background thread meanwhile)."""

from __future__ import annotations

import importlib
from typing import Any


class LazyModule:
    """Stands for a module and imports it when an attribute is first read."""

    def __init__(self, name: str) -> None:
        self._name = name

    def __getattr__(self, attribute: str) -> Any:
        return getattr(importlib.import_module(self._name), attribute)


special = LazyModule("scipy.special")
fft = LazyModule("scipy.fft")
