"""PostgreSQL hash partitioning of a text key, bit for bit.

Reference: a real PostgreSQL server (``pg_server.throwaway_postgres``; skipped when its binaries are not installed,
which ``.ci/run`` installs). All 100,000 keys of the shared set go into a table ``PARTITION BY HASH (k)`` of
``bytea`` keys, and the 81,364 that can be ``text`` (valid UTF-8 without a NUL byte; 311 of them empty) into one
of ``text`` keys; the partition each row lands in (``tableoid``) is compared with the rule's, and the server's
``hashtextextended`` with the kernel's for three seeds. Keys that cannot be ``text`` are left out of the text
table only: the server refuses them there, and the rule places them as the ``bytea`` table does.
"""

from __future__ import annotations

from collections.abc import Iterator

import numpy as np
import pytest
from pg_server import throwaway_postgres

from hashaudit.keys.batch import KeyBatch
from hashaudit.placements import postgres
from hashaudit.placements.rules import parse_placement

MODULI = [7, 64]
SEEDS = [0, postgres.HASH_PARTITION_SEED, -(2**63)]  # the last: a bigint seed with only its sign bit set


def _is_text(key: bytes) -> bool:
    """Whether the server accepts the key as ``text`` in a UTF-8 database."""
    try:
        key.decode("utf-8")
    except UnicodeDecodeError:
        return False
    return b"\x00" not in key


def _create_partitioned(conn, table: str, column_type: str, modulus: int) -> None:
    conn.execute(f"CREATE TABLE {table} (i integer, k {column_type}) PARTITION BY HASH (k)")
    for r in range(modulus):
        conn.execute(
            f"CREATE TABLE {table}_r{r} PARTITION OF {table} FOR VALUES WITH (MODULUS {modulus}, REMAINDER {r})"
        )


@pytest.fixture(scope="module")
def server(placement_keys: list[bytes]) -> Iterator[object]:
    """A throwaway cluster holding every key in ``bytea`` tables and the text keys in ``text`` tables, one of each
    per modulus (``i`` is the key's position in the shared set)."""
    with throwaway_postgres() as url:
        import psycopg

        with psycopg.connect(url, autocommit=True) as conn:
            texts = [(i, k.decode("utf-8")) for i, k in enumerate(placement_keys) if _is_text(k)]
            for modulus in MODULI:
                _create_partitioned(conn, f"bytes_{modulus}", "bytea", modulus)
                _create_partitioned(conn, f"texts_{modulus}", "text", modulus)
                with conn.cursor().copy(f"COPY bytes_{modulus} (i, k) FROM STDIN (FORMAT BINARY)") as copy:
                    copy.set_types(["int4", "bytea"])
                    for row in enumerate(placement_keys):
                        copy.write_row(row)
                with conn.cursor().copy(f"COPY texts_{modulus} (i, k) FROM STDIN (FORMAT BINARY)") as copy:
                    copy.set_types(["int4", "text"])
                    for row in texts:
                        copy.write_row(row)
            yield conn


def _server_remainders(conn, table: str) -> list[tuple[int, int]]:
    """(position, remainder) of every row, the remainder read off the name of the partition holding it."""
    rows = conn.execute(f"SELECT i, tableoid::regclass::text FROM {table} ORDER BY i").fetchall()
    return [(i, int(name.rsplit("_r", 1)[1])) for i, name in rows]


def _rule_remainders(keys: list[bytes], modulus: int) -> list[int]:
    """The placement rule as the audit runs it: the subject's values through its layout."""
    placement = parse_placement(f"postgres-hash:modulus={modulus}")
    return placement.layout.assign(placement.hash_batch(KeyBatch.from_keys(keys)), placement.width).tolist()


@pytest.mark.parametrize("modulus", MODULI)
def test_partitions_equal_the_server(
    server, placement_keys: list[bytes], placement_batch: KeyBatch, modulus: int
) -> None:
    # every key, as bytea: the server's partition routing (tableoid of each row)
    expected = _server_remainders(server, f"bytes_{modulus}")
    assert [i for i, _ in expected] == list(range(len(placement_keys)))
    remainders = [r for _, r in expected]
    assert _rule_remainders(placement_keys, modulus) == remainders
    out = postgres.partition(placement_batch, modulus)
    assert out.dtype == np.int64 and out.tolist() == remainders
    # the keys that can be text: the same partitions as text (deterministic collation: the bytes are hashed)
    texts = _server_remainders(server, f"texts_{modulus}")
    assert [i for i, _ in texts] == [i for i, k in enumerate(placement_keys) if _is_text(k)]
    assert len(placement_keys) - len(texts) == 18_636  # left out: 17,520 not UTF-8, 1,116 holding a NUL byte
    assert texts == [(i, remainders[i]) for i, _ in texts]


