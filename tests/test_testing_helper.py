"""``hashaudit.testing.assert_uniform``: passes strong hashes, fails weak ones with their findings in the message,
accepts every kind of key input alike, and refuses bad input with a clear error."""

from __future__ import annotations

import itertools
import pathlib
import re
import subprocess
import sys

import numpy as np
import pandas as pd
import pyarrow as pa
import pytest

from hashaudit.keys.options import SourceOptions
from hashaudit.testing import UniformityError, assert_uniform
from hashaudit.verdict.result import AuditResult

# Every key a concatenation of 12 blocks "Aa" or "BB": 31 * ord("A") + ord("a") == 31 * ord("B") + ord("B") == 2112,
# so poly31 gives all 4,096 keys one value (the classic way to flood a table keyed by that hash).
FLOODING_KEYS = ["".join(blocks) for blocks in itertools.product(("Aa", "BB"), repeat=12)]
# 4,096 ids with a stride of 1,024: their low 12 bits take 4 values, so under the identity hash and a mask table of
# 2^12 buckets every bucket in use holds 4,096 / 4 = 1,024 keys.
STRIDED_IDS = np.arange(4096, dtype=np.uint64) * 1024
FAST = {"buckets": 1024, "checks": "buckets"}  # one table, the bucket checks: well under a second an audit


def _judged(result: AuditResult) -> dict:
    """The report apart from what depends on how the keys were handed over (timings, source descriptions)."""
    return {k: v for k, v in result.to_dict().items() if k not in ("run", "sources")}


def test_import_loads_neither_numpy_nor_numba():
    code = "import sys, hashaudit.testing; print(sorted(m for m in ('numpy', 'numba') if m in sys.modules))"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    assert out.strip() == "[]"


def test_strong_hash_passes_random_keys_silently():
    rng = np.random.default_rng(20240611)
    keys = [f"{value:016x}" for value in rng.integers(0, 2**63, size=8192, dtype=np.int64)]
    result = assert_uniform(keys, "xxh3_64", buckets=(1 << 12, 1 << 13), checks="buckets,bits", seed=0)
    assert isinstance(result, AuditResult)
    assert result.verdict == "pass"
    assert result.keys == 8192
    assert {f.table for f in result.findings} >= {"mask 2^12", "mask 2^13"}


def test_identity_on_strided_ids_fails_with_its_findings_in_the_message():
    with pytest.raises(AssertionError) as caught:
        assert_uniform(STRIDED_IDS, "identity", buckets=4096, scheme="mask", checks="buckets")
    error = caught.value
    assert isinstance(error, UniformityError)
    lines = str(error).splitlines()
    assert lines[0] == "hashaudit: 5 findings with verdict fail for identity on 4,096 keys"
    assert len(lines) == 1 + 5 and all(line.startswith("  FAIL  identity  mask 2^12  ") for line in lines[1:])
    checks = {line.split()[4].rstrip(":") for line in lines[1:]}
    assert checks == {"chi_square", "g_test", "colliding_pairs", "empty_buckets", "max_load"}
    max_load = next(line for line in lines if "max_load:" in line)
    assert "the hottest bucket holds 1,024 keys" in max_load  # 1,024 ids share each of the 4 buckets in use
    assert error.result.verdict == "fail" and error.findings == error.result.findings[:5]


def test_the_same_ids_pass_under_a_strong_hash():
    result = assert_uniform(STRIDED_IDS, "xxh3_64", buckets=4096, scheme="mask", checks="buckets")
    assert result.verdict == "pass"


def test_poly31_fails_on_flooding_keys_that_xxh3_spreads():
    with pytest.raises(UniformityError) as caught:
        assert_uniform(FLOODING_KEYS, "poly31", buckets=4096, checks="buckets,collisions")
    message = str(caught.value)
    # every key has one value: one bucket holds them all, and they form one full-width collision group
    assert re.search(r"^  FAIL  poly31 +mask 2\^12 +max_load: the hottest bucket holds 4,096 keys", message, re.M)
    assert re.search(r"^  FAIL  poly31 +full value +full_collisions: ", message, re.M)
    assert assert_uniform(FLOODING_KEYS, "xxh3_64", buckets=4096, checks="buckets,collisions").verdict == "pass"


def test_every_failing_hash_is_named_and_only_failing_ones():
    with pytest.raises(UniformityError) as caught:
        assert_uniform(FLOODING_KEYS, ["xxh3_64", "poly31"], buckets=4096, checks="buckets")
    assert {f.hash_name for f in caught.value.findings} == {"poly31"}
    assert "xxh3_64  " not in str(caught.value)


