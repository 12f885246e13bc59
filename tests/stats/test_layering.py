"""Statistics sit below the hash functions: they receive hash and fingerprint functions, never import them."""

from __future__ import annotations

import ast
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

import hashaudit.stats
from hashaudit.errors import MergeError
from hashaudit.hashes import fingerprint
from hashaudit.keys.batch import KeyBatch
from hashaudit.stats import _hooks
from hashaudit.stats.distinct import DistinctKeys
from hashaudit.stats.heavy import HeavyCounts, HeavyKeys
from hashaudit.stats.sample import KeySample

STATS = Path(hashaudit.stats.__file__).parent


def imported_modules(path: Path) -> set[str]:
    """Every module a file imports, at the top or inside a function."""
    names: set[str] = set()
    for node in ast.walk(ast.parse(path.read_text())):
        if isinstance(node, ast.Import):
            names.update(alias.name for alias in node.names)
        elif isinstance(node, ast.ImportFrom) and node.module:
            names.add(node.module)
            names.update(f"{node.module}.{alias.name}" for alias in node.names)
    return names


@pytest.mark.parametrize("path", sorted(STATS.glob("*.py")), ids=lambda p: p.name)
def test_no_statistics_module_imports_the_hashes(path):
    assert not [m for m in imported_modules(path) if m == "hashaudit.hashes" or m.startswith("hashaudit.hashes.")]


def test_the_fullest_bucket_law_does_not_import_the_closed_forms():
    # theory imports maxload (for plan_capacity); the numerics both need live in _numeric
    assert not [m for m in imported_modules(STATS / "maxload.py") if m.startswith("hashaudit.stats.theory")]


def test_importing_the_statistics_alone_provides_no_default():
    code = (
        "from hashaudit.keys.batch import KeyBatch\n"
        "from hashaudit.stats.distinct import DistinctKeys\n"
        "try:\n    DistinctKeys()\nexcept LookupError as e:\n    print('lookup', 'import hashaudit.hashes' in str(e))\n"
        "import hashaudit.hashes.registry\n"
        "print(type(DistinctKeys().update(KeyBatch.from_keys([b'a', b'a']))).__name__)\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True, timeout=300)
    assert out.stdout.split() == ["lookup", "True", "ndarray"]


def test_the_defaults_are_the_hash_layers_fingerprints():
    assert DistinctKeys().fingerprint is fingerprint.key_fingerprints_128
    assert HeavyKeys().fingerprint is fingerprint.heavy_fingerprints
    assert KeySample().priority is fingerprint.sample_priorities
    assert _hooks.resolve(_hooks.MEMBER, None) is fingerprint.member_fingerprints
    assert _hooks.resolve(_hooks.DEDUP, None) is fingerprint.dedup_fingerprints
    with pytest.raises(ValueError, match="unknown key-function slot"):
        _hooks.provide("nope", len)


def by_first_byte(batch: KeyBatch) -> np.ndarray:
    """A deliberately coarse 64-bit fingerprint: the first byte of the key (0 for an empty key)."""
    first = np.zeros(len(batch), dtype=np.uint64)
    nonempty = batch.lengths() > 0
    first[nonempty] = batch.data[batch.offsets[:-1][nonempty]]
    return first


def test_heavy_keys_count_by_the_function_given_and_their_counts_follow():
    batch = KeyBatch.from_keys([b"apple", b"avocado", b"banana", b"apple"])
    summary = HeavyKeys(capacity=10, fingerprint=by_first_byte).update(batch)
    assert sorted(summary.counts_.tolist()) == [1.0, 3.0]  # "a..." keys share one fingerprint
    counts = HeavyCounts(summary).update(batch)
    assert counts.fingerprint is by_first_byte and sorted(counts.counts_.tolist()) == [1.0, 3.0]
    with pytest.raises(MergeError, match="different functions"):
        HeavyKeys(capacity=10).merge(summary)


def test_distinct_keys_identify_keys_by_the_function_given():
    def by_length(batch: KeyBatch) -> np.ndarray:
        out = np.zeros((len(batch), 2), dtype=np.uint64)
        out[:, 1] = batch.lengths().astype(np.uint64) << np.uint64(56)
        out[:, 0] = 1
        return out

    store = DistinctKeys(fingerprint=by_length)
    assert store.update(KeyBatch.from_keys([b"ab", b"cd", b"e"])).tolist() == [True, False, True]
    with pytest.raises(MergeError, match="different functions"):
        DistinctKeys().merge(store)
