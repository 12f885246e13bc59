"""Helpers shared by the parts of the calibration study: seeds, rounding, hash registries, worker processes."""

from __future__ import annotations

import hashlib
import multiprocessing
from collections.abc import Callable, Iterable, Sequence
from concurrent.futures import ProcessPoolExecutor
from typing import Any

import numpy as np

from hashaudit.hashes.registry import REGISTRY, HashRegistry, HashSpec
from hashaudit.keys.batch import KeyBatch

MASK64 = (1 << 64) - 1


def round6(x: float) -> float:
    """``x`` to 6 significant digits: the study's JSON stays readable and its numbers compare across runs."""
    return float(f"{x:.6g}")


def stable_number(text: str) -> int:
    """A 64-bit number from a text, the same in every process (``hash`` of a str is salted per process)."""
    return int.from_bytes(hashlib.blake2b(text.encode(), digest_size=8).digest(), "little")


def kernel_spec(name: str, width: int, function: Callable[[KeyBatch, int], np.ndarray], description: str) -> HashSpec:
    """A seeded hash function of the study, hashing whole batches."""
    return HashSpec(name, width, True, "kernel", function, description)


def registry_of(*specs: HashSpec, builtins: Sequence[str] = ()) -> HashRegistry:
    """A registry of the study's own functions and the built-in ones named ``builtins``."""
    return HashRegistry([*(REGISTRY.get(name) for name in builtins), *specs])


def parallel_map(function: Callable[[Any], dict], items: Iterable[Any], workers: int) -> list[dict]:
    """``function`` over ``items`` in order, in ``workers`` processes (1: in this one)."""
    items = list(items)
    if workers <= 1:
        return [function(item) for item in items]
    # spawn: a forked child would inherit numba's and the audit's threads half-way
    context = multiprocessing.get_context("spawn")
    with ProcessPoolExecutor(max_workers=workers, mp_context=context) as pool:
        return list(pool.map(function, items, chunksize=max(1, len(items) // (8 * workers))))
