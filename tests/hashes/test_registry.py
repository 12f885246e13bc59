"""The hash registry: built-ins keep the contract, name lookup, user callables, plugins, and the contract checker."""

from __future__ import annotations

import hashlib
import importlib
import importlib.metadata
import subprocess
import sys
import textwrap
import zlib
from collections.abc import Iterator
from pathlib import Path

import mmh3
import numpy as np
import pytest

from hashaudit.errors import UnknownHashError, UsageError
from hashaudit.hashes.contract import check_hash, iter_contract_checks
from hashaudit.hashes.registry import (
    ENTRY_POINT_GROUP,
    REGISTRY,
    HashRegistry,
    HashSpec,
    from_callable,
)
from hashaudit.keys.batch import KeyBatch

BUILTIN_SPECS = REGISTRY.specs()  # taken once, before any test fakes the entry points
BUILTIN_NAMES = [spec.name for spec in BUILTIN_SPECS]
# modules whose kernels may still be missing while they are written; any other import failure is a test failure
OPTIONAL_KERNEL_MODULES = {"hashaudit.hashes.xxh"}


def _random_keys(seed: int, count: int = 2000, max_length: int = 300) -> list[bytes]:
    rng = np.random.default_rng(seed)
    return [rng.bytes(int(n)) for n in rng.integers(0, max_length + 1, size=count)]


def _loadable(name: str) -> HashSpec:
    """The built-in ``name``; skipped (not failed) when its kernel module is one still being written."""
    spec = REGISTRY.get(name)
    if isinstance(spec.loader, str):
        module_name, _, attribute = spec.loader.partition(":")
        try:
            module = importlib.import_module(module_name)
        except ImportError as exc:
            if module_name not in OPTIONAL_KERNEL_MODULES:
                raise
            pytest.skip(f"{name}: kernel module {module_name} cannot be imported yet ({exc})")
        if not hasattr(module, attribute) and module_name in OPTIONAL_KERNEL_MODULES:
            pytest.skip(f"{name}: {module_name} has no {attribute!r} yet")
    return spec


def _fresh_registry() -> HashRegistry:
    """A copy of the built-ins, so tests that add entries leave the default registry alone."""
    return HashRegistry(BUILTIN_SPECS)


# ---------------------------------------------------------------------------------------------------------------
# built-ins keep the contract


@pytest.mark.parametrize("name", BUILTIN_NAMES)
def test_builtin_passes_check_hash(name: str) -> None:
    spec = _loadable(name)
    assert check_hash(name, seed=7, n_keys=300) is spec


CONTRACT_CASES = [(name, check_name) for name in BUILTIN_NAMES for check_name, _ in iter_contract_checks(name)]


@pytest.mark.parametrize(("name", "check_name"), CONTRACT_CASES, ids=[c for _, c in CONTRACT_CASES])
def test_builtin_contract_check(name: str, check_name: str) -> None:
    _loadable(name)
    checks = dict(iter_contract_checks(name))
    checks[check_name]()


def test_contract_check_names() -> None:
    names = [name for name, _ in iter_contract_checks("fnv1a_32")]
    assert names == [
        "fnv1a_32:deterministic",
        "fnv1a_32:batch_equals_per_key",
        "fnv1a_32:slicing",
        "fnv1a_32:empty_keys",
        "fnv1a_32:empty_batch",
        "fnv1a_32:seed",
    ]


def test_builtin_widths_and_flags() -> None:
    for spec in REGISTRY.specs():
        assert spec.width in (32, 64, 128)
        assert spec.path in ("kernel", "per-key")
    assert REGISTRY.get("murmur3_128").width == 128
    assert REGISTRY.get("blake2b_64").path == "per-key"
    assert not REGISTRY.get("fnv1a_64").seeded and REGISTRY.get("siphash24").seeded
    assert REGISTRY.get("identity").integer_keys and not REGISTRY.get("crc32").integer_keys


# ---------------------------------------------------------------------------------------------------------------
# the contract checker catches broken functions (each broken function breaks exactly the rule named)


def _crc(batch: KeyBatch, seed: int = 0) -> list[int]:
    return [zlib.crc32(k, seed % 2**32) for k in batch.to_list()]


def _wrong_dtype(batch: KeyBatch, seed: int) -> np.ndarray:
    return np.array(_crc(batch), dtype=np.int64)


