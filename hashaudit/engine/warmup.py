"""The first audit on a machine compiles its kernels on two cores: a helper process compiles the same audit's
kernels in the opposite order.

numba compiles one kernel at a time in a process (a global lock), and the first audit with an empty kernel cache
spends most of its time compiling (16.9 s without a helper for the default audit of the sample keys on this
project's 2-core machine, 11.3 s with one, 2.5 s once cached: ``bench/speed_table.py`` rows 11, 1 and 2,
2026-12-03). When the cache is empty and a second core is free, :func:`start` launches
``python -m hashaudit.engine.warmup`` with the audit's plan, into the same kernel cache
(:mod:`hashaudit._numba_setup`). The helper starts with what the audit needs last: each running check group's
declared ``warm_up`` (``CheckGroup.warm_up``: the simulated tables, the neighbour families, the avalanche flips),
last group first, on 20,000 invented keys hashed by numpy stand-ins (so it compiles no hash function yet); then it audits those keys under the
plan with the stand-ins (the remaining kernels of the check groups), and last it hashes them with the plan's own
functions in reverse order, while the audit compiles them from the first. A kernel that either process has finished
and saved, the other loads from the cache (numba looks there before compiling, and saves each kernel by writing a
new file and renaming it into place), so the two split the work. The helper reports nothing and is stopped when the
audit ends, whatever it has reached.

Only the command line starts a helper (a library call never spawns a process), only when the cache looks empty
(the fingerprint kernel every audit that tells repeats apart uses was never saved) and only with two cores or more.
``HASHAUDIT_WARM_UP=0`` turns it off. The helper changes nothing but the cache: results are the same with or
without it.
"""

from __future__ import annotations

import contextlib
import os
import pickle
import subprocess
import sys
import tempfile
from pathlib import Path
from typing import Any

HELPER_KEYS = 20_000
SMALL_TABLE = 1 << 16  # the helper's tables: kernels do not depend on sizes, memory does
SMALL_PRIME = 65521


def cache_is_cold() -> bool:
    """Whether the kernel cache has never saved the distinct keys' fingerprint kernel, which nearly every audit
    compiles first (for this Python and numba)."""
    from hashaudit._numba_setup import cache_base, is_saved

    if cache_base() is None or os.environ.get("NUMBA_CACHE_DIR"):
        return False  # kernels not cached where we look: nothing to learn, nothing to share
    from hashaudit.hashes.murmur import _murmur3_128_kernel

    return not is_saved(_murmur3_128_kernel)


def start(plan: Any) -> subprocess.Popen | None:
    """Launch the helper for ``plan`` when the cache is empty and a second core is there; None otherwise."""
    if os.environ.get("HASHAUDIT_WARM_UP", "1") == "0" or (os.cpu_count() or 1) < 2:
        return None
    if os.environ.get("NUMBA_DISABLE_JIT", "0") not in ("", "0"):
        return None
    try:
        if not cache_is_cold():
            return None
        handle, path = tempfile.mkstemp(prefix="hashaudit-warm-", suffix=".plan")
        with os.fdopen(handle, "wb") as f:
            pickle.dump(plan, f)
        package_parent = str(Path(__file__).resolve().parents[2])  # the same hashaudit as this one
        code = f"import sys; sys.path.insert(0, {package_parent!r}); from hashaudit.engine.warmup import main; main()"
        return subprocess.Popen(
            [sys.executable, "-c", code, path],
            stdin=subprocess.DEVNULL,
            stdout=subprocess.DEVNULL,
            stderr=subprocess.DEVNULL,
        )
    except (OSError, pickle.PicklingError, TypeError, AttributeError):
        return None  # no helper: the audit compiles everything itself, as without one


def stop(helper: subprocess.Popen | None) -> None:
    """End the helper (it is only ever useful while the audit runs) and remove its plan file if it had not yet."""
    if helper is None:
        return
    if helper.poll() is None:
        helper.kill()
    helper.wait()
    with contextlib.suppress(OSError, IndexError):
        os.unlink(str(helper.args[-1]))  # type: ignore[index]


