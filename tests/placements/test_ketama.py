"""MD5 and the ketama ring of the memcached clients, bit for bit.

References: the standard library's ``hashlib.md5`` and RFC 1321's test suite for the MD5 kernel; uhashring's
ketama ring (``HashRing(nodes, hash_fn="ketama")``, class ``KetamaRing``) for the key hash, the points and the
servers. uhashring hashes ``str(key).encode("utf-8")``, so it takes the keys that are well-formed UTF-8 (as
``str``); the others (about a sixth of the shared set) are checked against uhashring's points with ``hashlib``
and a plain-Python lower-bound search. uhashring looks up a key with ``bisect`` (the first point strictly above
its hash) where libketama and libmemcached take the first point at or above it, so the comparison gives a key
whose hash equals a point to that point's server (no key of the shared set does; ``test_a_hash_on_a_point`` shows
the case). All of it runs on all 100,000 keys.
"""

from __future__ import annotations

import bisect
import hashlib
from collections import Counter

import numpy as np
import pytest

from hashaudit.engine.plan import AuditPlan
from hashaudit.engine.runner import audit_batches
from hashaudit.keys.batch import KeyBatch
from hashaudit.placements import ketama
from hashaudit.placements._md5 import md5_digests, md5_words
from hashaudit.placements.rules import KetamaLayout, parse_placement
from hashaudit.settings import SettingError

uhashring = pytest.importorskip("uhashring", reason="uhashring is the reference")

# RFC 1321, appendix A.5 "Test suite"
RFC_1321_VECTORS = [
    (b"", "d41d8cd98f00b204e9800998ecf8427e"),
    (b"a", "0cc175b9c0f1b6a831c399e269772661"),
    (b"abc", "900150983cd24fb0d6963f7d28e17f72"),
    (b"message digest", "f96b697d7cb7938d525a2f31aaf161d0"),
    (b"abcdefghijklmnopqrstuvwxyz", "c3fcd3d76192e4007dfb496cca67e13b"),
    (b"ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz0123456789", "d174ab98d277d9f5a5611c2c9f419d9f"),
    (b"1234567890" * 8, "57edf4a22be3c955ac49da2e2107b67a"),
]


def _text(key: bytes) -> str | None:
    try:
        return key.decode("utf-8")
    except UnicodeDecodeError:
        return None


def reference_ring(names: list[str], weights: list[int] | None = None):  # type: ignore[no-untyped-def]
    nodes = names if weights is None else {n: {"weight": w} for n, w in zip(names, weights, strict=True)}
    return uhashring.HashRing(nodes, hash_fn="ketama")


def reference_server(ring, key: bytes, text: str | None) -> str:  # type: ignore[no-untyped-def]
    """uhashring's server, or for a key it cannot take, hashlib's hash on uhashring's points; a hash equal to a
    point goes to that point's server (libketama's and libmemcached's rule, see the module notes)."""
    points = ring.runtime._keys
    h = ring.hashi(text) if text is not None else int.from_bytes(hashlib.md5(key).digest()[:4], "little")
    if h in ring.runtime._ring:
        return ring.runtime._ring[h]
    if text is not None:
        return ring.get_node(text)
    at = bisect.bisect_left(points, h)
    return ring.runtime._ring[points[at if at < len(points) else 0]]


@pytest.fixture(scope="module")
def texts(placement_keys: list[bytes]) -> list[str | None]:
    return [_text(k) for k in placement_keys]


def test_md5_matches_hashlib(placement_batch: KeyBatch, placement_keys: list[bytes]) -> None:
    out = md5_digests(placement_batch)
    assert out.dtype == np.uint8 and out.shape == (len(placement_keys), 16)
    assert [bytes(row) for row in out] == [hashlib.md5(k).digest() for k in placement_keys]  # hashlib


def test_md5_every_padding_length_and_a_slice() -> None:
    # lengths 0..300 cross the 55/56-byte padding edge and the 64-byte blocks several times
    keys = [bytes((31 * i + n) % 256 for i in range(n)) for n in range(301)]
    batch = KeyBatch.from_keys(keys)
    assert [bytes(row) for row in md5_digests(batch)] == [hashlib.md5(k).digest() for k in keys]  # hashlib
    assert md5_words(batch.slice(50, 130)).tolist() == md5_words(batch)[50:130].tolist()
    assert md5_words(KeyBatch.from_keys([])).shape == (0, 4)


def test_md5_rfc_1321_test_suite() -> None:
    keys = [k for k, _ in RFC_1321_VECTORS]
    assert [bytes(row).hex() for row in md5_digests(KeyBatch.from_keys(keys))] == [d for _, d in RFC_1321_VECTORS]
    assert [hashlib.md5(k).hexdigest() for k in keys] == [d for _, d in RFC_1321_VECTORS]  # the references agree