# 1,000 of 20,000 random 64-bit ids (5 %) crowd into 256 buckets of 4,096: significant (adjusted p ~ 1e-9) but the
# extra lookup cost, about 2 %, is below the 5 % threshold: a warn, and no more.
def _crowded_ids() -> np.ndarray:
    ids = np.random.default_rng(7).integers(0, 2**64, 20_000, dtype=np.uint64)
    crowded = np.arange(1000, dtype=np.uint64)
    ids[:1000] = crowded % np.uint64(256) + (crowded << np.uint64(32))
    return ids


def test_warn_passes_by_default_and_fails_when_asked():
    ids = _crowded_ids()
    result = assert_uniform(ids, "identity", buckets=4096, checks="buckets")
    assert {f.verdict for f in result.findings} == {"warn", "pass"}
    with pytest.raises(UniformityError) as caught:
        assert_uniform(ids, "identity", buckets=4096, checks="buckets", fail_on=("fail", "warn"))
    assert str(caught.value).startswith("hashaudit: 3 findings with verdict fail or warn for identity")
    assert {f.check for f in caught.value.findings} == {"chi_square", "colliding_pairs", "g_test"}
    assert all("significant but small" in f.message for f in caught.value.findings)


def test_info_passes_by_default_and_fails_when_asked():
    consecutive = np.arange(4096, dtype=np.uint64)  # one key per bucket under identity and mask 2^12: too even
    result = assert_uniform(consecutive, "identity", buckets=4096, checks="buckets")
    assert "info" in {f.verdict for f in result.findings}
    with pytest.raises(UniformityError, match="more even than random"):
        assert_uniform(consecutive, "identity", buckets=4096, checks="buckets", fail_on=("fail", "info"))


STRINGS = [f"user-{i}@example.org" for i in range(2000)] + ["é", "日本"]
INTS = list(range(-1000, 1000)) + [2**63 - 1, -(2**63), 2**64 - 1]


@pytest.fixture(scope="module")
def string_reference() -> dict:
    return _judged(assert_uniform([s.encode() for s in STRINGS], **FAST))


@pytest.fixture(scope="module")
def int_reference() -> dict:
    # --key-format int: each integer as its 8-byte little-endian word, a negative one as its two's complement
    words = np.array([v & (2**64 - 1) for v in INTS], dtype=np.uint64)
    return _judged(assert_uniform(words, **FAST))


STRING_KINDS = {
    "list of str": lambda: list(STRINGS),
    "str and bytes mixed": lambda: [s if i % 2 else s.encode() for i, s in enumerate(STRINGS)],
    "bytearray": lambda: [bytearray(s.encode()) for s in STRINGS],
    "generator": lambda: (s for s in STRINGS),
    "tuple": lambda: tuple(STRINGS),
    "numpy str_": lambda: np.array(STRINGS),
    "numpy bytes_": lambda: np.array([s.encode() for s in STRINGS]),
    "numpy object": lambda: np.array(STRINGS, dtype=object),
    "pandas Series": lambda: pd.Series(STRINGS),
    "arrow string": lambda: pa.array(STRINGS, pa.string()),
    "arrow large_string": lambda: pa.array(STRINGS, pa.large_string()),
    "arrow binary": lambda: pa.array([s.encode() for s in STRINGS], pa.binary()),
    "arrow large_binary": lambda: pa.array([s.encode() for s in STRINGS], pa.large_binary()),
    "arrow dictionary": lambda: pa.array(STRINGS).dictionary_encode(),
    "arrow sliced": lambda: pa.array(["x", *STRINGS, "y"]).slice(1, len(STRINGS)),
    "arrow chunked": lambda: pa.chunked_array(
        [pa.array(STRINGS[:700]), pa.array([], pa.string()), pa.array(STRINGS[700:])]
    ),
}


@pytest.mark.parametrize("kind", STRING_KINDS)
def test_every_text_input_kind_gives_the_same_audit(kind, string_reference):
    assert _judged(assert_uniform(STRING_KINDS[kind](), **FAST)) == string_reference


INT_KINDS = {
    "list of int": lambda: list(INTS),
    "numpy int64 (negatives wrap)": lambda: np.array(INTS[:-1], dtype=np.int64),
    "arrow uint64": lambda: pa.array([v & (2**64 - 1) for v in INTS], pa.uint64()),
    "numpy integer scalars": lambda: [np.uint64(v & (2**64 - 1)) for v in INTS],
}


@pytest.mark.parametrize("kind", INT_KINDS)
def test_every_integer_input_kind_gives_the_same_audit(kind, int_reference):
    keys = INT_KINDS[kind]()
    if kind.startswith("numpy int64"):  # 2^64 - 1 has no int64; its two's complement twin -1 is already a key
        reference = _judged(assert_uniform(np.array(INTS[:-1], dtype=np.int64).view(np.uint64), **FAST))
        assert _judged(assert_uniform(keys, **FAST)) == reference
        return
    assert _judged(assert_uniform(keys, **FAST)) == int_reference


