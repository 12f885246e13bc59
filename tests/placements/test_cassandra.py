"""The wide-column store's ``Murmur3Partitioner`` tokens and token ring, bit for bit.

References: cassandra-driver, the DataStax Python driver: ``cassandra.metadata.Murmur3Token.hash_fn`` (its C
extension ``cmurmur3``, "modified to match Cassandra's MM3 hashes") and the pure-Python port
``cassandra.murmur3._murmur3``; and the driver's own ring lookup, ``cassandra.metadata.TokenMap.get_replicas``,
which builds without a cluster from a token-to-host map and a ``Metadata`` holding one ``SimpleStrategy`` keyspace
with replication factor 1 (its first replica is the token's owner). The C hash and the ring lookup run on all
100,000 keys of the shared set; the pure-Python port, at about 15 us per key, on every fifth key. mmh3 (the
reference ``MurmurHash3_x64_128``) shows where Cassandra's signed tail bytes part from the reference.
"""

from __future__ import annotations

import bisect
import pickle
from collections import Counter

import mmh3
import numpy as np
import pytest

from hashaudit.engine.plan import AuditPlan
from hashaudit.engine.runner import audit_batches
from hashaudit.keys.batch import KeyBatch
from hashaudit.placements import cassandra
from hashaudit.placements.rules import CassandraRingLayout, parse_placement
from hashaudit.settings import SettingError

driver_metadata = pytest.importorskip("cassandra.metadata", reason="cassandra-driver is the reference")
driver_murmur3 = pytest.importorskip("cassandra.murmur3", reason="cassandra-driver is the reference")

STRIDE = 5  # the pure-Python port on every fifth key: 20,000 of the 100,000
MIN_LONG, MAX_LONG = -(2**63), 2**63 - 1


def driver_token_map(tokens: np.ndarray, owners: np.ndarray):  # type: ignore[no-untyped-def]
    """The driver's ``TokenMap`` of a ring, hosts named ``node<k>``, with a keyspace of replication factor 1."""
    metadata = driver_metadata.Metadata()
    metadata.keyspaces["ks"] = driver_metadata.KeyspaceMetadata(
        "ks", True, "SimpleStrategy", {"replication_factor": "1"}
    )
    ring = [driver_metadata.Murmur3Token(t) for t in tokens.tolist()]
    owner = {token: f"node{k}" for token, k in zip(ring, owners.tolist(), strict=True)}
    return driver_metadata.TokenMap(driver_metadata.Murmur3Token, owner, ring, metadata)


def driver_node(token_map, token: int) -> int:  # type: ignore[no-untyped-def]
    (host,) = token_map.get_replicas("ks", driver_metadata.Murmur3Token(token))
    return int(host.removeprefix("node"))


def bisect_node(token: int, tokens: list[int], owners: list[int]) -> int:
    """The ring rule in plain Python: the owner of the first token >= the key's, or of the first token."""
    at = bisect.bisect_left(tokens, token)
    return owners[at if at < len(tokens) else 0]


@pytest.fixture(scope="module")
def driver_tokens(placement_keys: list[bytes]) -> list[int]:
    return [driver_metadata.Murmur3Token.hash_fn(k) for k in placement_keys]


def test_tokens_match_the_driver(placement_batch: KeyBatch, driver_tokens: list[int]) -> None:
    out = cassandra.murmur3_token(placement_batch)
    assert out.dtype == np.int64 and out.shape == (len(driver_tokens),)
    assert out.tolist() == driver_tokens  # cassandra-driver Murmur3Token.hash_fn (C extension)


def test_h1_matches_the_pure_python_port(placement_batch: KeyBatch, placement_keys: list[bytes]) -> None:
    subset = placement_keys[::STRIDE]
    out = cassandra.murmur3_h1(placement_batch)[::STRIDE]
    assert out.tolist() == [driver_murmur3._murmur3(k) for k in subset]  # cassandra-driver's pure-Python murmur3


def test_signed_tail_bytes_part_from_the_reference_murmur3(placement_keys: list[bytes]) -> None:
    """A tail byte of 0x80 or more changes the hash from the reference MurmurHash3, except at tail position 7, whose
    sign extension is shifted out of k1 (<< 56); keys without one hash alike."""
    high_tail = [any(b >= 0x80 and t != 7 for t, b in enumerate(k[len(k) & ~15 :])) for k in placement_keys]
    out = cassandra.murmur3_h1(KeyBatch.from_keys(placement_keys)).tolist()
    reference = [mmh3.hash64(k, 0, signed=True)[0] for k in placement_keys]  # mmh3: MurmurHash3_x64_128's h1
    same = [a == b for a, b in zip(out, reference, strict=True)]
    assert all(s for s, high in zip(same, high_tail, strict=True) if not high)
    assert sum(not s for s, high in zip(same, high_tail, strict=True) if high) == sum(high_tail) > 10_000


