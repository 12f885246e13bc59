"""Generate the bundled sample keys (invented data, fixed seed).

The scenario is fictional: *Marrowby Ferry & Freight*, an island ferry and freight cooperative, with
identifiers of the kinds its systems hash into tables and shards:

``orders.txt``            order numbers from a counter with small gaps (``MF-26-0400000``), one per line
``crate_ids.txt``         crate ids as decimal integers; crates are addressed by 4 KiB page, so every id is a
                          multiple of 4096 (the planted skew: ``identity`` + ``mask`` piles them into one bucket)
``dock_codes.txt``        short dock-slot codes, two letters and two digits (``KD07``)
``manifests.csv``         manifests: id, depot, handheld serial, route path, weight (composite keys)
``scanner_events.jsonl.gz``  scanner events as gzipped JSON Lines with a nested serial and an API path
``tracking_lookups.csv``  a day of parcel-tracking lookups: parcel id, berth slot, response bytes. One parcel is
                          hot (a harbour dashboard polls it: 14 % of the lookups, big responses), and berth slots
                          are numbered by the yard system in steps of 64 (the skew-prone family: ``identity`` +
                          ``mod`` puts every slot on one shard of 8)
``tracking_lookups.sqlite`` and ``tracking_lookups.parquet``  the same lookups as an SQLite table ``lookups`` and as
                          a Parquet file (berth slots as 64-bit integers), for the database and columnar sources
``scan_topic_keys.csv``   an hour of the ``depot-scans`` message topic (12 partitions), summed by record key: the key
                          (``t0417/kelp-yard``, tenant and depot) and its messages. Three shipping tenants carry most of
                          the messages; and the customs bridge (tenant ``t0100``) keys its declaration lanes
                          ``t0100/lane-0008`` …, handing out only lane numbers that the broker's partitioner (murmur2,
                          sign bit cleared, modulo 12) sends to partition 5, so that one consumer reads every lane in
                          order: a key family pinned to one partition by design, found by search below
``cache_keys.txt``        the keys of the cache cluster, one per line: parcel records grouped by a hash tag per parcel
                          (``parcel:{MF-P-1234567}:eta``), untagged sessions and rate counters, and the harbour
                          berth board, whose keys all share the tag ``{berth-board}`` so that one script can update
                          them together (the large tag family: it pins them all to one slot)

Run ``python sample_keys/generate.py``; the output is byte-identical on every run.
"""

from __future__ import annotations

import gzip
import json
import string
from pathlib import Path

import numpy as np

SEED = 20261202
HERE = Path(__file__).parent
DEPOTS = ("ANVIL-PIER", "GULLS-REACH", "NORTH-SLIP", "KELP-YARD", "OLD-CUSTOMS", "MARROW-HEAD", "TERN-BAY")
ROUTE_WORDS = ("anvil", "gulls", "north", "kelp", "customs", "marrow", "tern", "ferry", "barge", "pier")


def orders(rng: np.random.Generator) -> list[str]:
    gaps = rng.choice([1, 1, 1, 1, 2, 3], size=120_000)
    numbers = 400_000 + np.cumsum(gaps)
    return [f"MF-26-{n:07d}" for n in numbers]


def crate_ids(rng: np.random.Generator) -> list[str]:
    pages = rng.choice(np.arange(1, 1 << 24, dtype=np.int64), size=40_000, replace=False)
    return [str(int(p) * 4096) for p in np.sort(pages)]


def dock_codes() -> list[str]:
    letters = string.ascii_uppercase
    return [f"{a}{b}{n:02d}" for a in letters for b in letters for n in range(100)]


