"""CPython's ``dict`` of string keys, bit for bit against the interpreter itself.

References: ``hash()`` of every key computed by a child interpreter (``sys.executable``) started with
``PYTHONHASHSEED`` fixed, which decodes each key strictly as UTF-8 and keeps the undecodable ones as ``bytes``;
that child's ``_Py_HashSecret`` read through ``ctypes``; the index table of a dict the child builds from ``{}`` by
inserting the keys, read through ``ctypes`` from the ``PyDictKeysObject`` of ``Include/internal/pycore_dict.h``
(``dk_log2_size``, ``dk_log2_index_bytes``, ``dk_nentries``, ``dk_indices``); and ``sys.getsizeof`` of a dict
growing key by key in this interpreter.
"""

from __future__ import annotations

import json
import os
import random
import struct
import subprocess
import sys
from collections import Counter

import numpy as np
import pytest
from cli_runner import run

from hashaudit.keys.batch import KeyBatch
from hashaudit.placements import python_dict
from hashaudit.placements.python_dict import DictLayout
from hashaudit.placements.rules import parse_placement
from hashaudit.settings import SettingError

SEEDS = [0, 1, 7, 20260517, 4294967295]  # PYTHONHASHSEED: 0 (zeroed secret), small, large, the largest allowed

# the child reads n, n uint32 lengths and the keys' bytes from stdin: a key that is not UTF-8 stays bytes
_READ_KEYS = """
import ctypes, json, struct, sys
raw = sys.stdin.buffer.read()
n = int.from_bytes(raw[:8], "little")
at = 8 + 4 * n
keys = []
for length in struct.unpack_from(f"<{n}I", raw, 8):
    key = raw[at : at + length]
    at += length
    try:
        keys.append(key.decode("utf-8"))
    except UnicodeDecodeError:
        keys.append(key)
"""

_HASHES = (
    _READ_KEYS
    + """
secret = bytes((ctypes.c_ubyte * 24).in_dll(ctypes.pythonapi, "_Py_HashSecret"))
sys.stdout.buffer.write(secret + struct.pack(f"<{n}q", *map(hash, keys)))
"""
)

# PyDictObject: PyObject_HEAD (16 bytes), ma_used, ma_version_tag, ma_keys; PyDictKeysObject: dk_refcnt,
# dk_log2_size, dk_log2_index_bytes, dk_kind, dk_version, dk_usable, dk_nentries, then dk_indices at 32
_TABLES = (
    _READ_KEYS
    + """
def index_table(d):
    used = ctypes.c_ssize_t.from_address(id(d) + 16).value
    keys = ctypes.c_void_p.from_address(id(d) + 32).value
    log2_size = ctypes.c_uint8.from_address(keys + 8).value
    log2_index_bytes = ctypes.c_uint8.from_address(keys + 9).value
    nentries = ctypes.c_ssize_t.from_address(keys + 24).value
    assert used == nentries == len(d), (used, nentries, len(d))  # the fields are where they were looked for
    width = {1: ctypes.c_int8, 2: ctypes.c_int16, 4: ctypes.c_int32, 8: ctypes.c_int64}
    indices = (width[1 << (log2_index_bytes - log2_size)] * (1 << log2_size)).from_address(keys + 32)
    slots = [-1] * len(d)
    for slot, entry in enumerate(indices):
        if entry >= 0:
            slots[entry] = slot
    assert sorted(slots) == sorted(set(slots)) and min(slots) >= 0
    return 1 << log2_size, slots

out = []
for count in map(int, sys.argv[1:]):
    d = {}
    for key in keys[:count]:
        d[key] = None
    size, slots = index_table(d)
    out.append({"count": count, "size": size, "slots": slots})
json.dump(out, sys.stdout)
"""
)


def _child(script: str, keys: list[bytes], seed: int, *args: str) -> bytes:
    """Run ``script`` in a child interpreter started with ``PYTHONHASHSEED=seed``, the keys on its stdin."""
    payload = len(keys).to_bytes(8, "little") + struct.pack(f"<{len(keys)}I", *map(len, keys)) + b"".join(keys)
    env = {**os.environ, "PYTHONHASHSEED": str(seed)}
    done = subprocess.run([sys.executable, "-c", script, *args], input=payload, env=env, capture_output=True)
    assert done.returncode == 0, done.stderr.decode()
    return done.stdout


