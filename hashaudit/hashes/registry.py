"""The registry of named hash functions.

An entry (``HashSpec``) declares the output width, whether the function takes a seed, its speed path
(``kernel``: a numba batch kernel, no Python object per key; ``per-key``: a Python call per key) and a
loader ``"module:attribute"`` resolved only when the function is first used, so listing the registry
imports and compiles nothing.

A batch function has the signature ``fn(batch: KeyBatch, seed: int) -> numpy.ndarray``: ``uint64[n]`` for
32- and 64-bit functions, ``uint64[n, 2]`` (low word, high word) for 128-bit ones.
"""

from __future__ import annotations

import importlib
from collections.abc import Callable, Iterable
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from hashaudit.errors import UnknownHashError, UsageError
from hashaudit.keys.batch import KeyBatch

BatchFunction = Callable[[KeyBatch, int], np.ndarray]

ENTRY_POINT_GROUP = "hashaudit.hashes"


@dataclass(frozen=True)
class HashSpec:
    """One registered hash function.

    Parameters
    ----------
    name : str
        Registry name (``murmur3_32``).
    width : int
        Output bits: 32, 64 or 128.
    seeded : bool
        Whether the seed changes the output.
    path : str
        ``"kernel"`` (vectorised numba kernel) or ``"per-key"`` (one Python call per key).
    loader : str or callable
        ``"module:attribute"`` naming the batch function, or the batch function itself.
    description : str
        One line for ``hashaudit hashes``.
    integer_keys : bool
        True for functions defined on 64-bit integers (``identity``, ``fibonacci``): a key is read as
        a little-endian integer of up to 8 bytes.
    """

    name: str
    width: int
    seeded: bool
    path: str
    loader: str | BatchFunction = field(repr=False)
    description: str = ""
    integer_keys: bool = False

    def __post_init__(self) -> None:
        if self.width not in (32, 64, 128):
            raise UsageError(f"hash {self.name!r}: width must be 32, 64 or 128, not {self.width}")
        if self.path not in ("kernel", "per-key"):
            raise UsageError(f"hash {self.name!r}: path must be 'kernel' or 'per-key', not {self.path!r}")

    def load(self) -> BatchFunction:
        """The batch function (imports its module on first use)."""
        if callable(self.loader):
            return self.loader
        module_name, _, attribute = self.loader.partition(":")
        return getattr(importlib.import_module(module_name), attribute)

    def hash_batch(self, batch: KeyBatch, seed: int = 0) -> np.ndarray:
        """Hash every key of ``batch``; returns ``uint64[n]`` (or ``uint64[n, 2]`` for 128-bit)."""
        out = np.asarray(self.load()(batch, seed))
        expected_shape = (len(batch), 2) if self.width == 128 else (len(batch),)
        if out.dtype != np.uint64 or out.shape != expected_shape:
            raise UsageError(
                f"hash {self.name!r} returned {out.dtype}{list(out.shape)}, expected uint64{list(expected_shape)}"
            )
        if self.width == 32 and len(out) and int(out.max()) >> 32:
            # a table index is computed from the declared width: a wider value would point outside the table
            raise UsageError(f"hash {self.name!r} is declared 32-bit but returned a value of 2^32 or more")
        return out

    def hash_key(self, key: bytes, seed: int = 0) -> int:
        """The hash of one key as a Python int (slow; for tests and examples)."""
        out = self.hash_batch(KeyBatch.from_keys([key]), seed)
        if self.width == 128:
            return int(out[0, 0]) | (int(out[0, 1]) << 64)
        return int(out[0])


def _k(name: str, width: int, seeded: bool, loader: str, description: str, integer_keys: bool = False) -> HashSpec:
    return HashSpec(name, width, seeded, "kernel", loader, description, integer_keys)


_BUILTINS: tuple[HashSpec, ...] = (
    _k("murmur3_32", 32, True, "hashaudit.hashes.murmur:murmur3_32", "MurmurHash3 x86_32 (Appleby)"),
    _k("murmur3_128", 128, True, "hashaudit.hashes.murmur:murmur3_128", "MurmurHash3 x64_128 (Appleby)"),
    _k("xxh32", 32, True, "hashaudit.hashes.xxh:xxh32", "xxHash32 (Collet)"),
    _k("xxh64", 64, True, "hashaudit.hashes.xxh:xxh64", "xxHash64 (Collet)"),
    _k("xxh3_64", 64, True, "hashaudit.hashes.xxh:xxh3_64", "XXH3 64-bit (Collet)"),
    _k("fnv1_32", 32, False, "hashaudit.hashes.fnv:fnv1_32", "FNV-1 32-bit"),
    _k("fnv1a_32", 32, False, "hashaudit.hashes.fnv:fnv1a_32", "FNV-1a 32-bit"),
    _k("fnv1_64", 64, False, "hashaudit.hashes.fnv:fnv1_64", "FNV-1 64-bit"),
    _k("fnv1a_64", 64, False, "hashaudit.hashes.fnv:fnv1a_64", "FNV-1a 64-bit"),
    _k("crc32", 32, True, "hashaudit.hashes.crc:crc32", "CRC-32, zlib polynomial (seed = starting value)"),
    _k("crc32c", 32, True, "hashaudit.hashes.crc:crc32c", "CRC-32C, Castagnoli (seed = starting value)"),
    _k("siphash24", 64, True, "hashaudit.hashes.siphash:siphash24", "SipHash-2-4, keyed; 128-bit key from seed"),
    _k("poly31", 32, False, "hashaudit.hashes.fnv:poly31", "h = 31*h + byte (classic string hash)"),
    _k("djb2", 32, False, "hashaudit.hashes.fnv:djb2", "h = 33*h + byte from 5381 (Bernstein)"),
    _k("sdbm", 32, False, "hashaudit.hashes.fnv:sdbm", "h = byte + (h<<6) + (h<<16) - h"),
    _k("identity", 64, False, "hashaudit.hashes.integer:identity", "the integer key itself", integer_keys=True),
    _k(
        "fibonacci",
        64,
        False,
        "hashaudit.hashes.integer:fibonacci",
        "multiplicative hashing, key * 2^64/phi mod 2^64 (Knuth)",
        integer_keys=True,
    ),
    HashSpec(
        "blake2b_64",
        64,
        True,
        "per-key",
        "hashaudit.hashes.reference:blake2b_64",
        "BLAKE2b, 8-byte digest via hashlib (near-ideal baseline)",
    ),
)