def test_every_tail_length_and_a_slice() -> None:
    # lengths 0..40 cover every tail of the 16-byte blocks, with bytes above and below 0x80
    keys = [bytes((200 - 7 * i) % 256 for i in range(n)) for n in range(41)]
    batch = KeyBatch.from_keys(keys)
    assert cassandra.murmur3_token(batch).tolist() == [driver_metadata.Murmur3Token.hash_fn(k) for k in keys]
    assert cassandra.murmur3_h1(batch.slice(9, 33)).tolist() == cassandra.murmur3_h1(batch)[9:33].tolist()


def test_normalization_and_the_empty_key(placement_batch: KeyBatch, driver_tokens: list[int]) -> None:
    # Murmur3Partitioner.normalize: Long.MIN_VALUE is the ring's minimum token, never a key's
    assert cassandra.normalize(np.array([MIN_LONG, -1, 0, MAX_LONG])).tolist() == [MAX_LONG, -1, 0, MAX_LONG]
    assert cassandra.MIN_TOKEN == driver_metadata.MIN_LONG and cassandra.MAX_TOKEN == driver_metadata.MAX_LONG
    # the server's getToken gives the minimum token to an empty key; the driver hashes no bytes to 0
    tokens = cassandra.partition_token(placement_batch)
    empty = placement_batch.lengths() == 0
    assert int(empty.sum()) >= 200 and set(tokens[empty].tolist()) == {MIN_LONG}
    assert driver_metadata.Murmur3Token.hash_fn(b"") == 0
    assert tokens[~empty].tolist() == [t for t, e in zip(driver_tokens, empty.tolist(), strict=True) if not e]


@pytest.mark.parametrize(("nodes", "num_tokens", "seed"), [(1, 1, 0), (3, 16, 0), (6, 16, 11), (10, 256, 5)])
def test_ring_owners_match_the_driver_token_map(
    placement_batch: KeyBatch, driver_tokens: list[int], nodes: int, num_tokens: int, seed: int
) -> None:
    ring_tokens, ring_owners = cassandra.random_tokens(nodes, num_tokens, seed)
    token_map = driver_token_map(ring_tokens, ring_owners)
    tokens = cassandra.partition_token(placement_batch)
    out = cassandra.owning_node(tokens, ring_tokens, ring_owners)
    assert out.dtype == np.int64
    # cassandra-driver TokenMap.get_replicas on the server's tokens (the driver's own for every non-empty key)
    assert out.tolist() == [driver_node(token_map, t) for t in tokens.tolist()]
    # the plain-Python bisect model on the driver's tokens, empty keys at the minimum token
    as_lists = ring_tokens.tolist(), ring_owners.tolist()
    empty = (placement_batch.lengths() == 0).tolist()
    keys_tokens = [MIN_LONG if e else t for t, e in zip(driver_tokens, empty, strict=True)]
    assert out.tolist() == [bisect_node(t, *as_lists) for t in keys_tokens]
    # the layout of the rule gives the same nodes from the rule's hash values
    layout = CassandraRingLayout(nodes, num_tokens, seed)
    assert layout.assign(tokens.view(np.uint64), 64).tolist() == out.tolist()


def test_ring_edges_wrap_round() -> None:
    ring_tokens, ring_owners = cassandra.random_tokens(4, 8, 3)
    edges = [MIN_LONG, int(ring_tokens[0]), int(ring_tokens[0]) + 1, int(ring_tokens[-1]), int(ring_tokens[-1]) + 1]
    edges += [MAX_LONG, int(ring_tokens[5]) - 1, int(ring_tokens[5])]
    token_map = driver_token_map(ring_tokens, ring_owners)
    out = cassandra.owning_node(np.array(edges, dtype=np.int64), ring_tokens, ring_owners)
    assert out.tolist() == [driver_node(token_map, t) for t in edges]  # cassandra-driver TokenMap.get_replicas
    first = int(ring_owners[0])
    assert out.tolist()[:3] == [first, first, int(ring_owners[1])] and out.tolist()[4:6] == [first, first]


def test_random_tokens_are_distinct_and_kept_when_a_node_joins() -> None:
    tokens, owners = cassandra.random_tokens(8, 64, 9)
    assert tokens.dtype == np.int64 and len(tokens) == 8 * 64 == len(np.unique(tokens))
    assert np.all(np.diff(tokens) > 0) and np.bincount(owners).tolist() == [64] * 8
    assert MIN_LONG not in tokens.tolist()
    grown, grown_owners = cassandra.random_tokens(9, 64, 9)
    kept = np.isin(grown, tokens)
    assert kept.sum() == len(tokens) and set(grown_owners[~kept].tolist()) == {8}
    assert grown_owners[kept].tolist() == owners.tolist()
    other, _ = cassandra.random_tokens(8, 64, 10)
    assert not np.isin(other, tokens).any()  # another seed, another ring
    with pytest.raises(ValueError, match="at least 1"):
        cassandra.random_tokens(0, 16)