def cpython_hashes(keys: list[bytes], seed: int) -> tuple[bytes, list[int]]:
    """The child's hash secret and its ``hash()`` of every key."""
    out = _child(_HASHES, keys, seed)
    return out[:24], list(struct.unpack(f"<{len(keys)}q", out[24:]))


def cpython_tables(keys: list[bytes], seed: int, counts: list[int]) -> list[dict]:
    """The index table size and each entry's slot in a dict of the first ``count`` keys, for every count."""
    return json.loads(_child(_TABLES, keys, seed, *map(str, counts)))


def _ctypes_layout_known() -> bool:
    # the offsets read by the child are those of 64-bit CPython 3.11 to 3.13
    return sys.implementation.name == "cpython" and (3, 11) <= sys.version_info[:2] <= (3, 13) and sys.maxsize > 2**32


# code point ranges by the str kind they make: Latin-1 beyond ASCII (kind 1), the BMP beyond Latin-1 without the
# surrogates (kind 2), astral planes (kind 4) and the emoji blocks among them
_KIND_RANGES = {
    "latin1": [(0x80, 0x100)],
    "bmp": [(0x100, 0xD800), (0xE000, 0x10000)],
    "astral": [(0x10000, 0x110000)],
    "emoji": [(0x1F300, 0x1FB00)],
}
_NARROWER = {"latin1": [(0x20, 0x7F)], "bmp": [(0x20, 0x7F), (0x80, 0x100)]}
_NARROWER["astral"] = _NARROWER["emoji"] = [*_NARROWER["bmp"], (0x100, 0xD800)]
# the code points at the edges of the kinds and of UTF-8's lengths, U+FFFD written as itself
_EDGES = [0x00, 0x7F, 0x80, 0xFF, 0x100, 0x7FF, 0x800, 0xD7FF, 0xE000, 0xFFFD, 0xFFFF, 0x10000, 0x10FFFF]


def _char(r: random.Random, ranges: list[tuple[int, int]]) -> str:
    lo, hi = r.choice(ranges)
    return chr(r.randrange(lo, hi))


def _text(r: random.Random, kind: str, length: int) -> str:
    """``length`` code points, each from the kind's ranges or narrower ones, at least one from the kind's."""
    chars = [_char(r, _KIND_RANGES[kind] if r.random() < 0.5 else _NARROWER[kind]) for _ in range(length)]
    chars[r.randrange(length)] = _char(r, _KIND_RANGES[kind])
    return "".join(chars)


def str_kind_keys(seed: int = 20260518) -> list[bytes]:
    """Keys of every ``str`` kind beside the shared set (which has few Latin-1 ones): 4,000 per kind of 1 to 40
    code points, every edge code point alone and among ASCII in strings of 1 to 24, and 50 long ones per kind."""
    r = random.Random(seed)
    texts = [_text(r, kind, r.randint(1, 40)) for kind in _KIND_RANGES for _ in range(4000)]
    for edge in map(chr, _EDGES):
        for length in range(1, 25):
            texts.append(edge * length)
            at = r.randrange(length)
            texts.append("x" * at + edge + "y" * (length - 1 - at))
    for kind in _KIND_RANGES:  # 1,024 to 4,096 code points: a random block of 512 repeated (cheap to draw)
        texts += [(_text(r, kind, 512) * 8)[: r.randint(1024, 4096)] for _ in range(50)]
    return [t.encode("utf-8") for t in texts]


_KIND_TOPS = [("ascii", 0x80), ("latin1", 0x100), ("ucs2", 0x10000), ("ucs4", 0x110000)]


def _kind(key: bytes) -> str:
    """The type and str kind CPython gives the key: bytes, empty, ASCII, Latin-1, UCS-2 or UCS-4."""
    try:
        text = key.decode("utf-8")
    except UnicodeDecodeError:
        return "bytes"
    if not text:
        return "empty"
    widest = max(map(ord, text))
    return next(name for name, top in _KIND_TOPS if widest < top)


@pytest.fixture(scope="module")
def keys(placement_keys: list[bytes]) -> list[bytes]:
    """The shared 100,000 keys and the str-kind keys."""
    return placement_keys + str_kind_keys()


@pytest.fixture(scope="module")
def batch(keys: list[bytes]) -> KeyBatch:
    """The keys inside a larger buffer: a kernel reading outside its key changes its result."""
    inner = KeyBatch.from_keys(keys)
    data = np.concatenate([np.full(11, 0xC3, np.uint8), inner.data, np.full(7, 0xF0, np.uint8)])
    return KeyBatch(data, inner.offsets + 11)


