"""A contract test for hash functions: the rules every registry entry must keep, checked on random keys.

Plugin authors run ``check_hash(spec)`` (or parametrise a test over ``iter_contract_checks(spec)``) to learn
early that their function breaks an assumption the rest of hashaudit makes: deterministic output, the
declared shape and width, a batch result that does not depend on the batch around a key, empty keys and
empty batches, and a seed that matters exactly when the entry says it does. A broken rule raises
``AssertionError`` naming the hash, the rule and the first offending key.
"""

from __future__ import annotations

import functools
from collections.abc import Callable, Iterator

import numpy as np

from hashaudit.hashes.registry import REGISTRY, HashSpec
from hashaudit.keys.batch import KeyBatch

DEFAULT_SEED = 20240601
DEFAULT_N_KEYS = 400

Check = Callable[[HashSpec, list[bytes], int], None]


def _resolve(spec_or_name: HashSpec | str) -> HashSpec:
    return spec_or_name if isinstance(spec_or_name, HashSpec) else REGISTRY.get(spec_or_name)


def _random_keys(seed: int, n_keys: int) -> list[bytes]:
    """Every length 0..64 once, a few long keys (multi-block paths), the rest of random length 0..300."""
    rng = np.random.default_rng(seed)
    lengths = list(range(65)) + [127, 128, 129, 240, 241, 1024, 1025, 3001]
    lengths += rng.integers(0, 301, size=max(0, n_keys - len(lengths))).tolist()
    return [rng.bytes(int(length)) for length in lengths[:n_keys]]


def _fail(spec: HashSpec, rule: str, detail: str) -> AssertionError:
    return AssertionError(f"hash {spec.name!r} breaks the contract rule {rule!r}: {detail}")


def _show(key: bytes) -> str:
    return f"key of {len(key)} bytes {key[:16].hex()}{'…' if len(key) > 16 else ''}"


def _call(spec: HashSpec, batch: KeyBatch, seed: int) -> np.ndarray:
    """Call the raw batch function and check dtype, shape and width (the rules every later check needs)."""
    out = np.asarray(spec.load()(batch, seed))
    expected_shape = (len(batch), 2) if spec.width == 128 else (len(batch),)
    if out.dtype != np.uint64:
        raise _fail(spec, "dtype", f"returned dtype {out.dtype}, expected uint64")
    if out.shape != expected_shape:
        raise _fail(spec, "shape", f"returned shape {out.shape} for {len(batch)} keys, expected {expected_shape}")
    if spec.width == 32 and out.size and int(out.max()) >= 2**32:
        i = int(np.argmax(out >= 2**32))
        raise _fail(spec, "width", f"declared 32 bits but returned {int(out[i]):#x} for key #{i}")
    return out


def _assert_same(spec: HashSpec, rule: str, keys: list[bytes], got: np.ndarray, want: np.ndarray, how: str) -> None:
    if got.shape == want.shape and np.array_equal(got, want):
        return
    if got.shape != want.shape:
        raise _fail(spec, rule, f"{how}: shape {got.shape}, expected {want.shape}")
    rows = np.nonzero((got != want).reshape(len(keys), -1).any(axis=1))[0]
    i = int(rows[0])
    raise _fail(
        spec,
        rule,
        f"{how}: {len(rows)} of {len(keys)} keys differ, first #{i} ({_show(keys[i])}): {got[i]} != {want[i]}",
    )


def check_deterministic(spec: HashSpec, keys: list[bytes], seed: int) -> None:
    """Two calls on the same batch give the same output, and the batch is not written to."""
    batch = KeyBatch.from_keys(keys)
    data_before, offsets_before = batch.data.copy(), batch.offsets.copy()
    first = _call(spec, batch, seed)
    if not (np.array_equal(batch.data, data_before) and np.array_equal(batch.offsets, offsets_before)):
        raise _fail(spec, "deterministic", "the hash function wrote to the input batch")
    _assert_same(spec, "deterministic", keys, _call(spec, batch, seed), first, "second call on the same batch")


def check_batch_equals_per_key(spec: HashSpec, keys: list[bytes], seed: int) -> None:
    """The batch result of a key equals hashing that key alone."""
    whole = _call(spec, KeyBatch.from_keys(keys), seed)
    alone = np.concatenate([_call(spec, KeyBatch.from_keys([k]), seed) for k in keys])
    _assert_same(spec, "batch_equals_per_key", keys, whole, alone, "batch result vs each key hashed alone")