def test_shares_are_the_arcs_of_the_ring() -> None:
    layout = CassandraRingLayout(5, 4, 1)
    tokens, owners = cassandra.random_tokens(5, 4, 1)
    # plain-Python big integers: the range (previous, token] belongs to the token's node, wrapping round
    expected = [0] * 5
    previous = tokens.tolist()[-1] - 2**64
    for t, k in zip(tokens.tolist(), owners.tolist(), strict=True):
        expected[k] += t - previous
        previous = t
    assert sum(expected) == 2**64
    assert layout.shares() == pytest.approx([e / 2**64 for e in expected], rel=1e-12)
    # old tokens stay: the keys that move are those of the new node's arcs
    assert layout.ideal_moved(6) == pytest.approx(CassandraRingLayout(6, 4, 1).shares()[5], rel=1e-12)
    values = np.random.default_rng(20260601).integers(0, 2**64, 1 << 18, dtype=np.uint64)
    moved = np.mean(layout.assign(values, 64) != layout.resized(6).assign(values, 64))
    assert moved == pytest.approx(layout.ideal_moved(6), abs=0.005)
    # the engines pickle the layouts with their accumulators: the ring is rebuilt, the same
    copy = pickle.loads(pickle.dumps(layout))
    assert "_ring" not in copy.__dict__ and copy == layout
    assert copy.assign(values, 64).tolist() == layout.assign(values, 64).tolist()


def test_the_rule_is_parsed_with_its_defaults() -> None:
    assert parse_placement("cassandra:nodes=6").name == "cassandra:nodes=6,num_tokens=16,seed=0"
    placement = parse_placement("cassandra: nodes=3, seed=4, num_tokens=256")
    assert placement.name == "cassandra:nodes=3,num_tokens=256,seed=4"
    assert placement.layout == CassandraRingLayout(3, 256, 4) != CassandraRingLayout(3, 256, 5)
    assert placement.width == 64 and placement.unit == "node"
    for text, words in [
        ("cassandra", "needs nodes=N"),
        ("cassandra:num_tokens=8", "needs nodes=N"),
        ("cassandra:nodes=3,num_tokens=0", "num_tokens must be between 1 and 1,536"),
        ("cassandra:nodes=3,tokens=8", "takes nodes=N, num_tokens=N, seed=N"),
    ]:
        with pytest.raises(SettingError, match=words):
            parse_placement(text)


KEYS = [f"user-{i:07d}:{j}".encode() for i in range(4_000) for j in range(3)]


def _audit(keys: list[bytes], *placements: str):  # type: ignore[no-untyped-def]
    plan = AuditPlan(hashes=("xxh3_64",), checks=("buckets",), buckets=(1024,), placements=placements)
    return audit_batches([KeyBatch.from_keys(keys)], plan, threads=1)


def _findings(result, subject: str) -> dict:  # type: ignore[no-untyped-def]
    audit = next(h for h in result.hashes if h.name == subject)
    return {f.check: f for f in audit.findings}


def test_the_placement_checks_count_the_driver_placement() -> None:
    subject = "cassandra:nodes=5,num_tokens=16,seed=0"
    result = _audit(KEYS, "cassandra:nodes=5")
    findings = _findings(result, subject)
    assert {check: f.verdict for check, f in findings.items()} == {
        "placement_balance": "pass",
        "placement_movement": "pass",
    }
    balance = findings["placement_balance"]
    # reference: the driver's Murmur3Token.hash_fn and TokenMap.get_replicas on the rule's ring
    token_map = driver_token_map(*cassandra.random_tokens(5, 16, 0))
    expected = Counter(driver_node(token_map, driver_metadata.Murmur3Token.hash_fn(k)) for k in set(KEYS))
    assert balance.details["keys_per_shard"] == [expected[k] for k in range(5)]
    assert balance.details["vnodes"] == 16 and balance.details["unit"] == "node"
    movement = findings["placement_movement"]
    # a sixth node takes its own arcs only
    assert movement.details["ideal_fraction_to_next"] == pytest.approx(CassandraRingLayout(6, 16, 0).shares()[5])
    assert abs(movement.effect.observed - movement.effect.ideal) < 0.02


def test_one_partition_key_family_on_few_tokens_fails() -> None:
    """Planted: every key hashes into the range of one token (keys chosen by their tokens), so one node holds them
    all while the ring gives it about a third."""
    layout = CassandraRingLayout(3, 16, 0)
    candidates = [f"order-{i}".encode() for i in range(60_000)]
    nodes = layout.assign(cassandra.partition_token(KeyBatch.from_keys(candidates)).view(np.uint64), 64)
    pinned = [k for k, n in zip(candidates, nodes.tolist(), strict=True) if n == 0]
    result = _audit(pinned[:6000] + KEYS[:3000], "cassandra:nodes=3")
    balance = _findings(result, "cassandra:nodes=3,num_tokens=16,seed=0")["placement_balance"]
    assert balance.verdict == "fail" and balance.details["hottest_shard"] == 0


def test_an_empty_batch() -> None:
    empty = KeyBatch.from_keys([])
    assert cassandra.partition_token(empty).dtype == np.int64 and len(cassandra.murmur3_token(empty)) == 0
    placement = parse_placement("cassandra:nodes=3")
    assert placement.layout.assign(placement.hash_batch(empty), 64).tolist() == []