@pytest.fixture(scope="module")
def distinct(keys: list[bytes]) -> list[bytes]:
    return list(dict.fromkeys(keys))


def test_the_keys_cover_every_kind(keys: list[bytes]) -> None:
    kinds = Counter(map(_kind, keys))
    assert set(kinds) == {"empty", "ascii", "latin1", "ucs2", "ucs4", "bytes"}
    assert min(kinds.values()) >= 300 and kinds["latin1"] >= 4000 and kinds["bytes"] >= 10_000
    assert sum(len(k) >= 1024 for k in keys) >= 400


@pytest.mark.parametrize("seed", SEEDS)
def test_hashes_and_home_slots_equal_cpython(
    keys: list[bytes], batch: KeyBatch, distinct: list[bytes], seed: int
) -> None:
    secret, expected = cpython_hashes(keys, seed)  # reference: the child interpreter's hash() and _Py_HashSecret
    assert secret == (python_dict.lcg_urandom(seed) if seed else bytes(24))
    assert python_dict.hash_secret(seed) == (
        int.from_bytes(secret[:8], "little"),
        int.from_bytes(secret[8:16], "little"),
    )
    got = python_dict.str_hash(batch, seed)
    wrong = np.flatnonzero(got != np.array(expected, dtype=np.int64))
    assert wrong.size == 0, [(keys[i], int(got[i]), expected[i]) for i in wrong[:5]]
    assert expected[keys.index(b"")] == 0 and -1 not in expected
    placement = parse_placement(f"python-dict:entries={len(distinct)},seed={seed}")
    size = placement.layout.shards
    assert size == 1 << 18 and placement.width == 64  # 112,961 distinct keys > 87,381 = 2/3 of 2^17
    values = placement.hash_batch(batch)
    slots = placement.layout.assign(values, placement.width)
    assert slots.tolist() == [h & (size - 1) for h in expected]  # reference: CPython's hash, masked as the dict does


def _is_str(key: bytes) -> bool:
    try:
        key.decode("utf-8")
    except UnicodeDecodeError:
        return False
    return True


@pytest.mark.skipif(not _ctypes_layout_known(), reason="the dict's C layout is read for 64-bit CPython 3.11 to 3.13")
@pytest.mark.parametrize(("seed", "only_str"), [(0, False), (7, True)])
def test_slots_equal_the_index_table_of_a_cpython_dict(distinct: list[bytes], seed: int, only_str: bool) -> None:
    keys = [k for k in distinct if _is_str(k)] if only_str else distinct
    switched_after = 0 if only_str else next(i for i, k in enumerate(keys) if not _is_str(k))
    assert only_str or switched_after == 7  # the shared key order: seven str keys, then the first bytes key
    counts = [1, 5, 6, 10, 11, 21, 22, 682, 683, 87_381, len(keys)]  # each side of the growth at 5, 10, 21, ...
    tables = cpython_tables(keys, seed, counts)  # reference: the child's dicts, read through ctypes
    hashes = python_dict.str_hash(KeyBatch.from_keys(keys), seed)
    for table in tables:
        count = table["count"]
        size = python_dict.table_size_after(count, switched_after)
        assert size == table["size"], count
        if only_str or count <= switched_after or count > 21:  # the switch after 7 keys doubles 16 slots to 32 early
            assert size == parse_placement(f"python-dict:entries={count}").layout.shards, count
        slots, probes = python_dict.insertion_slots(hashes[:count], size)
        assert slots.tolist() == table["slots"], count
        home = (hashes[:count].view(np.uint64) & np.uint64(size - 1)).astype(np.int64)
        assert np.array_equal(slots[probes == 1], home[probes == 1])
        assert np.all(slots[probes > 1] != home[probes > 1])
    sizes = [t["size"] for t in tables]
    if only_str:
        assert sizes == [8, 8, 16, 16, 32, 32, 64, 1024, 2048, 131_072, 262_144]  # 96,002 distinct str keys
    else:
        assert sizes == [8, 8, 16, 32, 32, 32, 64, 1024, 2048, 131_072, 262_144]  # 112,961 distinct keys
    assert probes.max() > 5  # collisions walked several steps of the perturbed sequence