def helper_plan(plan: Any) -> Any:
    """``plan`` for the helper: the built-in hash functions in reverse order, small tables and stores, no spill
    folder of the user's."""
    from hashaudit.hashes.registry import REGISTRY

    known = set(REGISTRY.names())
    hashes = tuple(reversed([h for h in plan.hashes if h in known]))
    if plan.hashes and not hashes:
        return None
    from hashaudit.tables.schemes import is_power_of_two

    buckets = tuple(dict.fromkeys(SMALL_TABLE if is_power_of_two(m) else SMALL_PRIME for m in plan.buckets))
    # every occurrence counted: the audit compiles the distinct-key kernels first, the helper leaves them to it
    return plan.replace(hashes=hashes, buckets=buckets, memory="512m", spill_dir=None, all_keys=True)


def helper_keys(count: int = HELPER_KEYS) -> list[bytes]:
    """Invented keys of a few shapes (counters, codes, paths), enough to reach every check's statistics."""
    import numpy as np

    rng = np.random.default_rng(20261203)
    codes = rng.integers(0, 1 << 40, size=count)
    shapes = (b"w%07d", b"crate-%d-%x", b"/dock/%d/bay/%x")
    return [shapes[i % 3] % ((i,) if i % 3 == 0 else (i, int(c))) for i, c in enumerate(codes.tolist())]


def stand_in(width: int) -> Any:
    """A batch hash of ``width`` bits written in numpy alone (no kernel to compile): the helper's check groups
    run on it, so that it reaches their kernels without first compiling the hash functions the audit needs."""
    import numpy as np

    def hash_batch(batch: Any, seed: int = 0) -> np.ndarray:
        from hashaudit.placements.agreement import position_priorities as mix  # splitmix64's output function

        data = batch.data.astype(np.uint64) + np.uint64(1)
        starts = batch.offsets[:-1]
        position = (np.arange(len(data)) - np.repeat(starts, np.diff(batch.offsets))).astype(np.uint64)
        with np.errstate(over="ignore"):
            mixed = mix(data + position * np.uint64(0x9E3779B97F4A7C15))  # a random word per (place, byte)
            sums = np.zeros(len(batch), dtype=np.uint64)
            filled = starts < batch.offsets[1:]
            sums[filled] = np.add.reduceat(mixed, starts[filled]) if len(mixed) else 0
            words = [mix(sums + np.uint64(seed) + np.uint64(i)) for i in range(2 if width == 128 else 1)]
        if width == 32:
            return words[0] >> np.uint64(32)
        return words[0] if width == 64 else np.ascontiguousarray(np.stack(words, axis=1))

    return hash_batch


def main() -> None:
    """The helper: audit invented keys under the plan pickled in ``sys.argv[1]`` (removed once read) with
    stand-in hash functions, then hash them with the plan's own functions, last first."""
    path = sys.argv[1]
    try:
        with open(path, "rb") as f:
            plan = pickle.load(f)
    finally:
        with contextlib.suppress(OSError):
            os.unlink(path)
    from hashaudit.engine.runner import audit_batches
    from hashaudit.hashes.registry import REGISTRY, HashRegistry, HashSpec
    from hashaudit.keys.batch import KeyBatch

    small = helper_plan(plan)
    if small is None:
        return
    batch = KeyBatch.from_keys(helper_keys())
    real = [REGISTRY.get(name) for name in small.hashes]
    stand_ins = HashRegistry(
        HashSpec(s.name, s.width, s.seeded, "kernel", stand_in(s.width), "stand-in", s.integer_keys) for s in real
    )
    # the groups' own warm-ups, last group first (the audit concludes in registry order); the sample is the first
    # keys, as many as the audit's sample holds (a plain batch: the sampling kernels are the audit's own first ones)
    sample = batch.slice(0, min(len(batch), small.avalanche_keys))
    widths = tuple(sorted({s.width for s in real}))
    for group in reversed(small.groups()):
        if group.warm_up is None:
            continue
        try:
            group.warm_up(small, sample, widths, stand_in)
        except Exception:  # noqa: BLE001 - best effort: the audit compiles what the helper could not
            continue
    audit_batches([batch], small, keys=len(batch), registry=stand_ins, threads=1, read_ahead=False, figures=False)
    for spec in real:  # already reversed: the audit compiles the first ones itself
        try:
            spec.hash_batch(batch, plan.seed if spec.seeded else 0)
        except Exception:  # noqa: BLE001 - a function that refuses these keys: the audit compiles it
            continue


if __name__ == "__main__":
    main()