def test_small_integer_dtypes_widen_to_eight_bytes():
    small = np.arange(-100, 100, dtype=np.int8)
    wide = np.arange(-100, 100, dtype=np.int64)
    assert _judged(assert_uniform(small, **FAST)) == _judged(assert_uniform(wide, **FAST))
    unsigned = np.arange(200, dtype=np.uint16)
    assert _judged(assert_uniform(unsigned, **FAST)) == _judged(assert_uniform(list(range(200)), **FAST))


def test_key_files_are_read_with_the_source_options(tmp_path, string_reference, int_reference):
    text = tmp_path / "keys.txt"
    text.write_text("".join(f"{s}\n" for s in STRINGS), encoding="utf-8")
    assert _judged(assert_uniform(str(text), **FAST)) == string_reference
    assert _judged(assert_uniform(pathlib.Path(text), **FAST)) == string_reference
    numbers = tmp_path / "ids.txt"
    numbers.write_text("".join(f"{v}\n" for v in INTS))
    assert _judged(assert_uniform(numbers, options=SourceOptions(key_format="int"), **FAST)) == int_reference
    result = assert_uniform(numbers, **FAST)  # without key_format: the decimal text is the key
    assert result.sources[0]["source"] == str(numbers)


BAD_KEYS = [
    (b"one key", TypeError, "single bytes object"),
    (3.5, TypeError, "not float"),
    ([1.0, 2.0], TypeError, "key 0 is a float"),
    ([b"a", None], TypeError, "key 1 is a NoneType"),
    ([True, False], TypeError, "key 0 is a bool"),
    ([1, "a"], TypeError, "mixes integers with text"),
    (["a", 1], TypeError, "mixes integers with text"),
    ([], ValueError, "no keys"),
    (np.zeros(0, dtype=np.uint64), ValueError, "no keys"),
    (np.zeros((4, 2), dtype=np.uint64), ValueError, "one-dimensional"),
    (np.array([0.5, 1.5]), TypeError, "dtype float64"),
    (np.array([True, False]), TypeError, "dtype bool"),
    (pa.array(["a", None, None]), ValueError, "has 2 nulls"),
    (pa.array([1.5]), TypeError, "type double"),
    ([2**64], ValueError, r"integer key 0 is out of range \[-2\^63, 2\^64-1\]"),
    ([-(2**63) - 1], ValueError, "out of range"),
    (["\ud800"], ValueError, "key 0 cannot be encoded as UTF-8"),
]


@pytest.mark.parametrize(("keys", "error", "words"), BAD_KEYS)
def test_bad_keys_are_refused_clearly(keys, error, words):
    with pytest.raises(error, match=words):
        assert_uniform(keys, **FAST)


def test_a_missing_path_says_a_str_is_a_path(tmp_path):
    with pytest.raises(FileNotFoundError, match=r"pass \['no-such-file'\] to audit one key"):
        assert_uniform("no-such-file", **FAST)
    with pytest.raises(FileNotFoundError, match="no such key file: '.*absent.txt'$"):
        assert_uniform(tmp_path / "absent.txt", **FAST)
    with pytest.raises(ValueError, match="not a regular file"):
        assert_uniform(tmp_path, **FAST)


@pytest.mark.parametrize(
    ("settings", "error", "words"),
    [
        ({"hash": "no_such_hash"}, ValueError, "unknown hash 'no_such_hash'"),
        ({"hash": 42}, TypeError, "hash must be a name"),
        ({"seed": 1.5}, TypeError, "seed must be an int"),
        ({"seed": -1}, ValueError, "seed"),
        ({"buckets": 1000, "scheme": "mask"}, ValueError, "power-of-two"),
        ({"scheme": "modulo"}, ValueError, "schemes"),
        ({"checks": "nonsense"}, ValueError, "unknown check 'nonsense'"),
        ({"alpha": 1.5}, ValueError, "alpha"),
        ({"fail_on": ("warn",)}, ValueError, "must include 'fail'"),
        ({"fail_on": ("fail", "pass")}, ValueError, "not 'pass'"),
        ({"hashes": ("crc32",)}, TypeError, "give hash="),
        ({"options": SourceOptions()}, TypeError, "only applies to keys read from a file"),
        ({"no_such_setting": 1}, TypeError, "unknown settings"),
    ],
)
def test_bad_settings_are_refused_clearly(settings, error, words):
    with pytest.raises(error, match=words):
        assert_uniform(list(range(100)), **{"buckets": 1024, **settings})


def test_other_plan_settings_pass_through():
    result = assert_uniform(list(range(3000)), "xxh3_64", buckets=1024, checks="buckets", all_keys=True)
    assert result.settings["all_keys"] is True