_SWITCHES = """
import ctypes, json, sys
def size(d):
    return 1 << ctypes.c_uint8.from_address(ctypes.c_void_p.from_address(id(d) + 32).value + 8).value
out = []
for before in range(0, 60):
    for after in range(1, 120):
        d = {f"s{i}": None for i in range(before)}
        for i in range(after):
            d[f"b{i}".encode()] = None
        out.append([before, before + after, size(d)])
json.dump(out, sys.stdout)
"""


@pytest.mark.skipif(not _ctypes_layout_known(), reason="the dict's C layout is read for 64-bit CPython 3.11 to 3.13")
def test_the_switch_to_the_general_layout_doubles_the_table() -> None:
    # reference: a child's dicts of 0 to 59 str keys, then 1 to 119 bytes keys, read through ctypes
    done = subprocess.run([sys.executable, "-c", _SWITCHES], capture_output=True, check=True)
    for before, entries, size in json.loads(done.stdout):
        assert python_dict.table_size_after(entries, before) == size, (before, entries)


def test_table_sizes_equal_the_interpreters_growth() -> None:
    # reference: sys.getsizeof of a dict of str keys growing from {} in this interpreter; its size changes exactly
    # when the index table (and the entries array sized with it) is reallocated
    boundaries = {python_dict.usable_fraction(1 << k) + step for k in range(13, 21) for step in (-1, 0, 1)}
    counts, getsizeof = [], []
    d: dict[str, None] = {}
    for n in range(1, max(boundaries) + 1):
        d[f"key-{n}"] = None
        if n <= 6000 or n in boundaries:
            counts.append(n)
            getsizeof.append(sys.getsizeof(d))
    model = [python_dict.table_size_after(n) for n in counts]
    for i in range(1, len(counts)):
        if counts[i - 1] + 1 == counts[i]:
            assert (getsizeof[i] != getsizeof[i - 1]) == (model[i] != model[i - 1]), counts[i]
    groups: dict[int, set[int]] = {}
    for size, measured in zip(model, getsizeof, strict=True):
        groups.setdefault(size, set()).add(measured)
    assert all(len(v) == 1 for v in groups.values())  # one getsizeof per modelled table size
    assert sorted(groups) == [8 << k for k in range(19)]  # 8 .. 2^21, doubling
    firsts = [counts[model.index(size)] for size in sorted(groups)]
    assert firsts[:9] == [1, 6, 11, 22, 43, 86, 171, 342, 683]  # 2n // 3 + 1 entries grow a table of n slots


