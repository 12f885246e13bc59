"""Benchmark: the simulated tables — filling them, growing them, insertion orders, and their share of an audit.

Every part runs on seeded random 64-bit values (``numpy.random.default_rng``), generated before the clock starts:

1. ``simulate`` per table kind: 10 M values into one table of 2^24 slots, measured at the loads 0.25, 0.5 and
   10^7 / 2^24 ≈ 0.596, so that exactly 10 M keys go into every kind. (The audit's default grid up to 0.95 would
   need 15.9 M keys at this size, or hold only 7.97 M in 2^23 slots; the lookups at 0.9 and 0.95 cost more probes
   than those measured here, so these rates are those of a table at most 60 % full.) The seconds include
   measuring lookups at the three loads, as ``simulate`` does; each is the median of ``--repeats`` runs after a
   first call on a tiny table, reported apart (it loads the numba kernels from the cache, or compiles them;
   the first kind also pays for the kernels all kinds share).
2. ``replay_growth`` per kind: the same 10 M values into a table growing by 2@0.75 from 16 slots, lookups measured
   at every worst moment (the default); one run each.
3. ``order_hazard``'s work at 1 M values: linear probing, 2@0.875 from 16 slots, ``mask`` placement (``--scheme``).
   One replay with lookups finds the final size, then each order of ``insertion_orders`` is replayed counting work
   only; reported are the total probes (insertions and rehashes) relative to the random order, the costliest
   single insertion, and seconds.
4. The ``tables`` check group inside an audit of ``bench/data/keys_10000000.txt`` (made by ``bench_audit.py``'s
   generator when missing): ``hashaudit audit FILE -H murmur3_32 -H xxh3_64 -H crc32 -m 2^20 -m 2^22 -m 1000003
   -q`` with ``--checks buckets`` and with ``--checks buckets,tables``, each the median of three runs after a
   warm-up run, and the difference.

Parts 1-3 each run in a child process, whose ``ru_maxrss`` is its peak RSS (imports and the values included).

Usage: ``python bench/bench_tables.py [--keys N] [--repeats R] [--skip-audit]``. Prints tables and writes
``bench/data/tables_results.json``. About two minutes on two cores with the defaults.
"""

from __future__ import annotations

import argparse
import json
import math
import resource
import subprocess
import sys
import time
from pathlib import Path

from _timing import median_run

HERE = Path(__file__).parent
DATA = HERE / "data"
SEED = 20261207
WIDTH = 64
SLOTS_LOG2 = 24
GROWTH = (16, 2.0, 0.75)  # start, factor, maximum load
ORDER_GROWTH = (16, 2.0, 0.875)
ORDER_KEYS = 1_000_000
HASHES = ["-H", "murmur3_32", "-H", "xxh3_64", "-H", "crc32"]
TABLES = ["-m", "2^20", "-m", "2^22", "-m", "1000003"]


def random_values(count: int):
    import numpy as np

    rng = np.random.default_rng(SEED)
    return rng.integers(0, 2**64 - 1, size=count, dtype=np.uint64, endpoint=True)


def peak_rss_mib() -> int:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss >> 10


