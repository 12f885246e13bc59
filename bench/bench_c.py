"""Benchmark: the audit's bucket checks against a plain single-threaded C loop doing the same work.

Builds ``bench/c_baseline.c`` into ``bench/c_baseline`` with the system compiler (``$CC``, else ``cc``; ``-O2 -Wall
-Wextra``) and checks its MurmurHash3 x86_32 values against ``mmh3.hash(key, 0, signed=False)`` on a small generated
file (every key length from 0 to 40, bytes of all values but ``\\n``, a last line without ``\\n``; read with the default
16 MiB blocks and with 7-byte blocks, so that lines straddle blocks and outgrow the buffer), and its chi-square against
one computed in Python. Then, on ``bench/data/keys_100000000.txt`` (made by ``python bench/bench_audit.py --keys
100000000``) or ``--keys-file``, times as child processes, each once to warm the page and numba caches and then
``--runs`` times (median):

(a) ``c_baseline FILE 1048576``: fread in 16 MiB blocks, MurmurHash3 x86_32 per line, ``hash & (2^20 - 1)`` counted
    into a uint64 array, Pearson's chi-square of the counts;
(b) ``hashaudit audit FILE -H murmur3_32 -m 2^20 --all-keys --checks buckets -q --json R`` (every occurrence counted,
    bucket checks: the same work plus the other bucket statistics), with the default threads (one per core);
(c) the same with ``--threads 1`` (one hashing thread; the input is still read ahead on a second thread), and
(d) (c) pinned to a single core (``sched_setaffinity``), the like-for-like comparison with the C loop;

and the audit of the first 10,000 keys, whose time is the fixed cost of starting Python, importing and loading the
cached numba kernels. Wall seconds are taken around the child alone and its peak RSS is the ``ru_maxrss`` of
``RUSAGE_CHILDREN`` inside a tiny wrapper process that has that one child. The chi-square values of (b)-(d), read from
the JSON report's ``chi_square`` check, must match the C program's to a relative 1e-6, and the key counts exactly. The
load averages before and after are recorded, since other work on the machine slows every figure.

Usage: ``python bench/bench_c.py [--keys-file PATH] [--runs 3]``. Prints a table and writes
``bench/data/c_results.json``.
"""

from __future__ import annotations

import argparse
import itertools
import json
import os
import random
import shlex
import shutil
import statistics
import subprocess
import sys
import tempfile
from pathlib import Path

import mmh3
import numpy as np

HERE = Path(__file__).parent
DATA = HERE / "data"
DEFAULT_FILE = DATA / "keys_100000000.txt"
SOURCE = HERE / "c_baseline.c"
BINARY = HERE / "c_baseline"
BUCKETS = 1 << 20
CFLAGS = ["-O2", "-Wall", "-Wextra"]
CHI_SQUARE_RTOL = 1e-6
# label, --threads, pinned to one core; --threads sets the hashing threads only: the input is read ahead on another
AUDIT_RUNS = (("hashaudit", "0", False), ("hashaudit_threads_1", "1", False), ("hashaudit_one_core", "1", True))

# Runs argv[1:] as its only child and prints, as JSON, the child's wall seconds, CPU seconds, peak RSS and output.
# With --one-core first, the child (and its threads) may run on one CPU only.
MEASURE = """
import json, os, resource, subprocess, sys, time
cmd = sys.argv[1:]
if cmd[0] == "--one-core":
    os.sched_setaffinity(0, {min(os.sched_getaffinity(0))})
    cmd = cmd[1:]
t0 = time.perf_counter()
proc = subprocess.run(cmd, stdout=subprocess.PIPE)
seconds = time.perf_counter() - t0
usage = resource.getrusage(resource.RUSAGE_CHILDREN)
print(json.dumps({"seconds": seconds, "cpu_seconds": usage.ru_utime + usage.ru_stime, "peak_rss_kib": usage.ru_maxrss,
                  "returncode": proc.returncode, "stdout": proc.stdout.decode()}))
"""


def build() -> list[str] | None:
    """Compile the C program; the compiler command, or None when there is no compiler."""
    compiler = shlex.split(os.environ.get("CC", "")) or ([found] if (found := shutil.which("cc")) else [])
    if not compiler or shutil.which(compiler[0]) is None:
        return None
    proc = subprocess.run(
        [*compiler, *CFLAGS, "-o", str(BINARY), str(SOURCE)], capture_output=True, text=True, check=False
    )
    if proc.returncode != 0:
        raise SystemExit(f"compiling {SOURCE} failed:\n{proc.stderr}")
    if proc.stderr.strip():
        print(f"compiler warnings:\n{proc.stderr}", file=sys.stderr)
    return compiler