class HashRegistry:
    """Named hash functions: the built-ins, plugins from the ``hashaudit.hashes`` entry-point group,
    and user callables given as ``module:function``."""

    def __init__(self, specs: Iterable[HashSpec] = ()) -> None:
        self._specs: dict[str, HashSpec] = {}
        for spec in specs:
            self.register(spec)
        self._plugins_loaded = False

    def register(self, spec: HashSpec, *, replace: bool = False) -> HashSpec:
        """Add ``spec``; a name already taken is an error unless ``replace``."""
        if spec.name in self._specs and not replace:
            raise UsageError(f"hash name {spec.name!r} is already registered")
        self._specs[spec.name] = spec
        return spec

    def _load_plugins(self) -> None:
        if self._plugins_loaded:
            return
        self._plugins_loaded = True
        from importlib.metadata import entry_points

        for entry in entry_points(group=ENTRY_POINT_GROUP):
            if entry.name in self._specs:
                continue
            try:
                spec = _spec_from_object(entry.name, entry.load())
            except Exception as exc:  # a broken plugin must not break the registry: report it in one line
                raise UnknownHashError(
                    f"hash plugin {entry.name!r} ({getattr(entry, 'value', '?')}) cannot be loaded: {exc}"
                ) from None
            if spec.name != entry.name:
                spec = HashSpec(
                    entry.name, spec.width, spec.seeded, spec.path, spec.loader, spec.description, spec.integer_keys
                )
            self.register(spec)

    def names(self) -> list[str]:
        """Every registered name, built-ins first in registry order."""
        self._load_plugins()
        return list(self._specs)

    def specs(self) -> list[HashSpec]:
        """Every registered entry."""
        self._load_plugins()
        return list(self._specs.values())

    def get(self, name: str) -> HashSpec:
        """The entry for ``name``; ``module:function`` names a user callable."""
        if name in self._specs:
            return self._specs[name]
        if ":" in name:
            return self.register(_spec_from_reference(name))
        self._load_plugins()
        if name in self._specs:
            return self._specs[name]
        raise UnknownHashError(f"unknown hash {name!r}; known: {', '.join(self.names())} (or module:function)")


def _spec_from_reference(reference: str) -> HashSpec:
    module_name, _, attribute = reference.partition(":")
    try:
        module = importlib.import_module(module_name)
    except Exception as exc:  # any import failure of user code is a usage error
        raise UnknownHashError(f"--hash {reference}: cannot import module {module_name!r}: {exc}") from None
    try:
        obj = getattr(module, attribute)
    except AttributeError:
        raise UnknownHashError(f"--hash {reference}: module {module_name!r} has no attribute {attribute!r}") from None
    return _spec_from_object(reference, obj)


def _spec_from_object(name: str, obj: Any) -> HashSpec:
    """Turn a plugin object into an entry: a ``HashSpec``, or a callable ``bytes -> int`` / batch callable."""
    if isinstance(obj, HashSpec):
        return obj
    if not callable(obj):
        raise UnknownHashError(f"hash {name!r}: {obj!r} is not callable")
    width = int(getattr(obj, "hash_width", 64))
    seeded = bool(getattr(obj, "seeded", False))
    if getattr(obj, "batch", False):
        path = str(getattr(obj, "hash_path", "per-key"))
        return HashSpec(name, width, seeded, path, obj, "user batch function")
    return from_callable(name, obj, width=width, seeded=seeded)


def from_callable(name: str, function: Callable[..., int], *, width: int = 64, seeded: bool = False) -> HashSpec:
    """Wrap a per-key function ``f(key: bytes) -> int`` (or ``f(key, seed)`` when ``seeded``) as an entry.

    The value is reduced modulo ``2**width``; a 128-bit function's value is split into low and high words.
    """
    mask = (1 << width) - 1

    def batch_function(batch: KeyBatch, seed: int = 0) -> np.ndarray:
        keys = batch.to_list()
        if seeded:
            values = [function(k, seed) & mask for k in keys]
        else:
            values = [function(k) & mask for k in keys]
        if width == 128:
            out = np.empty((len(values), 2), dtype=np.uint64)
            out[:, 0] = [v & 0xFFFFFFFFFFFFFFFF for v in values]
            out[:, 1] = [v >> 64 for v in values]
            return out
        return np.array(values, dtype=np.uint64)

    return HashSpec(name, width, seeded, "per-key", batch_function, f"user function {name}")


REGISTRY = HashRegistry(_BUILTINS)


def get_hash(name: str) -> HashSpec:
    """Look ``name`` up in the default registry."""
    return REGISTRY.get(name)