def check_slicing(spec: HashSpec, keys: list[bytes], seed: int) -> None:
    """Hashing zero-copy slices (offsets not starting at 0, bytes around them) gives the whole-batch result."""
    rng = np.random.default_rng(seed)
    fixed = [rng.bytes(8) for _ in range(64)]  # one key length throughout: kernels may take a fast path
    for key_set in (keys, fixed):
        inner = KeyBatch.from_keys(key_set)
        whole = _call(spec, inner, seed)
        lead = np.frombuffer(rng.bytes(13), dtype=np.uint8)
        padded = KeyBatch(np.concatenate([lead, inner.data, lead]), inner.offsets + len(lead))
        _assert_same(spec, "slicing", key_set, _call(spec, padded, seed), whole, "batch inside a larger buffer")
        n = len(key_set)
        for chunk in (1, 2, 7, 50, n - 1, n + 42):
            chunk = max(chunk, 1)
            parts = [_call(spec, padded.slice(i, min(i + chunk, n)), seed) for i in range(0, n, chunk)]
            _assert_same(spec, "slicing", key_set, np.concatenate(parts), whole, f"slices of {chunk} keys")


def check_empty_keys(spec: HashSpec, keys: list[bytes], seed: int) -> None:
    """Empty keys are hashed (alone, among others, at the end of the buffer) and all hash alike."""
    mixed = [b"", keys[-1], b"", b"", keys[1], b""]
    out = _call(spec, KeyBatch.from_keys(mixed), seed)
    only_empty = _call(spec, KeyBatch.from_keys([b""] * 3), seed)  # a zero-length data buffer
    want = np.concatenate([_call(spec, KeyBatch.from_keys([k]), seed) for k in mixed])
    _assert_same(spec, "empty_keys", mixed, out, want, "batch with empty keys vs each key alone")
    _assert_same(spec, "empty_keys", [b""] * 3, only_empty, out[[0, 2, 3]], "batch of only empty keys")


def check_empty_batch(spec: HashSpec, keys: list[bytes], seed: int) -> None:
    """A batch of no keys (fresh, or an empty slice of a larger batch) gives an empty array."""
    _call(spec, KeyBatch.from_keys([]), seed)
    _call(spec, KeyBatch.from_keys(keys).slice(5, 5), seed)


def check_seed(spec: HashSpec, keys: list[bytes], seed: int) -> None:
    """A seeded function's output changes with the seed (on some keys); an unseeded one's never does."""
    batch = KeyBatch.from_keys(keys)
    base = _call(spec, batch, seed)
    for other in ((seed + 1) % 2**32, (seed + 0x9E3779B9) % 2**32):
        if other == seed:
            continue
        out = _call(spec, batch, other)
        if spec.seeded and np.array_equal(out, base):
            raise _fail(spec, "seed", f"declared seeded but seeds {seed} and {other} give identical output")
        if not spec.seeded:
            _assert_same(spec, "seed", keys, out, base, f"declared unseeded but seed {other} differs from {seed}")


_CHECKS: tuple[Check, ...] = (
    check_deterministic,
    check_batch_equals_per_key,
    check_slicing,
    check_empty_keys,
    check_empty_batch,
    check_seed,
)


def _run(check: Check, rule: str, spec: HashSpec, keys: list[bytes], seed: int) -> None:
    """Run one check; an exception from the hash function is a broken rule too."""
    try:
        check(spec, keys, seed)
    except AssertionError:
        raise
    except Exception as exc:
        raise _fail(spec, rule, f"raised {type(exc).__name__}: {exc}") from exc


def iter_contract_checks(
    spec_or_name: HashSpec | str, *, seed: int = DEFAULT_SEED, n_keys: int = DEFAULT_N_KEYS
) -> Iterator[tuple[str, Callable[[], None]]]:
    """The contract checks for one hash, as ``(name, check)`` pairs; ``check()`` raises ``AssertionError``.

    Parameters
    ----------
    spec_or_name : HashSpec or str
        A registry entry, or a name looked up in the default registry (``module:function`` works too).
    seed : int
        Seeds the random keys and is the hash seed under test.
    n_keys : int
        Number of random keys (at least 8).

    Yields
    ------
    name : str
        ``"<hash>:<check>"``, usable as a pytest id.
    check : callable
        Runs one rule with no arguments.
    """
    spec = _resolve(spec_or_name)
    keys = _random_keys(seed, max(n_keys, 8))
    for check in _CHECKS:
        rule = check.__name__.removeprefix("check_")
        yield f"{spec.name}:{rule}", functools.partial(_run, check, rule, spec, keys, seed)


def check_hash(spec_or_name: HashSpec | str, *, seed: int = DEFAULT_SEED, n_keys: int = DEFAULT_N_KEYS) -> HashSpec:
    """Run every contract check on a hash; raise ``AssertionError`` at the first broken rule.

    Parameters
    ----------
    spec_or_name : HashSpec or str
        A registry entry, or a name looked up in the default registry (``module:function`` works too).
    seed : int
        Seeds the random keys and is the hash seed under test.
    n_keys : int
        Number of random keys (at least 8).

    Returns
    -------
    HashSpec
        The entry checked.

    Examples
    --------
    >>> import zlib
    >>> from hashaudit.hashes.registry import from_callable
    >>> check_hash(from_callable("zlib_crc32", zlib.crc32, width=32)).name
    'zlib_crc32'
    """
    spec = _resolve(spec_or_name)
    for _, check in iter_contract_checks(spec, seed=seed, n_keys=n_keys):
        check()
    return spec