def compiler_version(compiler: list[str]) -> str:
    """First line of ``CC --version``."""
    proc = subprocess.run([*compiler, "--version"], capture_output=True, text=True, check=False)
    return proc.stdout.splitlines()[0] if proc.stdout else "unknown"


def check_c_program(folder: Path, seed: int = 11) -> int:
    """Compare the C program's hashes and chi-square with mmh3 and numpy on generated keys; the number of keys."""
    rng = random.Random(seed)
    alphabet = bytes(b for b in range(256) if b != ord("\n"))
    keys = [bytes(rng.choice(alphabet) for _ in range(length)) for length in range(41) for _ in range(50)]
    keys += [b"u:%010d:%04x" % (rng.randrange(10**10), rng.randrange(1 << 16)) for _ in range(5000)]
    rng.shuffle(keys)
    path = folder / "check_keys.txt"
    path.write_bytes(b"\n".join(keys))  # no '\n' after the last key
    expected = [mmh3.hash(key, 0, signed=False) for key in keys]
    for block_bytes in ([], ["7"]):
        out = subprocess.run(
            [str(BINARY), "--dump", str(len(keys)), str(path), *block_bytes], capture_output=True, check=True
        ).stdout
        got = [int(line) for line in out.split()]
        if got != expected:
            first = next(
                (i for i, (a, b) in enumerate(zip(got, expected, strict=False)) if a != b), min(len(got), len(expected))
            )
            raise SystemExit(
                f"c_baseline (block {block_bytes or 'default'}) disagrees with mmh3 at key {first} "
                f"({keys[first]!r}): {len(got)} hashes for {len(keys)} keys"
            )
    buckets = 64
    counts = np.bincount(np.array(expected, dtype=np.uint64) & np.uint64(buckets - 1), minlength=buckets)
    expected_count = len(keys) / buckets
    python_chi_square = float(((counts - expected_count) ** 2).sum() / expected_count)
    for block_bytes in ([], ["7"]):
        out = subprocess.run([str(BINARY), str(path), str(buckets), *block_bytes], capture_output=True, check=True)
        report = json.loads(out.stdout)
        if report["keys"] != len(keys) or not np.isclose(report["chi_square"], python_chi_square, rtol=1e-12):
            raise SystemExit(f"c_baseline counted {report}, Python {len(keys)} keys, chi-square {python_chi_square}")
    return len(keys)


def measure(cmd: list[str], runs: int, ok_codes: tuple[int, ...] = (0,), one_core: bool = False) -> dict:
    """One warm-up, then ``runs`` runs of cmd via the wrapper: median seconds, largest peak RSS, every output."""
    results = []
    wrapper = [sys.executable, "-c", MEASURE, *(["--one-core"] if one_core else [])]
    for _ in range(runs + 1):
        proc = subprocess.run([*wrapper, *cmd], capture_output=True, text=True, check=True)
        result = json.loads(proc.stdout)
        if result["returncode"] not in ok_codes:
            raise SystemExit(f"{shlex.join(cmd)} exited with {result['returncode']}")
        results.append(result)
    measured = results[1:]
    return {
        "seconds": statistics.median(r["seconds"] for r in measured),
        "all_seconds": [round(r["seconds"], 3) for r in measured],
        "cpu_seconds": statistics.median(r["cpu_seconds"] for r in measured),
        "peak_rss_mib": max(r["peak_rss_kib"] for r in measured) / 1024,
        "stdouts": [r["stdout"] for r in measured],
    }


def audit_command(path: Path, threads: str, report_path: Path) -> list[str]:
    """The audit doing the C program's work: every occurrence counted, bucket checks, one table of 2^20 buckets."""
    cmd = [sys.executable, "-m", "hashaudit", "audit", str(path), "-H", "murmur3_32", "-m", "2^20", "--all-keys"]
    return [*cmd, "--checks", "buckets", "--threads", threads, "-q", "--json", str(report_path)]