def _too_wide(batch: KeyBatch, seed: int) -> np.ndarray:
    return np.array([v | (1 << 40) for v in _crc(batch)], dtype=np.uint64)


def _flat_128(batch: KeyBatch, seed: int) -> np.ndarray:
    return np.array(_crc(batch), dtype=np.uint64)


_calls = [0]


def _nondeterministic(batch: KeyBatch, seed: int) -> np.ndarray:
    _calls[0] += 1
    return np.array(_crc(batch), dtype=np.uint64) ^ np.uint64(_calls[0] % 2)


def _writes_input(batch: KeyBatch, seed: int) -> np.ndarray:
    out = np.array(_crc(batch), dtype=np.uint64)
    batch.data[:] = 0
    return out


def _position_dependent(batch: KeyBatch, seed: int) -> np.ndarray:
    return np.array(_crc(batch), dtype=np.uint64) + np.arange(len(batch), dtype=np.uint64)


def _ignores_first_offset(batch: KeyBatch, seed: int) -> np.ndarray:
    # reads key i at offsets[i] - offsets[0] ... a bug that shows only on slices and sub-buffers
    buf, offs = batch.data.tobytes(), (batch.offsets - batch.offsets[0]).tolist()
    return np.array([zlib.crc32(buf[offs[i] : offs[i + 1]]) for i in range(len(batch))], dtype=np.uint64)


def _empty_key_crash(batch: KeyBatch, seed: int) -> np.ndarray:
    return np.array([zlib.crc32(k[:1] * (1 + k[0] % 2) + k) for k in batch.to_list()], dtype=np.uint64)


def _empty_batch_crash(batch: KeyBatch, seed: int) -> np.ndarray:
    return np.stack([np.uint64(v) for v in _crc(batch)])


def _uses_seed(batch: KeyBatch, seed: int) -> np.ndarray:
    return np.array(_crc(batch, seed), dtype=np.uint64)


def _ignores_seed(batch: KeyBatch, seed: int) -> np.ndarray:
    return np.array(_crc(batch), dtype=np.uint64)


BROKEN = {
    # id: (batch function, width, seeded, check that must fail, words expected in the message)
    "wrong_dtype": (_wrong_dtype, 32, False, "deterministic", "dtype int64"),
    "too_wide": (_too_wide, 32, False, "deterministic", "declared 32 bits"),
    "flat_128": (_flat_128, 128, False, "deterministic", "shape"),
    "nondeterministic": (_nondeterministic, 32, False, "deterministic", "second call"),
    "writes_input": (_writes_input, 32, False, "deterministic", "wrote to the input"),
    "position_dependent": (_position_dependent, 64, False, "batch_equals_per_key", "each key hashed alone"),
    "ignores_first_offset": (_ignores_first_offset, 32, False, "slicing", "larger buffer"),
    "empty_key_crash": (_empty_key_crash, 32, False, "empty_keys", "IndexError"),
    "empty_batch_crash": (_empty_batch_crash, 64, False, "empty_batch", "ValueError"),
    "uses_seed": (_uses_seed, 32, False, "seed", "declared unseeded"),
    "ignores_seed": (_ignores_seed, 32, True, "seed", "declared seeded"),
}


@pytest.mark.parametrize("case", sorted(BROKEN))
def test_contract_catches_broken_function(case: str) -> None:
    function, width, seeded, failing_check, words = BROKEN[case]
    spec = HashSpec(f"broken_{case}", width, seeded, "kernel", function)
    checks = dict(iter_contract_checks(spec, seed=3, n_keys=60))
    with pytest.raises(AssertionError) as info:
        checks[f"broken_{case}:{failing_check}"]()
    message = str(info.value)
    assert f"'broken_{case}'" in message and words in message
    with pytest.raises(AssertionError):
        check_hash(spec, seed=3, n_keys=60)


def test_contract_names_the_first_bad_key() -> None:
    spec = HashSpec("positional", 64, False, "kernel", _position_dependent)
    with pytest.raises(AssertionError, match=r"59 of 60 keys differ, first #1 \(key of 1 bytes"):
        dict(iter_contract_checks(spec, seed=3, n_keys=60))["positional:batch_equals_per_key"]()


# ---------------------------------------------------------------------------------------------------------------
# name lookup


def test_unknown_name_lists_known_names() -> None:
    with pytest.raises(UnknownHashError) as info:
        REGISTRY.get("no_such_hash")
    message = str(info.value)
    assert "'no_such_hash'" in message
    for name in BUILTIN_NAMES:
        assert name in message
    assert "module:function" in message