def test_partition_routing_agrees_with_satisfies_hash_partition(server, placement_keys: list[bytes]) -> None:
    # the server's own check of a row against a partition bound, on every 50th key (all kinds)
    keys = [k for k in placement_keys[::50] if _is_text(k)]
    remainders = postgres.partition(KeyBatch.from_keys(keys), 7).tolist()
    rows = server.execute(
        "SELECT bool_and(satisfies_hash_partition('texts_7'::regclass, 7, r, k)) "
        "FROM unnest(%s::text[], %s::int[]) AS t(k, r)",
        ([k.decode("utf-8") for k in keys], remainders),
    ).fetchone()
    assert rows == (True,)


@pytest.mark.parametrize("seed", SEEDS)
def test_hashtextextended_equals_the_server(server, placement_keys: list[bytes], seed: int) -> None:
    rows = server.execute(f"SELECT i, hashtextextended(k, %s) FROM texts_{MODULI[0]} ORDER BY i", (seed,)).fetchall()
    keys = [placement_keys[i] for i, _ in rows]
    expected = [h for _, h in rows]  # PostgreSQL's hashtextextended, as a signed bigint
    assert postgres.hash_bytes_extended(KeyBatch.from_keys(keys), seed).view(np.int64).tolist() == expected


def test_the_row_hash_is_the_seeded_hash_combined(placement_batch: KeyBatch) -> None:
    # hash_combine64(0, h) = 0 ^ (h + 0x49a0f4dd15e5a8e3 + (0 << 54) + (0 >> 7)) (PostgreSQL, common/hashfn.h)
    h = [int(x) for x in postgres.hash_bytes_extended(placement_batch, 8816678312871386365)]  # HASH_PARTITION_SEED
    combined = [(x + 0x49A0F4DD15E5A8E3) % 2**64 for x in h]
    assert postgres.partition_hash(placement_batch).tolist() == combined


def test_nondeterministic_collations_hash_another_way(server) -> None:
    # PostgreSQL documentation 24.2.2.4: a nondeterministic collation hashes a sort key, not the bytes; a
    # deterministic one (C, and ICU's root locale) hashes the bytes
    try:
        server.execute(
            "CREATE COLLATION IF NOT EXISTS nocase (provider = icu, locale = 'und-u-ks-level2', deterministic = false)"
        )
    except Exception as error:  # a server built without ICU
        pytest.skip(f"no ICU collations on this server: {error}")
    seed = postgres.HASH_PARTITION_SEED
    row = server.execute(
        "SELECT hashtextextended('Key' COLLATE nocase, %s), hashtextextended('key' COLLATE nocase, %s), "
        "hashtextextended('Key' COLLATE \"C\", %s), hashtextextended('Key' COLLATE \"und-x-icu\", %s)",
        (seed, seed, seed, seed),
    ).fetchone()
    mine = int(postgres.hash_bytes_extended(KeyBatch.from_keys([b"Key"]), seed).view(np.int64)[0])
    assert row[0] == row[1] != mine  # case-insensitive: equal strings, one sort key, not the bytes' hash
    assert row[2] == row[3] == mine


def test_published_constants_and_errors() -> None:
    # PostgreSQL, src/include/catalog/partition.h: #define HASH_PARTITION_SEED UINT64CONST(0x7A5B22367996DCFD)
    assert postgres.HASH_PARTITION_SEED == 8816678312871386365
    batch = KeyBatch.from_keys([b"k"])
    for bad in (0, -1, 2**31):
        with pytest.raises(ValueError, match="positive int"):
            postgres.partition(batch, bad)
    empty = KeyBatch.from_keys([])
    assert postgres.partition_hash(empty).dtype == np.uint64 and len(postgres.partition(empty, 4)) == 0
    many = KeyBatch.from_keys([f"k\u00e9y-{n}-{'x' * n}".encode() for n in range(40)])
    assert postgres.partition_hash(many.slice(5, 31)).tolist() == postgres.partition_hash(many)[5:31].tolist()


def test_the_audit_counts_the_servers_partitions(server, placement_keys: list[bytes]) -> None:
    from hashaudit.engine.plan import AuditPlan
    from hashaudit.engine.runner import audit_batches

    plan = AuditPlan(hashes=("xxh3_64",), checks=("buckets",), buckets=(1024,), placements=("postgres-hash:modulus=7",))
    result = audit_batches([KeyBatch.from_keys(placement_keys)], plan, threads=1)
    audit = next(h for h in result.hashes if h.name == "postgres-hash:modulus=7")
    findings = {f.check: f for f in audit.findings}
    assert set(findings) == {"placement_balance", "placement_movement"}
    # distinct keys per partition as the server routes them (every key as bytea)
    expected = [server.execute(f"SELECT count(DISTINCT k) FROM bytes_7_r{r}").fetchone()[0] for r in range(7)]
    assert findings["placement_balance"].details["keys_per_shard"] == expected
    assert findings["placement_balance"].details["unit"] == "partition"
    # the generated keys are strong keys for a 64-bit hash: both checks pass; re-creating the table with modulus 8
    # moves every row but those with h mod 7 = h mod 8, 1 - 7/56 of an ideal hash's (gcd 1: h < 7 in each 56)
    assert all(f.verdict == "pass" for f in audit.findings), [f.message for f in audit.findings]
    assert findings["placement_movement"].details["ideal_fraction_to_next"] == pytest.approx(1 - 7 / 56)
