"""One memory budget for an audit, shared by its stores.

Three things grow with the input: the distinct-key fingerprint store (about 20 bytes per distinct key; what does
not fit is read in more passes, one per part of the fingerprint space), the full-width hash values of the collision
check (4, 8 or 16 bytes per key and hash function, by its width; what does not fit is spilled to disk) and the
tables' counts (4 bytes per bucket, per table and hash function; automatic sizes stop at 2^22 buckets).
``--memory`` bounds them together: the counts and the process's own footprint come off the top, the distinct-key
store takes its share of the rest first (another pass over the input costs more than spilling; all of it when the
collision check does not run), and the hash functions' collision stores share what is left. ``--distinct-memory``
and ``--collision-memory`` still set a store's budget outright.
"""

from __future__ import annotations

import os
from typing import Any

DEFAULT_CAP = 1 << 30
"""The default budget is a quarter of the machine's memory, at most this."""

BASE_BYTES = 448 << 20
"""The process's own footprint, not counted in any store: the interpreter, numpy, numba and pyarrow with the
compiled kernels (a 3-key audit peaks near 220 MiB), the read buffers and the arrays of the batches in flight (hash
values, positions, a spill's partitioned copy): measured with ``bench/bench_memory.py``. Raised from 384 MiB when
the default audit of 100 M distinct keys under the default 1 GiB peaked at 1,039-1,041 MiB
(``bench/bench_memory_budget.py``, 2026-12-03)."""

DISTINCT_SHARE = 0.6
"""Of the stores' memory, the share the distinct-key store may take when the collision check runs (all of it
otherwise)."""

MIN_STORES = 32 << 20
MIN_DISTINCT = 4 << 20
MIN_COLLISIONS = 1 << 20


def meminfo(field: str = "MemTotal") -> int | None:
    """A field of ``/proc/meminfo`` in bytes (``MemTotal``, ``MemAvailable``); elsewhere the physical memory, or None
    when the system does not say."""
    try:
        with open("/proc/meminfo", encoding="ascii") as f:
            for line in f:
                if line.startswith(f"{field}:"):
                    return int(line.split()[1]) * 1024
    except (OSError, ValueError, IndexError):
        pass
    try:
        return os.sysconf("SC_PHYS_PAGES") * os.sysconf("SC_PAGE_SIZE")
    except (ValueError, OSError, AttributeError):
        return None


def machine_memory() -> int | None:
    """The machine's memory in bytes (``MemTotal``), or None when the system does not say."""
    return meminfo("MemTotal")


def default_memory() -> int:
    """A quarter of the machine's memory, at most :data:`DEFAULT_CAP`."""
    total = machine_memory()
    return DEFAULT_CAP if total is None else max(MIN_STORES + BASE_BYTES, min(DEFAULT_CAP, total // 4))


def count_bytes(values: dict[str, Any]) -> int:
    """The largest memory the tables' counts of a plan can take (automatic sizes at their cap)."""
    from hashaudit.tables.sizes import MAX_AUTO_BUCKETS

    if "buckets" not in values["checks"]:
        return 0
    if values["buckets"]:
        per_hash = sum(values["buckets"]) * max(1, len(values["schemes"]))
    else:
        per_hash = 2 * MAX_AUTO_BUCKETS  # a power of two and a prime near it, once the input is large
    return 4 * per_hash * len(values["hashes"])  # uint32 counts (8 bytes only past 2^32 keys)


def share_memory(values: dict[str, Any]) -> None:
    """Fill in ``distinct_memory`` and ``collision_memory`` (per hash function) from ``memory`` where not given.

    Parameters
    ----------
    values : dict
        The plan's settings by name; changed in place. ``memory`` None means :func:`default_memory`.
    """
    total = values["memory"] if values["memory"] is not None else default_memory()
    stores = max(MIN_STORES, total - BASE_BYTES - count_bytes(values))
    from hashaudit.checks import GROUP_BY_NAME

    # the collision stores exist when a running group declares their budget; without them the distinct keys take all
    collisions = any(s.name == "collision_memory" for g in values["checks"] for s in GROUP_BY_NAME[g].settings)
    distinct = values["distinct_memory"]
    if distinct is None:
        share = DISTINCT_SHARE if collisions else 1.0
        distinct = 0 if values["all_keys"] else max(MIN_DISTINCT, int(stores * share))
        values["distinct_memory"] = max(distinct, MIN_DISTINCT)
    if values["collision_memory"] is None:
        left = max(MIN_COLLISIONS, stores - distinct)
        values["collision_memory"] = max(MIN_COLLISIONS, left // max(1, len(values["hashes"])))