def test_key_hash_matches_uhashring(
    placement_batch: KeyBatch, placement_keys: list[bytes], texts: list[str | None]
) -> None:
    out = ketama.key_hash(placement_batch)
    assert out.dtype == np.uint32 and out.shape == (len(texts),)
    ring = reference_ring(["server1"])
    assert sum(t is not None for t in texts) > 80_000
    # uhashring KetamaRing.hashi on the UTF-8 keys; hashlib's first four digest bytes, little-endian, on all
    assert [h for h, t in zip(out.tolist(), texts, strict=True) if t is not None] == [
        ring.hashi(t) for t in texts if t is not None
    ]
    assert out.tolist() == [int.from_bytes(hashlib.md5(k).digest()[:4], "little") for k in placement_keys]


@pytest.mark.parametrize(
    ("servers", "weights"), [(1, None), (3, None), (10, None), (3, [2, 1, 1]), (5, [5, 3, 3, 1, 7]), (4, [1, 1, 1, 40])]
)
def test_continuum_matches_uhashring(servers: int, weights: list[int] | None) -> None:
    names = list(ketama.server_names(servers))
    ring = reference_ring(names, weights)
    points, owners = ketama.continuum(names, weights)
    assert points.dtype == np.uint32 and owners.dtype == np.int64
    # uhashring's sorted points and the server its ring maps each to
    assert points.tolist() == sorted(ring.runtime._ring)
    assert [names[k] for k in owners.tolist()] == [ring.runtime._ring[p] for p in points.tolist()]
    # uhashring's points per server (its Counter of points), four per label
    per_server = np.bincount(owners, minlength=servers).tolist()
    assert per_server == [ring.runtime._distribution[n] for n in names]
    assert ketama.labels_per_server(weights or [1] * servers) == [p // 4 for p in per_server]


@pytest.mark.parametrize(("servers", "weights"), [(2, None), (5, None), (12, None), (4, [3, 1, 1, 2])])
def test_servers_match_uhashring(
    placement_batch: KeyBatch,
    placement_keys: list[bytes],
    texts: list[str | None],
    servers: int,
    weights: list[int] | None,
) -> None:
    names = list(ketama.server_names(servers))
    ring = reference_ring(names, weights)
    layout = KetamaLayout(servers, tuple(weights or ()))
    out = layout.assign(ketama.key_hash(placement_batch).astype(np.uint64), 32)
    assert out.dtype == np.int64
    expected = [reference_server(ring, k, t) for k, t in zip(placement_keys, texts, strict=True)]
    assert [names[k] for k in out.tolist()] == expected
    points, owners = ketama.continuum(names, weights)
    assert ketama.owning_server(ketama.key_hash(placement_batch), points, owners).tolist() == out.tolist()


def test_a_hash_on_a_point() -> None:
    """The label ``server1-0`` hashes to a point of server1 (its first digest word): libketama and libmemcached
    give it to server1, uhashring to the server of the next point."""
    names = list(ketama.server_names(4))
    ring = reference_ring(names)
    points, owners = ketama.continuum(names)
    h = int(ketama.key_hash(KeyBatch.from_keys([b"server1-0"]))[0])
    assert h == ring.hashi("server1-0") and ring.runtime._ring[h] == "server1"
    at = int(np.searchsorted(points, h))
    assert ketama.owning_server(np.array([h]), points, owners).tolist() == [0]
    assert ring.get_node("server1-0") == names[int(owners[(at + 1) % len(points)])]


def test_a_point_drawn_twice_goes_to_the_later_server() -> None:
    """``server40-i`` and ``server477-j`` share a 32-bit point (found by computing the rings of server1 .. server1000,
    which hold four such pairs); the later server in the list owns it, as in uhashring's ring."""
    ours = {}
    for names in (["server40", "server477"], ["server477", "server40"]):
        points, owners = ketama.continuum(names)
        ring = reference_ring(names)
        assert len(points) == 319 and len(ring.runtime._keys) == 320  # 2 x 160 points, one of them shared
        assert points.tolist() == sorted(ring.runtime._ring)
        assert [names[k] for k in owners.tolist()] == [ring.runtime._ring[p] for p in points.tolist()]
        ours[names[1]] = dict(zip(points.tolist(), (names[k] for k in owners.tolist()), strict=True))
    (shared,) = set(ketama.continuum(["server40"])[0].tolist()) & set(ketama.continuum(["server477"])[0].tolist())
    assert ours["server477"][shared] == "server477" and ours["server40"][shared] == "server40"


def test_layout_shares_and_movement() -> None:
    layout = KetamaLayout(4, (3, 1, 1, 2))
    points, owners = ketama.continuum(ketama.server_names(4), [3, 1, 1, 2])
    # plain Python: hashes in (previous point, point] go to the point's server, wrapping round
    expected = [0] * 4
    previous = points.tolist()[-1] - 2**32
    for p, k in zip(points.tolist(), owners.tolist(), strict=True):
        expected[k] += p - previous
        previous = p
    assert layout.shares(32) == pytest.approx([e / 2**32 for e in expected], rel=1e-12)
    # a fifth server weighs the mean weight, rounded (7/4 -> 2): the old servers' counts of labels change too, so keys
    # move between old servers as well; the exact share against one on 2^20 seeded random hashes
    grown = layout.resized(5)
    assert grown == KetamaLayout(5, (3, 1, 1, 2, 2))
    values = np.random.default_rng(20260602).integers(0, 2**32, 1 << 20, dtype=np.uint64)
    moved = float(np.mean(layout.assign(values, 32) != grown.assign(values, 32)))
    assert moved == pytest.approx(layout.ideal_moved(5), abs=0.003)
    assert ketama.labels_per_server(grown.server_weights)[:4] != ketama.labels_per_server(layout.server_weights)
    assert layout.ideal_moved(5) > grown.shares(32)[4]
    # equal weights: 40 labels each whatever the count, so only the new server's arcs move
    equal = KetamaLayout(6)
    assert equal.ideal_moved(7) == pytest.approx(KetamaLayout(7).shares(32)[6], rel=1e-12)


def test_the_rule_is_parsed_and_refused() -> None:
    assert parse_placement("ketama:servers=4").name == "ketama:servers=4"
    placement = parse_placement("ketama:servers=3, weights=2:1 : 1")
    assert placement.name == "ketama:servers=3,weights=2:1:1" and placement.layout == KetamaLayout(3, (2, 1, 1))
    assert placement.width == 32 and placement.unit == "server"
    for text, words in [
        ("ketama", "needs servers=N"),
        ("ketama:servers=3,weights=1:1", "weights lists 2 numbers for 3 servers"),
        ("ketama:servers=2,weights=1:100", "needs one point label"),
        ("ketama:servers=2,weights=1:0", "weights must be between 1"),
        ("ketama:servers=2,weights=1;1", "takes servers=N, weights=N:N:…"),
        ("ketama:servers=2:3", "takes servers=N"),
    ]:
        with pytest.raises(SettingError, match=words):
            parse_placement(text)


KEYS = [f"session:{i:08x}".encode() for i in range(12_000)]


def _audit(keys: list[bytes], *placements: str):  # type: ignore[no-untyped-def]
    plan = AuditPlan(hashes=("xxh3_64",), checks=("buckets",), buckets=(1024,), placements=placements)
    return audit_batches([KeyBatch.from_keys(keys)], plan, threads=1)


def _findings(result, subject: str) -> dict:  # type: ignore[no-untyped-def]
    audit = next(h for h in result.hashes if h.name == subject)
    return {f.check: f for f in audit.findings}


def test_the_placement_checks_count_the_reference_placement() -> None:
    result = _audit(KEYS, "ketama:servers=6", "ketama:servers=3,weights=2:1:1")
    findings = _findings(result, "ketama:servers=6")
    assert {check: f.verdict for check, f in findings.items()} == {
        "placement_balance": "pass",
        "placement_movement": "pass",
    }
    ring = reference_ring(list(ketama.server_names(6)))
    expected = Counter(ring.get_node(k.decode()) for k in set(KEYS))  # uhashring's ketama ring
    balance = findings["placement_balance"]
    assert balance.details["keys_per_shard"] == [expected[f"server{k}"] for k in range(1, 7)]
    assert balance.details["vnodes"] == 160 and balance.details["unit"] == "server"
    movement = findings["placement_movement"]
    assert movement.details["ideal_fraction_to_next"] == pytest.approx(KetamaLayout(7).shares(32)[6])
    weighted = _findings(result, "ketama:servers=3,weights=2:1:1")
    assert all(f.verdict == "pass" for f in weighted.values()), [f.message for f in weighted.values()]
    weighted_ring = reference_ring(["server1", "server2", "server3"], [2, 1, 1])
    expected = Counter(weighted_ring.get_node(k.decode()) for k in set(KEYS))
    assert weighted["placement_balance"].details["keys_per_shard"] == [expected[f"server{k}"] for k in (1, 2, 3)]


def test_keys_chosen_by_their_server_fail() -> None:
    """Planted: keys kept only when ketama sends them to server 1, mixed with ordinary keys."""
    layout = KetamaLayout(4)
    candidates = [f"item-{i}".encode() for i in range(30_000)]
    servers = layout.assign(ketama.key_hash(KeyBatch.from_keys(candidates)).astype(np.uint64), 32)
    pinned = [k for k, s in zip(candidates, servers.tolist(), strict=True) if s == 1]
    balance = _findings(_audit(pinned[:4000] + KEYS[:4000], "ketama:servers=4"), "ketama:servers=4")
    assert balance["placement_balance"].verdict == "fail" and balance["placement_balance"].details["hottest_shard"] == 1


def test_an_empty_batch() -> None:
    empty = KeyBatch.from_keys([])
    assert ketama.key_hash(empty).dtype == np.uint32 and len(ketama.key_hash(empty)) == 0
    placement = parse_placement("ketama:servers=3")
    assert placement.layout.assign(placement.hash_batch(empty), 32).tolist() == []
