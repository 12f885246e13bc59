"""Benchmark: keys per second of the plain key-file reader (``open_keys`` on one key per line).

Generates into ``bench/data/`` (git-ignored), with fixed seeds, when missing:

- ``read_fixed17.txt``: N keys of exactly 17 bytes (``k`` + 16 hex digits), the fixed-width shortcut;
- ``read_var17.txt``: N keys of 9 to 25 bytes (mean 17), the general line splitter;
- ``read_var17.txt.gz`` (with ``--gzip``): the same, gzip level 1, to show the decompression cost.

Each file is read once to warm the page cache and the numba cache, then timed ``--repeat`` times (best run
reported). Peak RSS is measured in a child process per file, so one file's buffers do not hide another's.

Usage: ``python bench/bench_read.py [--keys N] [--repeat R] [--gzip]``.
"""

from __future__ import annotations

import argparse
import gzip
import json
import resource
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).parent
DATA = HERE / "data"
CHUNK = 1_000_000
HEX = np.frombuffer(b"0123456789abcdef", dtype=np.uint8)


def _fixed_chunk(rng: np.random.Generator, count: int) -> bytes:
    rows = np.empty((count, 18), dtype=np.uint8)
    rows[:, 0] = ord("k")
    rows[:, 1:17] = HEX[rng.integers(0, 16, size=(count, 16))]
    rows[:, 17] = ord("\n")
    return rows.tobytes()


def _variable_chunk(rng: np.random.Generator, count: int) -> bytes:
    lengths = rng.integers(9, 26, size=count)
    rows = HEX[rng.integers(0, 16, size=(count, 26))]
    rows[np.arange(count), lengths] = ord("\n")
    keep = np.arange(26)[None, :] <= lengths[:, None]
    return rows[keep].tobytes()


def make_file(path: Path, n: int, variable: bool, seed: int) -> None:
    """Write ``n`` keys, one per line, in chunks (memory stays small)."""
    rng = np.random.default_rng(seed)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_suffix(path.suffix + ".part")
    with open(tmp, "wb") as f:
        for start in range(0, n, CHUNK):
            count = min(CHUNK, n - start)
            f.write(_variable_chunk(rng, count) if variable else _fixed_chunk(rng, count))
    tmp.rename(path)


def time_read(path: Path) -> tuple[float, int, int]:
    """Seconds to iterate every batch of ``path``, keys read, key bytes read."""
    from hashaudit.keys import open_keys

    start = time.perf_counter()
    keys = 0
    key_bytes = 0
    for batch in open_keys(path):
        keys += len(batch)
        key_bytes += batch.nbytes
    return time.perf_counter() - start, keys, key_bytes


def _child(path: str, repeat: int) -> None:
    time_read(Path(path))  # warm page cache and numba cache
    best = min(time_read(Path(path))[0] for _ in range(repeat))
    _, keys, key_bytes = time_read(Path(path))
    peak_mib = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(json.dumps({"seconds": best, "keys": keys, "key_bytes": key_bytes, "peak_rss_mib": peak_mib}))


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--keys", type=int, default=10_000_000)
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--gzip", action="store_true", help="also time a gzip-compressed copy")
    parser.add_argument("--child", help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.child:
        _child(args.child, args.repeat)
        return
    suffix = f"{args.keys // 1_000_000}m" if args.keys % 1_000_000 == 0 else str(args.keys)
    files = {
        "fixed 17-byte keys": (DATA / f"read_fixed17_{suffix}.txt", False, 11),
        "variable 9-25-byte keys": (DATA / f"read_var17_{suffix}.txt", True, 12),
    }
    for path, variable, seed in files.values():
        if not path.exists():
            make_file(path, args.keys, variable, seed)
    if args.gzip:
        source = files["variable 9-25-byte keys"][0]
        gz = source.with_suffix(".txt.gz")
        if not gz.exists():
            with open(source, "rb") as f_in, gzip.open(gz, "wb", compresslevel=1) as f_out:
                while chunk := f_in.read(1 << 24):
                    f_out.write(chunk)
        files["variable keys, gzip"] = (gz, True, 0)
    results = {}
    print(f"{'file':<26} {'keys':>11} {'seconds':>8} {'M keys/s':>9} {'MB/s':>7} {'peak RSS MiB':>13}")
    for label, (path, _, _) in files.items():
        cmd = [sys.executable, __file__, "--child", str(path), "--repeat", str(args.repeat)]
        out = subprocess.run(cmd, check=True, capture_output=True, text=True).stdout
        r = json.loads(out.strip().splitlines()[-1])
        keys_per_second = r["keys"] / r["seconds"]
        mb_per_second = (r["key_bytes"] + r["keys"]) / r["seconds"] / 1e6
        results[label] = dict(r, keys_per_second=keys_per_second, file=str(path))
        print(
            f"{label:<26} {r['keys']:>11,} {r['seconds']:>8.3f} {keys_per_second / 1e6:>9.1f} "
            f"{mb_per_second:>7.0f} {r['peak_rss_mib']:>13.0f}"
        )
    (DATA / "read_results.json").write_text(json.dumps(results, indent=2) + "\n")


if __name__ == "__main__":
    main()