def audit_chi_square(report_path: Path) -> tuple[float, int]:
    """The ``chi_square`` check's statistic and its key count from a hashaudit JSON report."""
    report = json.loads(report_path.read_text())
    (check,) = (c for h in report["hashes"] for c in h["checks"] if c["name"] == "chi_square")
    return float(check["statistic"]), int(check["keys"])


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--keys-file", type=Path, default=DEFAULT_FILE)
    parser.add_argument("--runs", type=int, default=3, help="measured runs of each command after one warm-up")
    args = parser.parse_args()
    if not args.keys_file.exists():
        raise SystemExit(f"{args.keys_file} is missing: python bench/bench_audit.py --keys 100000000 makes it")
    compiler = build()
    if compiler is None:
        wanted = os.environ.get("CC") or "cc"
        print(f"no C compiler ({wanted!r} not found; set $CC to one): skipping the C baseline benchmark")
        return
    load_before = os.getloadavg()
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        checked_keys = check_c_program(folder)
        print(f"c_baseline agrees with mmh3 on {checked_keys:,} generated keys (16 MiB and 7-byte blocks)", flush=True)

        c_run = measure([str(BINARY), str(args.keys_file), str(BUCKETS)], args.runs)
        c_reports = [json.loads(out) for out in c_run["stdouts"]]
        c_report = c_reports[-1]
        keys = int(c_report["keys"])
        audit_runs = {}
        for label, threads, one_core in AUDIT_RUNS:
            if one_core and not hasattr(os, "sched_setaffinity"):
                print(f"{label}: this system cannot pin a process to one core, skipped")
                continue
            report_path = folder / f"{label}.json"
            audit_runs[label] = measure(
                audit_command(args.keys_file, threads, report_path), args.runs, (0, 1), one_core
            )
            audit_runs[label]["chi_square"], audit_runs[label]["keys"] = audit_chi_square(report_path)
        # interpreter start, imports and cached kernels: the same command on the first 10,000 keys
        head_file = folder / "head_keys.txt"
        with open(args.keys_file, "rb") as f:
            head_file.write_bytes(b"".join(itertools.islice(f, 10_000)))
        startup = measure(audit_command(head_file, "0", folder / "startup.json"), args.runs, (0, 1))
    load_after = os.getloadavg()

    results: dict = {
        "keys_file": str(args.keys_file),
        "keys": keys,
        "file_mb": round(args.keys_file.stat().st_size / 1e6, 1),
        "buckets": BUCKETS,
        "runs": args.runs,
        "compiler": f"{shlex.join(compiler)} {' '.join(CFLAGS)} ({compiler_version(compiler)})",
        "cores": os.cpu_count(),
        "load_average_before": [round(x, 2) for x in load_before],
        "load_average_after": [round(x, 2) for x in load_after],
        "c_seconds": round(c_run["seconds"], 3),
        "c_all_seconds": c_run["all_seconds"],
        "c_internal_seconds": round(statistics.median(float(r["seconds"]) for r in c_reports), 3),
        "c_cpu_seconds": round(c_run["cpu_seconds"], 2),
        "c_keys_per_second": round(keys / c_run["seconds"]),
        "c_peak_rss_mib": round(c_run["peak_rss_mib"], 1),
        "c_chi_square": float(c_report["chi_square"]),
        "hashaudit_startup_seconds": round(startup["seconds"], 3),
    }
    for label, run in audit_runs.items():
        relative_difference = abs(run["chi_square"] - results["c_chi_square"]) / results["c_chi_square"]
        results |= {
            f"{label}_seconds": round(run["seconds"], 3),
            f"{label}_all_seconds": run["all_seconds"],
            f"{label}_cpu_seconds": round(run["cpu_seconds"], 2),
            f"{label}_keys_per_second": round(keys / run["seconds"]),
            f"{label}_peak_rss_mib": round(run["peak_rss_mib"], 1),
            f"{label}_chi_square": run["chi_square"],
            f"{label}_chi_square_relative_difference": relative_difference,
            f"{label}_chi_square_agrees": relative_difference <= CHI_SQUARE_RTOL and run["keys"] == keys,
            f"{label}_over_c_keys_per_second": round(c_run["seconds"] / run["seconds"], 3),
        }
    for key, value in results.items():
        if isinstance(value, int) and not isinstance(value, bool):
            print(f"{key:<52} {value:>16,}")
        else:
            print(f"{key:<52} {value!s:>16}")
    (DATA / "c_results.json").write_text(json.dumps(results, indent=2) + "\n")
    if not all(results[f"{label}_chi_square_agrees"] for label in audit_runs):
        raise SystemExit(f"chi-square or key count differs between hashaudit and C beyond a relative {CHI_SQUARE_RTOL}")


if __name__ == "__main__":
    main()