def test_unknown_hash_error_is_a_usage_error() -> None:
    with pytest.raises(UsageError):
        REGISTRY.get("murmur4")


def test_duplicate_name_raises_usage_error() -> None:
    registry = _fresh_registry()
    duplicate = from_callable("crc32", zlib.crc32, width=32)
    with pytest.raises(UsageError, match="'crc32' is already registered"):
        registry.register(duplicate)
    assert registry.get("crc32").path == "kernel"
    assert registry.register(duplicate, replace=True) is duplicate
    assert registry.get("crc32") is duplicate
    assert REGISTRY.get("crc32").path == "kernel"  # the default registry is untouched


def test_bad_width_or_path_is_a_usage_error() -> None:
    with pytest.raises(UsageError, match="width must be 32, 64 or 128"):
        HashSpec("odd", 48, False, "kernel", _flat_128)
    with pytest.raises(UsageError, match="path must be"):
        HashSpec("odd", 64, False, "gpu", _flat_128)


# ---------------------------------------------------------------------------------------------------------------
# user callables given as module:function


USER_MODULE = """
import zlib

import numpy as np


def crc_per_key(key):
    return zlib.crc32(key)


def crc_batch(batch, seed):
    return np.array([zlib.crc32(k, seed) for k in batch.to_list()], dtype=np.uint64)


crc_batch.batch = True
crc_batch.hash_width = 32
crc_batch.seeded = True


def narrow(key):
    return zlib.crc32(key) | (1 << 50)


narrow.hash_width = 32

NOT_CALLABLE = 42
"""