def manifests(rng: np.random.Generator) -> str:
    lines = ["manifest_id,depot,handheld_serial,route,weight_kg"]
    serials = [f"MFX{int(x):010X}" for x in rng.integers(0, 1 << 40, size=900)]
    for i in range(40_000):
        depot = DEPOTS[int(rng.integers(len(DEPOTS)))]
        serial = serials[int(rng.integers(len(serials)))]
        a, b = rng.choice(ROUTE_WORDS, size=2, replace=False)
        route = f"/routes/{a}/{b}/pier-{int(rng.integers(1, 9))}"
        weight = f"{rng.gamma(2.0, 180.0):.1f}"
        note_quote = '"' if i % 997 == 0 else ""
        manifest = f"M{260000 + i:07d}"
        if note_quote:  # a few ids carry a comma inside quotes, as real exports do
            manifest = f'"{manifest},R"'
        lines.append(f"{manifest},{depot},{serial},{route},{weight}")
    return "\n".join(lines) + "\n"


def scanner_events(rng: np.random.Generator) -> bytes:
    serials = [f"SC-{int(x):08x}" for x in rng.integers(0, 1 << 32, size=400)]
    out = []
    for i in range(30_000):
        event = {
            "event": i,
            "scanner": {"serial": serials[int(rng.integers(len(serials)))], "firmware": "4.2.1"},
            "path": f"/api/v2/parcels/{int(rng.integers(1_000_000, 9_999_999))}/scan",
            "ok": bool(rng.random() > 0.02),
        }
        out.append(json.dumps(event, separators=(",", ":")))
    text = ("\n".join(out) + "\n").encode()
    return gzip.compress(text, compresslevel=9, mtime=0)


def tracking_lookups(rng: np.random.Generator) -> str:
    parcels = [f"MF-P-{int(x):07d}" for x in rng.choice(np.arange(1, 10_000_000), size=20_000, replace=False)]
    hot = parcels[4242]
    weights = 1.0 / np.arange(1, len(parcels) + 1) ** 0.6  # a mild popularity tail
    weights /= weights.sum()
    lines = ["parcel,berth_slot,bytes"]
    for i in range(80_000):
        if i % 7 == 3:  # the dashboard's poll: one lookup in seven
            parcel, size = hot, int(rng.integers(40_000, 60_000))
        else:
            parcel, size = parcels[int(rng.choice(len(parcels), p=weights))], int(rng.gamma(3.0, 400.0))
        berth = 64 * int(rng.integers(1, 40_000))
        lines.append(f"{parcel},{berth},{size}")
    return "\n".join(lines) + "\n"


def lookups_as_tables(csv_text: str) -> None:
    """The tracking lookups as an SQLite database and a Parquet file (the same rows)."""
    import sqlite3

    import pyarrow as pa
    import pyarrow.parquet as pq

    rows = [line.split(",") for line in csv_text.splitlines()[1:]]
    database = HERE / "tracking_lookups.sqlite"
    database.unlink(missing_ok=True)
    with sqlite3.connect(database) as db:
        db.execute("CREATE TABLE lookups (parcel TEXT NOT NULL, berth_slot INTEGER NOT NULL, bytes INTEGER NOT NULL)")
        db.executemany("INSERT INTO lookups VALUES (?, ?, ?)", [(p, int(b), int(n)) for p, b, n in rows])
    db.close()
    table = pa.table(
        {
            "parcel": pa.array([r[0] for r in rows], pa.string()),
            "berth_slot": pa.array([int(r[1]) for r in rows], pa.int64()),
            "bytes": pa.array([int(r[2]) for r in rows], pa.int64()),
        }
    )
    pq.write_table(table, HERE / "tracking_lookups.parquet", row_group_size=20_000)


LANE_PARTITION = 5  # the partition the customs bridge pins its lanes to
TOPIC_PARTITIONS = 12


def murmur2(data: bytes) -> int:
    """MurmurHash2 (32-bit) with the seed ``0x9747B28C``, as the message broker's producer hashes a record key.

    References: Appleby, MurmurHash2 (``MurmurHash2.cpp``); the seed is the broker client's (its ``Utils.murmur2``).
    """
    m, mask = 0x5BD1E995, 0xFFFFFFFF
    h = 0x9747B28C ^ len(data)
    whole = len(data) - len(data) % 4
    for i in range(0, whole, 4):
        k = int.from_bytes(data[i : i + 4], "little") * m & mask
        k = (k ^ (k >> 24)) * m & mask
        h = (h * m & mask) ^ k
    tail = data[whole:]
    if tail:
        h ^= int.from_bytes(tail, "little")
        h = h * m & mask
    h = (h ^ (h >> 13)) * m & mask
    return h ^ (h >> 15)


