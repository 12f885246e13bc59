"""Benchmark: the Dask engine against the local engine on the same key files.

For each key file (``bench/data/keys_10000000.txt`` and ``keys_100000000.txt``, made by ``python bench/bench_audit.py
--keys N``; missing files are skipped with a message) runs, as child processes,

    hashaudit audit FILE -H murmur3_32 -m 2^20 --checks buckets -q --json R            (local engine)
    hashaudit audit FILE -H murmur3_32 -m 2^20 --checks buckets -q --json R --engine dask --workers 2

and records the wall seconds and the peak memory of the whole process tree (the client, the scheduler and the worker
processes of the local cluster: the sum of their resident sizes, sampled every 0.2 s with psutil, so a short peak
may be missed). The two JSON reports must agree apart from run metadata. The load averages before and after are
kept, since other work on the machine slows every figure.

Usage: ``python bench/bench_dask.py [--sizes 10000000 100000000] [--workers 2]``. Prints a table and writes
``bench/data/dask_results.json``.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

import psutil

HERE = Path(__file__).parent
DATA = HERE / "data"


def tree_rss(root: psutil.Process) -> int:
    """Resident bytes of a process and all its descendants (0 for those gone meanwhile)."""
    total = 0
    for proc in [root, *root.children(recursive=True)]:
        try:
            total += proc.memory_info().rss
        except psutil.Error:
            pass
    return total


def run_measured(cmd: list[str]) -> tuple[float, int, int]:
    """Wall seconds, peak tree RSS in bytes, and the exit code of ``cmd``."""
    t0 = time.perf_counter()
    child = subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    root = psutil.Process(child.pid)
    peak = [0]
    done = threading.Event()

    def sample() -> None:
        while not done.is_set():
            try:
                peak[0] = max(peak[0], tree_rss(root))
            except psutil.Error:
                pass
            done.wait(0.2)

    sampler = threading.Thread(target=sample, daemon=True)
    sampler.start()
    _, err = child.communicate()
    seconds = time.perf_counter() - t0
    done.set()
    sampler.join()
    if child.returncode not in (0, 1):
        raise SystemExit(f"{' '.join(cmd)} failed ({child.returncode}): {err.decode(errors='replace')[-2000:]}")
    return seconds, peak[0], child.returncode


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", type=int, nargs="+", default=[10_000_000, 100_000_000])
    parser.add_argument("--workers", type=int, default=2)
    args = parser.parse_args()
    results = {"load_before": os.getloadavg(), "cpus": os.cpu_count(), "workers": args.workers, "runs": []}
    print(f"{'keys':>12} {'engine':<8} {'seconds':>8} {'peak RSS (tree)':>16}  same JSON")
    for size in args.sizes:
        path = DATA / f"keys_{size}.txt"
        if not path.exists():
            print(f"{size:>12,} skipped: {path} is missing (python bench/bench_audit.py --keys {size} makes it)")
            continue
        base = [sys.executable, "-m", "hashaudit", "audit", str(path), "-H", "murmur3_32", "-m", "2^20"]
        base += ["--checks", "buckets", "-q"]
        with tempfile.TemporaryDirectory() as folder:
            reports = {}
            for engine, extra in (("local", []), ("dask", ["--engine", "dask", "--workers", str(args.workers)])):
                report = Path(folder) / f"{engine}.json"
                seconds, peak, _ = run_measured([*base, "--json", str(report), *extra])
                doc = json.loads(report.read_text())
                run = doc.pop("run")
                reports[engine] = json.dumps(doc, sort_keys=True)
                same = "" if engine == "local" else ("yes" if reports["dask"] == reports["local"] else "NO")
                row = {"keys": size, "engine": engine, "seconds": round(seconds, 2), "peak_rss_mib": peak >> 20}
                row.update(
                    {
                        "partitions": run.get("partitions"),
                        "reads": run.get("passes"),
                        "same_json_as_local": same or None,
                    }
                )
                results["runs"].append(row)
                print(f"{size:>12,} {engine:<8} {seconds:8.1f} {peak / 2**20:12,.0f} MiB  {same}")
    results["load_after"] = os.getloadavg()
    (DATA / "dask_results.json").write_text(json.dumps(results, indent=2) + "\n")
    print(f"load average before {results['load_before'][0]:.2f}, after {results['load_after'][0]:.2f}")


if __name__ == "__main__":
    main()