def child_simulate(keys: int, repeats: int) -> dict:
    """Part 1: seconds of ``simulate`` per kind (median of ``repeats``), the first call on a tiny table apart."""
    from hashaudit.tables.simulate import TABLE_KINDS, simulate

    slots = 1 << SLOTS_LOG2
    if keys >= slots:
        raise SystemExit(f"--keys {keys:,} does not fit an open-addressing table of {slots:,} slots")
    top = keys / slots
    if int(top * slots) < keys:  # floating-point rounding must not drop the last key
        top = math.nextafter(top, 1.0)
    loads = tuple(x for x in (0.25, 0.5) if x < top) + (top,)
    tiny = random_values(2048)
    first_call_seconds = {}
    for kind in TABLE_KINDS:
        t0 = time.perf_counter()
        simulate(tiny, WIDTH, kind, 1 << 11, "mask", (0.25, 0.5, 0.9))
        first_call_seconds[kind] = time.perf_counter() - t0
    rss_before = peak_rss_mib()
    values = random_values(keys)
    rows = {}
    for kind in TABLE_KINDS:
        times = []
        for _ in range(repeats):
            t0 = time.perf_counter()
            cells = simulate(values, WIDTH, kind, slots, "mask", loads)
            times.append(time.perf_counter() - t0)
        last = cells[-1]
        rows[kind] = {
            "keys": last.keys,
            "load": round(last.load, 4),
            "seconds": round(sorted(times)[len(times) // 2], 3),
            "all_seconds": [round(t, 3) for t in times],
            "first_call_seconds": round(first_call_seconds[kind], 3),
            "hit_mean": round(last.hit_mean, 4),
            "miss_mean": round(last.miss_mean, 4),
        }
    return {
        "slots": slots,
        "loads": [round(x, 4) for x in loads],
        "kinds": rows,
        "rss_after_warmup_mib": rss_before,
        "peak_rss_mib": peak_rss_mib(),
    }


def child_growth(keys: int) -> dict:
    """Part 2: ``replay_growth`` of ``keys`` values per kind under 2@0.75 from 16 slots."""
    from hashaudit.tables.growth import GrowthPolicy, replay_growth
    from hashaudit.tables.simulate import TABLE_KINDS

    policy = GrowthPolicy(*GROWTH)
    kinds = [k for k in TABLE_KINDS if k != "quadratic" or policy.powers_of_two]
    for kind in kinds:
        replay_growth(random_values(4096), WIDTH, kind, policy, "mask")  # load the kernels first
    values = random_values(keys)
    rows = {}
    for kind in kinds:
        t0 = time.perf_counter()
        grown = replay_growth(values, WIDTH, kind, policy, "mask")
        seconds = time.perf_counter() - t0
        rows[kind] = {
            "seconds": round(seconds, 3),
            "resizes": grown.resizes,
            "final_slots": grown.slots,
            "keys_moved": grown.keys_moved,
            "insert_probes": grown.insert_probes,
            "rehash_probes": grown.rehash_probes,
        }
    return {"policy": policy.label, "start_slots": policy.start, "kinds": rows, "peak_rss_mib": peak_rss_mib()}


def child_orders(keys: int, scheme: str) -> dict:
    """Part 3: total work of linear probing under 2@0.875 for every order of ``insertion_orders``."""
    from hashaudit.tables.growth import GrowthPolicy, insertion_orders, replay_growth

    policy = GrowthPolicy(*ORDER_GROWTH)
    replay_growth(random_values(4096), WIDTH, "linear", policy, scheme)  # load the kernels first
    values = random_values(keys)
    started = time.perf_counter()
    grown = replay_growth(values, WIDTH, "linear", policy, scheme)
    sizing_seconds = time.perf_counter() - started
    t0 = time.perf_counter()
    orders = insertion_orders(values, WIDTH, grown.slots, scheme, SEED)
    ordering_seconds = time.perf_counter() - t0
    rows = {}
    for name, order in orders.items():
        t0 = time.perf_counter()
        replay = replay_growth(values, WIDTH, "linear", policy, scheme, order=order, measure_moments=False)
        rows[name] = {
            "total_probes": replay.insert_probes + replay.rehash_probes,
            "insert_worst": replay.insert_worst,
            "seconds": round(time.perf_counter() - t0, 3),
        }
    for row in rows.values():
        row["ratio_to_random"] = round(row["total_probes"] / rows["random"]["total_probes"], 3)
    return {
        "keys": keys,
        "policy": policy.label,
        "scheme": scheme,
        "final_slots": grown.slots,
        "sizing_seconds": round(sizing_seconds, 3),
        "ordering_seconds": round(ordering_seconds, 3),
        "total_seconds": round(time.perf_counter() - started, 3),
        "orders": rows,
        "peak_rss_mib": peak_rss_mib(),
    }


def in_child(*args: str) -> dict:
    out = subprocess.run([sys.executable, __file__, *args], check=True, capture_output=True, text=True).stdout
    return json.loads(out)


def audit_cost(path: Path) -> dict | None:
    """Part 4: median seconds of the audit with and without the ``tables`` group."""
    if not path.exists():
        try:
            from bench_audit import make_keys  # the generator bench_audit.py and bench_checks.py use
        except ImportError:
            print(f"{path} is missing and bench_audit.make_keys cannot be imported: skipping the audit part")
            return None
        print(f"generating {path} ...", flush=True)
        DATA.mkdir(exist_ok=True)
        make_keys(path, 10_000_000)
    script = Path(sys.executable).with_name("hashaudit")
    program = [str(script)] if script.exists() else [sys.executable, "-m", "hashaudit"]
    base = [*program, "audit", str(path), *HASHES, *TABLES, "-q"]
    without = median_run([*base, "--checks", "buckets"])
    with_tables = median_run([*base, "--checks", "buckets,tables"])
    return {
        "keys_file": path.name,
        "buckets_seconds": round(without, 2),
        "buckets_tables_seconds": round(with_tables, 2),
        "tables_seconds": round(with_tables - without, 2),
    }


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--keys", type=int, default=10_000_000, help="values for parts 1 and 2")
    parser.add_argument("--order-keys", type=int, default=ORDER_KEYS, help="values for part 3")
    parser.add_argument("--scheme", default="mask", help="home slots in part 3 (mask, high, range, mod)")
    parser.add_argument("--repeats", type=int, default=3, help="runs per kind in part 1 (median)")
    parser.add_argument("--skip-audit", action="store_true")
    parser.add_argument("--child", choices=("simulate", "growth", "orders"), help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.child == "simulate":
        print(json.dumps(child_simulate(args.keys, args.repeats)))
        return
    if args.child == "growth":
        print(json.dumps(child_growth(args.keys)))
        return
    if args.child == "orders":
        print(json.dumps(child_orders(args.order_keys, args.scheme)))
        return
    DATA.mkdir(exist_ok=True)
    results: dict = {"seed": SEED}

    part = in_child("--child", "simulate", "--keys", str(args.keys), "--repeats", str(args.repeats))
    results["simulate"] = part
    loads = ", ".join(f"{x:g}" for x in part["loads"])
    print(f"1. simulate: {args.keys:,} random 64-bit values into {part['slots']:,} slots (loads {loads}), mask")
    print(f"   {'kind':<11} {'keys':>11} {'seconds':>8} {'M keys/s':>9} {'1st call s':>10} {'hit':>6} {'miss':>6}")
    for kind, row in part["kinds"].items():
        print(
            f"   {kind:<11} {row['keys']:>11,} {row['seconds']:>8.2f} {row['keys'] / row['seconds'] / 1e6:>9.2f} "
            f"{row['first_call_seconds']:>10.3f} {row['hit_mean']:>6.3f} {row['miss_mean']:>6.3f}"
        )
    print(f"   peak RSS {part['peak_rss_mib']} MiB ({part['rss_after_warmup_mib']} MiB after imports and first calls)")

    part = in_child("--child", "growth", "--keys", str(args.keys))
    results["growth"] = part
    print(f"\n2. replay_growth: {args.keys:,} values, {part['policy']} from {part['start_slots']} slots, mask")
    print(f"   {'kind':<11} {'seconds':>8} {'M keys/s':>9} {'resizes':>8} {'final slots':>12} {'keys moved':>12}")
    for kind, row in part["kinds"].items():
        print(
            f"   {kind:<11} {row['seconds']:>8.2f} {args.keys / row['seconds'] / 1e6:>9.2f} {row['resizes']:>8} "
            f"{row['final_slots']:>12,} {row['keys_moved']:>12,}"
        )
    print(f"   peak RSS {part['peak_rss_mib']} MiB")

    part = in_child("--child", "orders", "--order-keys", str(args.order_keys), "--scheme", args.scheme)
    results["orders"] = part
    print(
        f"\n3. insertion orders: {part['keys']:,} values, linear probing, {part['policy']} from 16 slots, "
        f"{part['scheme']}, final {part['final_slots']:,} slots"
    )
    print(f"   {'order':<15} {'total probes':>15} {'x random':>9} {'worst insert':>13} {'seconds':>8}")
    for name, row in part["orders"].items():
        print(
            f"   {name:<15} {row['total_probes']:>15,} {row['ratio_to_random']:>9.3f} {row['insert_worst']:>13,} "
            f"{row['seconds']:>8.2f}"
        )
    print(
        f"   {part['total_seconds']:.2f} s in all (sizing replay {part['sizing_seconds']:.2f} s, orders "
        f"{part['ordering_seconds']:.2f} s); peak RSS {part['peak_rss_mib']} MiB"
    )

    if not args.skip_audit:
        audit = audit_cost(DATA / "keys_10000000.txt")
        if audit is not None:
            results["audit"] = audit
            print(f"\n4. audit of {audit['keys_file']}, 3 hashes x 3 tables, median of 3")
            print(f"   --checks buckets          {audit['buckets_seconds']:6.2f} s")
            print(f"   --checks buckets,tables   {audit['buckets_tables_seconds']:6.2f} s")
            print(f"   the tables group          {audit['tables_seconds']:+6.2f} s")
    (DATA / "tables_results.json").write_text(json.dumps(results, indent=2) + "\n")


if __name__ == "__main__":
    main()