@pytest.fixture
def user_module(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> Iterator[str]:
    name = "hashaudit_test_user_hashes"
    (tmp_path / f"{name}.py").write_text(textwrap.dedent(USER_MODULE))
    (tmp_path / "hashaudit_test_broken_module.py").write_text("raise RuntimeError('broken on import')\n")
    monkeypatch.syspath_prepend(str(tmp_path))
    yield name
    for module in (name, "hashaudit_test_broken_module"):
        sys.modules.pop(module, None)


def test_user_per_key_function(user_module: str) -> None:
    registry = _fresh_registry()
    spec = registry.get(f"{user_module}:crc_per_key")
    assert spec.name == f"{user_module}:crc_per_key"
    assert (spec.width, spec.seeded, spec.path) == (64, False, "per-key")
    assert registry.get(f"{user_module}:crc_per_key") is spec  # registered once, then found by name
    keys = _random_keys(11, count=500)
    assert spec.hash_batch(KeyBatch.from_keys(keys)).tolist() == [zlib.crc32(k) for k in keys]
    check_hash(spec, n_keys=100)


def test_user_per_key_function_declares_width(user_module: str) -> None:
    spec = _fresh_registry().get(f"{user_module}:narrow")
    assert spec.width == 32
    keys = _random_keys(12, count=200)
    # bit 50 lies outside the declared 32 bits, so the wrapper drops it
    assert spec.hash_batch(KeyBatch.from_keys(keys)).tolist() == [zlib.crc32(k) for k in keys]
    check_hash(spec, n_keys=100)


def test_user_batch_function(user_module: str) -> None:
    spec = _fresh_registry().get(f"{user_module}:crc_batch")
    assert (spec.width, spec.seeded) == (32, True)
    keys = _random_keys(13, count=500)
    batch = KeyBatch.from_keys(keys)
    for seed in (0, 99):
        np.testing.assert_array_equal(spec.hash_batch(batch, seed), REGISTRY.get("crc32").hash_batch(batch, seed))
    check_hash(spec, n_keys=100)


@pytest.mark.parametrize(
    ("reference", "words"),
    [
        ("hashaudit_test_no_such_module:f", "cannot import module 'hashaudit_test_no_such_module'"),
        ("hashaudit_test_broken_module:f", "broken on import"),
        ("hashaudit_test_user_hashes:missing", "has no attribute 'missing'"),
        ("hashaudit_test_user_hashes:NOT_CALLABLE", "is not callable"),
    ],
)
def test_bad_reference(user_module: str, reference: str, words: str) -> None:
    registry = _fresh_registry()
    with pytest.raises(UnknownHashError, match=words):
        registry.get(reference)
    assert reference not in registry.names()


# ---------------------------------------------------------------------------------------------------------------
# from_callable


def test_from_callable_crc32_equals_kernel() -> None:
    spec = from_callable("zlib_crc32", zlib.crc32, width=32)
    assert (spec.width, spec.seeded, spec.path) == (32, False, "per-key")
    batch = KeyBatch.from_keys(_random_keys(21))
    np.testing.assert_array_equal(spec.hash_batch(batch), REGISTRY.get("crc32").hash_batch(batch))
    check_hash(spec)


def test_from_callable_seeded_crc32_equals_kernel() -> None:
    spec = from_callable("zlib_crc32_seeded", zlib.crc32, width=32, seeded=True)
    batch = KeyBatch.from_keys(_random_keys(22))
    for seed in (0, 1, 2**32 - 1):
        np.testing.assert_array_equal(spec.hash_batch(batch, seed), REGISTRY.get("crc32").hash_batch(batch, seed))
    check_hash(spec)


def test_from_callable_reduces_modulo_width() -> None:
    # Java-style signed results: a negative value stands for its two's complement in the declared width
    spec = from_callable("signed", lambda key: -len(key) - 1, width=32)
    assert spec.hash_batch(KeyBatch.from_keys([b"", b"ab"])).tolist() == [2**32 - 1, 2**32 - 3]
    spec64 = from_callable("wide", lambda key: (1 << 70) + 5, width=64)
    assert spec64.hash_batch(KeyBatch.from_keys([b"x"])).tolist() == [5]


def _blake2b_128(key: bytes) -> int:
    return int.from_bytes(hashlib.blake2b(key, digest_size=16).digest(), "little")


def test_from_callable_128_bit_splits_words() -> None:
    spec = from_callable("blake2b_128", _blake2b_128, width=128)
    keys = _random_keys(23, count=300)
    out = spec.hash_batch(KeyBatch.from_keys(keys))
    assert out.shape == (300, 2) and out.dtype == np.uint64
    for key, (low, high) in zip(keys, out.tolist(), strict=True):
        digest = hashlib.blake2b(key, digest_size=16).digest()
        assert low == int.from_bytes(digest[:8], "little")
        assert high == int.from_bytes(digest[8:], "little")
        assert spec.hash_key(key) == _blake2b_128(key)
    check_hash(spec, n_keys=100)


def test_from_callable_128_bit_matches_murmur3_128_kernel() -> None:
    # mmh3 (PyPI) returns the x64_128 hash as one unsigned int, h1 in the low word; the kernel gives (low, high)
    spec = from_callable(
        "mmh3_128", lambda key, seed: mmh3.hash128(key, seed, x64arch=True, signed=False), width=128, seeded=True
    )
    batch = KeyBatch.from_keys(_random_keys(24, count=500))
    for seed in (0, 12345):
        np.testing.assert_array_equal(spec.hash_batch(batch, seed), REGISTRY.get("murmur3_128").hash_batch(batch, seed))


def test_from_callable_128_bit_reduces_wider_values() -> None:
    spec = from_callable("wide128", lambda key: (7 << 128) | (3 << 64) | 9, width=128)
    assert spec.hash_batch(KeyBatch.from_keys([b"k"])).tolist() == [[9, 3]]
    assert spec.hash_key(b"k") == (3 << 64) | 9


# ---------------------------------------------------------------------------------------------------------------
# plugins from the entry-point group


class FakeEntryPoint:
    """Stands in for ``importlib.metadata.EntryPoint``: a name and a ``load()``."""

    def __init__(self, name: str, obj: object) -> None:
        self.name = name
        self.obj = obj
        self.loads = 0

    def load(self) -> object:
        self.loads += 1
        return self.obj


def _plugin_batch(batch: KeyBatch, seed: int) -> np.ndarray:
    return np.array([zlib.adler32(k) for k in batch.to_list()], dtype=np.uint64)


_plugin_batch.batch = True  # type: ignore[attr-defined]
_plugin_batch.hash_width = 32  # type: ignore[attr-defined]


@pytest.fixture
def plugins(monkeypatch: pytest.MonkeyPatch) -> list[FakeEntryPoint]:
    entries = [
        FakeEntryPoint("plugin_spec", from_callable("plugin_spec", zlib.crc32, width=32)),
        FakeEntryPoint("plugin_per_key", lambda key: zlib.adler32(key)),
        FakeEntryPoint("plugin_batch", _plugin_batch),
        FakeEntryPoint("crc32", lambda key: 0),  # a plugin may not shadow a built-in
    ]

    def entry_points(*, group: str) -> list[FakeEntryPoint]:
        assert group == ENTRY_POINT_GROUP == "hashaudit.hashes"
        return entries

    monkeypatch.setattr(importlib.metadata, "entry_points", entry_points)
    return entries


def test_plugins_are_listed_after_builtins(plugins: list[FakeEntryPoint]) -> None:
    registry = _fresh_registry()
    assert all(entry.loads == 0 for entry in plugins)  # nothing loaded before the registry is asked
    assert registry.names() == BUILTIN_NAMES + ["plugin_spec", "plugin_per_key", "plugin_batch"]
    assert plugins[-1].loads == 0
    assert registry.get("crc32").path == "kernel"
    registry.names()
    assert [entry.loads for entry in plugins[:3]] == [1, 1, 1]  # loaded once


def test_plugins_are_found_by_get(plugins: list[FakeEntryPoint]) -> None:
    registry = _fresh_registry()
    keys = _random_keys(31, count=300)
    batch = KeyBatch.from_keys(keys)
    assert registry.get("plugin_spec").hash_batch(batch).tolist() == [zlib.crc32(k) for k in keys]
    per_key = registry.get("plugin_per_key")
    assert (per_key.width, per_key.path) == (64, "per-key")
    assert per_key.hash_batch(batch).tolist() == [zlib.adler32(k) for k in keys]
    batch_spec = registry.get("plugin_batch")
    assert (batch_spec.width, batch_spec.seeded) == (32, False)
    assert batch_spec.hash_batch(batch).tolist() == [zlib.adler32(k) for k in keys]
    for name in ("plugin_spec", "plugin_per_key", "plugin_batch"):
        check_hash(registry.get(name), n_keys=100)


def test_unknown_name_lists_plugins(plugins: list[FakeEntryPoint]) -> None:
    with pytest.raises(UnknownHashError, match="plugin_batch"):
        _fresh_registry().get("no_such_hash")


def test_registering_a_taken_plugin_name_raises(plugins: list[FakeEntryPoint]) -> None:
    registry = _fresh_registry()
    registry.names()
    with pytest.raises(UsageError, match="'plugin_per_key' is already registered"):
        registry.register(from_callable("plugin_per_key", zlib.crc32))


def test_non_callable_plugin_is_unknown_hash_error(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(importlib.metadata, "entry_points", lambda *, group: [FakeEntryPoint("bad", 42)])
    with pytest.raises(UnknownHashError, match="'bad'.*not callable"):
        _fresh_registry().names()


# ---------------------------------------------------------------------------------------------------------------
# listing is cheap


def test_listing_imports_no_kernels() -> None:
    code = "import sys, hashaudit.hashes.registry as r; r.REGISTRY.specs(); print('numba' in sys.modules)"
    result = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True, timeout=120)
    assert result.stdout.strip() == "False"


def test_listing_imports_no_kernel_modules() -> None:
    # the fingerprint module comes with the package (it provides the statistics' defaults) but loads no kernel
    code = (
        "import sys, hashaudit.hashes.registry as r; r.REGISTRY.specs(); r.REGISTRY.names();"
        "print(sorted(m for m in sys.modules if m.startswith('hashaudit.hashes.')"
        " and m not in ('hashaudit.hashes.registry', 'hashaudit.hashes.fingerprint')))"
    )
    result = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True, timeout=120)
    assert result.stdout.strip() == "[]"


def test_getting_a_spec_does_not_load_it() -> None:
    code = (
        "import sys, hashaudit.hashes.registry as r; r.get_hash('xxh3_64');print('hashaudit.hashes.xxh' in sys.modules)"
    )
    result = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True, timeout=120)
    assert result.stdout.strip() == "False"


def test_a_32_bit_entry_returning_wider_values_is_refused():
    """A declared width the function does not keep would index outside a table: refused with a clear error."""
    import numpy as np

    from hashaudit.errors import UsageError
    from hashaudit.hashes.registry import HashSpec
    from hashaudit.keys.batch import KeyBatch

    liar = HashSpec("liar", 32, False, "kernel", lambda b, s=0: np.full(len(b), 2**40, dtype=np.uint64))
    with pytest.raises(UsageError, match="declared 32-bit"):
        liar.hash_batch(KeyBatch.from_keys([b"a"]))