def broker_partition(key: str, partitions: int) -> int:
    """The partition of a keyed record: murmur2 of the key bytes, sign bit cleared, modulo the partitions."""
    return (murmur2(key.encode()) & 0x7FFFFFFF) % partitions


def customs_lanes(count: int) -> list[str]:
    """The customs bridge's lane keys: the first ``count`` lane numbers whose key lands on ``LANE_PARTITION``."""
    lanes: list[str] = []
    number = 0
    while len(lanes) < count:
        number += 1
        key = f"t0100/lane-{number:04d}"
        if broker_partition(key, TOPIC_PARTITIONS) == LANE_PARTITION:
            lanes.append(key)
    return lanes


def scan_topic_keys(rng: np.random.Generator) -> str:
    tenants = [int(t) for t in rng.choice(np.arange(101, 10_000), size=900, replace=False)]
    heavy = tenants[:3]  # the three big shippers, each at one or two depots
    rows = []
    for tenant in tenants:
        depots = rng.choice(len(DEPOTS), size=int(rng.integers(1, 3 if tenant in heavy else 6)), replace=False)
        for depot in sorted(int(d) for d in depots):
            if tenant in heavy:
                messages = int(rng.integers(90_000, 240_000))
            else:
                messages = 1 + int(rng.gamma(1.2, 110.0))
            rows.append((f"t{tenant:04d}/{DEPOTS[depot].lower()}", messages))
    rows += [(lane, 1 + int(rng.gamma(2.0, 30.0))) for lane in customs_lanes(300)]
    order = rng.permutation(len(rows))
    return "key,messages\n" + "".join(f"{rows[i][0]},{rows[i][1]}\n" for i in order)


def cache_keys(rng: np.random.Generator) -> str:
    parcels = [f"MF-P-{int(x):07d}" for x in rng.choice(np.arange(1, 10_000_000), size=6_000, replace=False)]
    keys = []
    for parcel in parcels:  # one tag per parcel: its records live on one slot, for multi-key reads
        fields = rng.choice(["status", "eta", "route", "photo", "sig"], size=int(rng.integers(1, 4)), replace=False)
        keys += [f"parcel:{{{parcel}}}:{field}" for field in fields]
    keys += [f"session:{int(x):016x}" for x in rng.integers(0, 1 << 63, size=5_000)]
    keys += [f"rate:{depot.lower()}:{minute:04d}" for depot in DEPOTS for minute in range(0, 1440, 2)]
    board = [f"{{berth-board}}:berth:{n:03d}" for n in range(1, 641)]
    board += [f"{{berth-board}}:tile:{x:02d}-{y:02d}" for x in range(40) for y in range(40)]
    keys += board
    keys = list(dict.fromkeys(keys))
    return "\n".join(keys[i] for i in rng.permutation(len(keys))) + "\n"


def main() -> None:
    rng = np.random.default_rng(SEED)
    (HERE / "orders.txt").write_text("\n".join(orders(rng)) + "\n", encoding="ascii")
    (HERE / "crate_ids.txt").write_text("\n".join(crate_ids(rng)) + "\n", encoding="ascii")
    (HERE / "dock_codes.txt").write_text("\n".join(dock_codes()) + "\n", encoding="ascii")
    (HERE / "manifests.csv").write_text(manifests(rng), encoding="ascii")
    (HERE / "scanner_events.jsonl.gz").write_bytes(scanner_events(rng))
    lookups = tracking_lookups(rng)
    (HERE / "tracking_lookups.csv").write_text(lookups, encoding="ascii")
    lookups_as_tables(lookups)
    # the placement samples come last, so that every file above keeps its bytes
    (HERE / "scan_topic_keys.csv").write_text(scan_topic_keys(rng), encoding="ascii")
    (HERE / "cache_keys.txt").write_text(cache_keys(rng), encoding="ascii")


if __name__ == "__main__":
    main()