@pytest.mark.parametrize(("entries", "size"), [(1, 8), (5, 8), (6, 16), (682, 1024), (683, 2048), (2_796_202, 1 << 22)])
def test_growth_is_a_doubling_past_two_thirds(entries: int, size: int) -> None:
    # USABLE_FRACTION(n) = 2n // 3 entries fit a table of n slots (Objects/dictobject.c)
    assert python_dict.table_size_after(entries) == size
    assert python_dict.usable_fraction(size) >= entries and (
        size == 8 or entries > python_dict.usable_fraction(size // 2)
    )


def test_growth_moves_the_keys_with_the_new_bit(batch: KeyBatch, keys: list[bytes]) -> None:
    _, expected = cpython_hashes(keys, 7)  # reference: CPython's hash() under PYTHONHASHSEED=7
    placement = parse_placement("python-dict:entries=1000,seed=7")
    layout = placement.layout
    assert layout == DictLayout(2048) and layout.label == "2048 slots" and placement.unit == "slot"
    assert layout.resized(2049) == layout.resized(4096) == DictLayout(4096) and layout.resized(2048) == layout
    values = placement.hash_batch(batch)
    here, there = layout.assign(values, 64), layout.resized(2049).assign(values, 64)
    assert (there != here).tolist() == [bool(h & 2048) for h in expected]
    assert layout.ideal_moved(2049) == 0.5 and layout.ideal_moved(2048) == 0.0
    assert layout.shares().tolist() == [1 / 2048] * 2048


def test_parse() -> None:
    placement = parse_placement("python-dict:entries=1000,seed=7")
    assert placement.name == "python-dict:entries=1000,seed=7" and placement.params == (("entries", 1000), ("seed", 7))
    assert placement.layout.shards == 2048  # 1,000 > 682 = 2/3 of 1,024
    assert parse_placement("python-dict:entries=5").name == "python-dict:entries=5,seed=0"
    assert parse_placement("python-dict:seed=4294967295,entries=6").layout == DictLayout(16)


def test_cpython_takes_the_seeds_the_rule_takes() -> None:
    # reference: the interpreter refuses PYTHONHASHSEED above 4294967295 at startup
    def starts(seed: str) -> bool:
        env = {**os.environ, "PYTHONHASHSEED": seed}
        return subprocess.run([sys.executable, "-c", "pass"], env=env, capture_output=True).returncode == 0

    assert starts("4294967295") and not starts("4294967296")
    parse_placement("python-dict:entries=1,seed=4294967295")
    with pytest.raises(SettingError, match="seed must be between 0 and 4,294,967,295"):
        parse_placement("python-dict:entries=1,seed=4294967296")


@pytest.mark.parametrize(
    ("text", "words"),
    [
        ("python-dict", "python-dict needs entries=N"),
        ("python-dict:seed=3", "python-dict needs entries=N"),
        ("python-dict:entries=0", "entries must be between 1"),
        ("python-dict:entries=10,seed=-1", "python-dict takes entries=N, seed=N"),
        ("python-dict:entries=10,seed=x", "python-dict takes entries=N, seed=N"),
        ("python-dict:entries=10,hash=siphash13", "python-dict takes entries=N, seed=N"),
        ("python-dict:entries=2796203", "table of 8,388,608 slots"),
    ],
)
def test_bad_parameters_are_refused(text: str, words: str) -> None:
    with pytest.raises(SettingError, match=words):
        parse_placement(text)


def test_errors() -> None:
    with pytest.raises(ValueError, match="at least 1"):
        python_dict.table_size_after(0)
    with pytest.raises(ValueError, match="power of two of at least 8"):
        DictLayout(24)
    with pytest.raises(ValueError, match="PYTHONHASHSEED"):
        python_dict.hash_secret(1 << 32)
    with pytest.raises(ValueError, match="holds 5 entries, not 6"):
        python_dict.insertion_slots(np.arange(6, dtype=np.int64), 8)
    with pytest.raises(ValueError, match="power of two"):
        python_dict.insertion_slots(np.arange(2, dtype=np.int64), 12)


def test_the_audit_of_keys_crafted_against_one_seed(tmp_path) -> None:  # type: ignore[no-untyped-def]
    # 600 keys whose hashes under PYTHONHASHSEED=7 all have home slots below 32 of 1,024: flooding against a known
    # seed; under another seed the same keys spread as well as any
    candidates = [f"заказ-{n}-ß".encode() for n in range(1 << 16)]
    hashes = python_dict.str_hash(KeyBatch.from_keys(candidates), 7).view(np.uint64)
    crafted = [candidates[i] for i in np.flatnonzero(hashes & np.uint64(1023) < 32)[:600]]
    assert len(crafted) == 600
    path = tmp_path / "keys.txt"
    path.write_bytes(b"".join(k + b"\n" for k in crafted))
    report = tmp_path / "report.json"
    names = ["python-dict:entries=600,seed=7", "python-dict:entries=600,seed=8"]
    args = ["audit", str(path), "--checks", "placement", *(x for n in names for x in ("--placement", n))]
    code, out, err = run([*args, "--json", str(report)])
    assert code == 1, err  # a failed check
    assert all(name in out for name in names)
    subjects = {h["name"]: {c["name"]: c for c in h["checks"]} for h in json.loads(report.read_text())["hashes"]}
    for name, seed in zip(names, (7, 8), strict=True):
        _, expected = cpython_hashes(crafted, seed)  # reference: CPython's hash() under that PYTHONHASHSEED
        balance, movement = subjects[name]["placement_balance"], subjects[name]["placement_movement"]
        slots = Counter(h & 1023 for h in expected)
        assert balance["details"]["keys_per_shard"] == [slots[s] for s in range(1024)]
        assert balance["details"]["unit"] == "slot" and balance["shards"] == 1024
        assert movement["details"]["moved_to_next"] == sum(bool(h & 1024) for h in expected)
        assert movement["details"]["grown_to"] == 2048 and movement["details"]["ideal_fraction_to_next"] == 0.5
    assert max(subjects[names[0]]["placement_balance"]["details"]["keys_per_shard"][32:]) == 0
    assert subjects[names[0]]["placement_balance"]["verdict"] == "fail"
    assert subjects[names[1]]["placement_balance"]["verdict"] == "pass"
