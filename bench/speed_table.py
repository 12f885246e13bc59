"""Benchmark: the speed goals table — eleven timings of the installed ``hashaudit`` command against their goals.

Every timing runs the console command of this environment (``hashaudit``, next to the running Python) in a subprocess,
as a user runs it, with ``-q`` and its output sent to /dev/null. Each row is the median of three runs (min and max
shown too); commands measured together are interleaved run by run, so that a busy spell of the shared machine slows
all of them alike. Every command but the first row's runs once unmeasured first (page cache, numba cache). The
package's bytecode is written first, as ``pip install`` writes it (``write_bytecode``).

| row | what | goal |
|---|---|---|
| 1 | first audit after install: default audit of ``sample_keys/orders.txt``, numba cache empty | ≤ 6 s |
| 2 | the same audit, kernels cached | ≤ 1.5 s |
| 3 | start-up: a 3-key file, ``--checks buckets``, one hash | ≤ 0.6 s |
| 4 | N distinct 16-byte keys, ``-H murmur3_32 -s mask -m 2^16``, default checks | ≤ 2.5 s |
| 5 | the same with ``--checks buckets`` | ≤ 1.5 s |
| 6 | the same with ``--all-keys --checks buckets`` | ≤ 1.0 s |
| 7 | marginal cost of N more keys (2N-key file minus N-key file), ``--all-keys --checks buckets`` | ≤ 2× the C loop's |
| 8 | marginal cost of N more keys, ``--checks chi_square`` | ≤ 3× the C loop's |
| 9 | 3 hashes × 3 table sizes, default checks, N keys | ≤ 5 s |
| 10 | the first audit of a second install of the same version, after the first install's | ≤ 6 s |
| 11 | row 1 without the warm-up helper (``HASHAUDIT_WARM_UP=0``) | ≤ 6 s |

N is 10 M (1 M with ``--quick``, a smoke run whose figures are not the goals' figures). Rows 1 and 11 give each run
an empty numba cache of its own: ``HASHAUDIT_CACHE_DIR`` (see ``hashaudit/_numba_setup.py``) points at a fresh
folder and ``NUMBA_CACHE_DIR`` is unset; they are measured together, interleaved run by run. The other rows use the cache a user has (the environment as it is).

References, measured in the same run where the ratio is meaningful (rows 4-8; row 3 against the Python script only,
as start-up against start-up):

- the plain C loop ``bench/c_baseline.c``, built and checked against ``mmh3`` by ``bench/bench_c.py``'s helpers
  (``$CC`` or ``cc``; without a compiler its columns stay empty): read the file, MurmurHash3 x86_32 per line, count
  ``hash & (M - 1)``, chi-square;
- the per-key Python script ``bench/baseline_python.py`` (its ``--bytes`` mode, the fastest plain-Python variant),
  run as its own process with its table size set to the row's (2^20 in row 3).

Ratios are hashaudit's seconds over the reference's (below 1: hashaudit is faster). Rows 7 and 8 pair the runs of
the two files run by run and report the differences; their goal is the ratio to the C loop's marginal cost.

The key files are deterministic (fixed seed): line i is 16 hex digits of a bijective 64-bit mix of ``i`` plus an
offset drawn from the seed, so every key is distinct, and the N-key file is the first half of the 2N-key file. They
are written into ``--workdir`` (default: a temporary folder, removed at the end) and reused when already there.

Usage: ``python bench/speed_table.py [--quick] [--rows 1,3-5] [--workdir DIR] [--markdown]``. Progress goes to
standard error, the table to standard output; ``--markdown`` prints it in Markdown with the date and the machine.
"""

from __future__ import annotations

import argparse
import os
import platform
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from datetime import UTC, datetime
from pathlib import Path

import numpy as np
from _timing import write_bytecode

HERE = Path(__file__).parent
ORDERS = HERE.parent / "sample_keys" / "orders.txt"
RUNS = 3
SEED = 17
CHUNK_KEYS = 1_000_000
MASK_BUCKETS = 1 << 16
BASELINE_BUCKETS = 1 << 20  # bench/baseline_python.py's own table size
HASHES_3 = ["-H", "murmur3_32", "-H", "xxh3_64", "-H", "crc32"]
TABLES_3 = ["-m", "2^20", "-m", "2^22", "-m", "1000003"]
ONE_HASH_MASK = ["-H", "murmur3_32", "-s", "mask", "-m", "2^16"]

# Runs bench/baseline_python.py's main() as its own process with the table size set: argv is FOLDER FILE BUCKETS.
PYTHON_BASELINE = """
import sys
folder, path, buckets = sys.argv[1:4]
sys.path.insert(0, folder)
import baseline_python
baseline_python.BUCKETS = int(buckets)
sys.argv = ["baseline_python.py", path, "--bytes"]
baseline_python.main()
"""


@dataclass(frozen=True)
class Command:
    """One command to time; ``env_for_run`` gives the environment of measured run i (None: inherited)."""

    argv: list[str]
    ok_codes: tuple[int, ...] = (0,)
    warm_up: bool = True
    env_for_run: Callable[[int], dict[str, str]] | None = None


@dataclass(frozen=True)
class RowResult:
    """A row of the table: hashaudit's seconds per run, its goal, and the references' seconds per run."""

    number: int
    what: str
    seconds: list[float]
    goal: str
    goal_limit: float
    goal_on_c_ratio: bool = False
    c_seconds: list[float] | None = None
    python_seconds: list[float] | None = None

    @property
    def median_seconds(self) -> float:
        return statistics.median(self.seconds)

    def ratio_to(self, reference: list[float] | None) -> float | None:
        if not reference or statistics.median(reference) <= 0:
            return None
        return self.median_seconds / statistics.median(reference)

    @property
    def met(self) -> bool | None:
        if self.goal_on_c_ratio:
            ratio = self.ratio_to(self.c_seconds)
            return None if ratio is None else ratio <= self.goal_limit
        return self.median_seconds <= self.goal_limit


@dataclass
class Bench:
    """Key files, commands and the timings measured so far (a command measured for one row serves the others)."""

    workdir: Path
    keys: int
    hashaudit: str
    c_binary: Path | None
    timings: dict[str, list[float]] = field(default_factory=dict)

    def key_file(self, count: int) -> Path:
        return self.workdir / f"keys_{count}_seed{SEED}.txt"

    def measure(self, commands: dict[str, Command]) -> dict[str, list[float]]:
        """Seconds of RUNS runs of each command not measured yet, interleaved run by run, after one warm-up each."""
        pending = {name: cmd for name, cmd in commands.items() if name not in self.timings}
        for name, cmd in pending.items():
            if cmd.warm_up:
                log(f"  warm-up: {name}")
                run_once(cmd, None)
            self.timings[name] = []
        for index in range(RUNS):
            for name, cmd in pending.items():
                seconds = run_once(cmd, index)
                self.timings[name].append(seconds)
                log(f"  run {index + 1}/{RUNS}: {name} {seconds:.3f} s")
        return {name: self.timings[name] for name in commands}

    def audit(self, path: Path, *options: str) -> Command:
        return Command([self.hashaudit, "audit", str(path), *options, "-q"], ok_codes=(0, 1))

    def c_loop(self, path: Path) -> Command | None:
        return None if self.c_binary is None else Command([str(self.c_binary), str(path), str(MASK_BUCKETS)])

    def python_script(self, path: Path, buckets: int) -> Command:
        # no warm-up: the file is in the page cache by then, and the script has no cache of its own
        argv = [sys.executable, "-c", PYTHON_BASELINE, str(HERE), str(path), str(buckets)]
        return Command(argv, warm_up=False)


def log(message: str) -> None:
    print(message, file=sys.stderr, flush=True)


def run_once(cmd: Command, index: int | None) -> float:
    """Wall seconds of one run of ``cmd`` (standard output to /dev/null); a failing run stops the benchmark."""
    env = None if cmd.env_for_run is None or index is None else cmd.env_for_run(index)
    t0 = time.perf_counter()
    proc = subprocess.run(cmd.argv, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, env=env, check=False)
    seconds = time.perf_counter() - t0
    if proc.returncode not in cmd.ok_codes:
        raise SystemExit(f"{' '.join(cmd.argv[:6])} ... exited with {proc.returncode}:\n{proc.stderr.decode()[-2000:]}")
    return seconds


def mix64(values: np.ndarray) -> np.ndarray:
    """A bijection of uint64 (the splitmix64 finaliser): distinct inputs give distinct, random-looking outputs."""
    with np.errstate(over="ignore"):
        values = (values ^ (values >> np.uint64(30))) * np.uint64(0xBF58476D1CE4E5B9)
        values = (values ^ (values >> np.uint64(27))) * np.uint64(0x94D049BB133111EB)
        return values ^ (values >> np.uint64(31))


def key_lines(start: int, count: int, offset: int) -> bytes:
    """Lines start .. start+count-1: 16 lowercase hex digits of mix64(i + offset) and a newline (17 bytes each)."""
    ids = np.arange(start, start + count, dtype=np.uint64) + np.uint64(offset)
    octets = mix64(ids).astype(">u8").view(np.uint8).reshape(count, 8)
    digits = np.frombuffer(b"0123456789abcdef", dtype=np.uint8)
    lines = np.empty((count, 17), dtype=np.uint8)
    lines[:, 0:16:2] = digits[octets >> 4]
    lines[:, 1:16:2] = digits[octets & 15]
    lines[:, 16] = ord("\n")
    return lines.tobytes()


def write_key_files(small: Path, large: Path, keys: int) -> None:
    """The 2N-key file and its first half, the N-key file, unless both are there with the right sizes."""
    if small.exists() and large.exists() and small.stat().st_size == 17 * keys and large.stat().st_size == 34 * keys:
        return
    log(f"writing {small} and {large} ...")
    offset = int(np.random.default_rng(SEED).integers(0, 1 << 62))
    with open(small, "wb") as small_file, open(large, "wb") as large_file:
        for start in range(0, 2 * keys, CHUNK_KEYS):
            chunk = key_lines(start, min(CHUNK_KEYS, 2 * keys - start), offset)
            large_file.write(chunk)
            if start < keys:
                small_file.write(chunk[: 17 * (keys - start)])


def cold_cache_env(workdir: Path, **extra: str) -> Callable[[int], dict[str, str]]:
    """Environment of cold run i: an empty numba cache folder of its own (removed and made anew), and ``extra``."""

    def env_for_run(index: int) -> dict[str, str]:
        folder = workdir / f"empty_cache_{index}"
        shutil.rmtree(folder, ignore_errors=True)
        folder.mkdir()
        env = {k: v for k, v in os.environ.items() if k != "NUMBA_CACHE_DIR"}
        env["HASHAUDIT_CACHE_DIR"] = str(folder)
        return {**env, **extra}

    return env_for_run


def build_c_loop(workdir: Path) -> Path | None:
    """bench/c_baseline built and checked against mmh3 by bench_c.py's helpers; None without a C compiler."""
    import bench_c

    if bench_c.build() is None:
        log("no C compiler ($CC or cc): the C loop columns stay empty")
        return None
    checked = bench_c.check_c_program(workdir)
    log(f"c_baseline built; agrees with mmh3 on {checked:,} generated keys")
    return bench_c.BINARY


def keys_label(keys: int) -> str:
    return f"{keys // 1_000_000} M" if keys % 1_000_000 == 0 else f"{keys:,}"


def first_audits(bench: Bench) -> dict[str, list[float]]:
    """Rows 1 and 11, measured together (interleaved run by run): the first audit with an empty kernel cache, with
    the warm-up helper (the default) and without it (``HASHAUDIT_WARM_UP=0``)."""
    cmd = bench.audit(ORDERS)
    with_helper = Command(cmd.argv, cmd.ok_codes, warm_up=False, env_for_run=cold_cache_env(bench.workdir))
    without = cold_cache_env(bench.workdir, HASHAUDIT_WARM_UP="0")
    seconds = bench.measure(
        {
            "orders default, empty cache": with_helper,
            "orders default, empty cache, no helper": Command(
                cmd.argv, cmd.ok_codes, warm_up=False, env_for_run=without
            ),
        }
    )
    for index in range(RUNS):
        shutil.rmtree(bench.workdir / f"empty_cache_{index}", ignore_errors=True)
    return seconds


def row_1(bench: Bench) -> RowResult:
    seconds = first_audits(bench)["orders default, empty cache"]
    return RowResult(
        1, "first audit after install (empty kernel cache): default audit of orders.txt", seconds, "≤ 6 s", 6
    )


def row_11(bench: Bench) -> RowResult:
    seconds = first_audits(bench)["orders default, empty cache, no helper"]
    what = "row 1 without the warm-up helper (`HASHAUDIT_WARM_UP=0`: one process compiles every kernel)"
    return RowResult(11, what, seconds, "≤ 6 s", 6)


def row_10(bench: Bench) -> RowResult:
    """The first audit of a second install of the same source on this machine: the kernels the first install
    compiled into the per-user cache are loaded, not compiled (the package is copied to another folder and run
    from there; its own cache folder is warmed by one audit of the installed package)."""
    second = bench.workdir / "second_install"
    shutil.rmtree(second, ignore_errors=True)
    import hashaudit

    shutil.copytree(Path(hashaudit.__file__).parent, second / "hashaudit", ignore=shutil.ignore_patterns("__pycache__"))
    cache = bench.workdir / "shared_cache"
    shutil.rmtree(cache, ignore_errors=True)
    env = {k: v for k, v in os.environ.items() if k not in ("NUMBA_CACHE_DIR", "PYTHONPATH")}
    env["HASHAUDIT_CACHE_DIR"] = str(cache)
    first = Command(bench.audit(ORDERS).argv, (0, 1), warm_up=False, env_for_run=lambda index: env)
    run_once(first, 0)  # the first install's first audit fills the cache
    copied = dict(env, PYTHONPATH=str(second))
    argv = [sys.executable, "-P", "-m", "hashaudit", "audit", str(ORDERS), "-q"]  # -P: not the current folder
    name = "orders default, second install"
    command = Command(argv, (0, 1), warm_up=False, env_for_run=lambda index: copied)
    seconds = bench.measure({name: command})[name]
    shutil.rmtree(second, ignore_errors=True)
    shutil.rmtree(cache, ignore_errors=True)
    what = "first audit of a second install of the same version (another folder), after the first install's"
    return RowResult(10, what, seconds, "≤ 6 s", 6)


def row_2(bench: Bench) -> RowResult:
    seconds = bench.measure({"orders default": bench.audit(ORDERS)})["orders default"]
    return RowResult(2, "the same audit, kernels cached", seconds, "≤ 1.5 s", 1.5)


def row_3(bench: Bench) -> RowResult:
    path = bench.workdir / "keys_3.txt"
    path.write_bytes(b"order-1\norder-2\norder-3\n")
    got = bench.measure(
        {
            "3 keys buckets": bench.audit(path, "--checks", "buckets", "-H", "murmur3_32"),
            "python 3 keys": bench.python_script(path, BASELINE_BUCKETS),
        }
    )
    what = "start-up: a 3-key file, `--checks buckets`, one hash"
    return RowResult(3, what, got["3 keys buckets"], "≤ 0.6 s", 0.6, python_seconds=got["python 3 keys"])


def references(bench: Bench, path: Path, tag: str) -> tuple[dict[str, Command], str | None, str]:
    """The C loop and the Python script on ``path``, named by ``tag``."""
    commands = {f"python {tag}": bench.python_script(path, MASK_BUCKETS)}
    c_cmd = bench.c_loop(path)
    if c_cmd is not None:
        commands[f"c {tag}"] = c_cmd
    return commands, (f"c {tag}" if c_cmd is not None else None), f"python {tag}"


def one_file_row(number: int, bench: Bench, options: list[str], what: str, goal: str, limit: float) -> RowResult:
    path = bench.key_file(bench.keys)
    refs, c_name, python_name = references(bench, path, "N")
    name = f"N {' '.join(options)}"
    got = bench.measure({name: bench.audit(path, *ONE_HASH_MASK, *options), **refs})
    c_seconds = got[c_name] if c_name else None
    return RowResult(number, what, got[name], goal, limit, c_seconds=c_seconds, python_seconds=got[python_name])


def row_4(bench: Bench) -> RowResult:
    what = f"{keys_label(bench.keys)} distinct 16-byte keys, `-H murmur3_32 -s mask -m 2^16`, default checks"
    return one_file_row(4, bench, [], what, "≤ 2.5 s", 2.5)


def row_5(bench: Bench) -> RowResult:
    return one_file_row(5, bench, ["--checks", "buckets"], "the same with `--checks buckets`", "≤ 1.5 s", 1.5)


def row_6(bench: Bench) -> RowResult:
    what = "the same with `--all-keys --checks buckets` (C loop on the same file)"
    return one_file_row(6, bench, ["--all-keys", "--checks", "buckets"], what, "≤ 1.0 s", 1.0)


def marginal_row(number: int, bench: Bench, options: list[str], what: str, goal: str, limit: float) -> RowResult:
    small, large = bench.key_file(bench.keys), bench.key_file(2 * bench.keys)
    commands: dict[str, Command] = {}
    names: dict[str, str | None] = {}
    # both files measured here, run by run (rows 5-6 measured the N-key file apart); rows 7 and 8 share the references
    for tag, path in (("N", small), ("2N", large)):
        audit_name = f"{tag} {' '.join(options)} (paired)"
        names[f"audit {tag}"] = audit_name
        commands[audit_name] = bench.audit(path, *ONE_HASH_MASK, *options)
        refs, names[f"c {tag}"], names[f"python {tag}"] = references(bench, path, f"{tag} (paired)")
        commands |= refs
    got = bench.measure(commands)

    def differences(kind: str) -> list[float] | None:
        first, second = names[f"{kind} N"], names[f"{kind} 2N"]
        if first is None or second is None:
            return None
        return [b - a for a, b in zip(got[first], got[second], strict=True)]

    seconds = differences("audit")
    assert seconds is not None
    return RowResult(number, what, seconds, goal, limit, True, differences("c"), differences("python"))


def row_7(bench: Bench) -> RowResult:
    what = f"marginal cost of {keys_label(bench.keys)} more keys, `--all-keys --checks buckets`"
    return marginal_row(7, bench, ["--all-keys", "--checks", "buckets"], what, "≤ 2× C loop", 2)


def row_8(bench: Bench) -> RowResult:
    what = f"marginal cost of {keys_label(bench.keys)} more keys, `--checks chi_square`"
    return marginal_row(8, bench, ["--checks", "chi_square"], what, "≤ 3× C loop", 3)


def row_9(bench: Bench) -> RowResult:
    name = "N 3 hashes x 3 tables"
    seconds = bench.measure({name: bench.audit(bench.key_file(bench.keys), *HASHES_3, *TABLES_3)})[name]
    what = f"3 hashes × 3 table sizes (murmur3_32, xxh3_64, crc32; 2^20, 2^22, 1000003), default checks, {keys_label(bench.keys)} keys"
    return RowResult(9, what, seconds, "≤ 5 s", 5)


ROWS: dict[int, Callable[[Bench], RowResult]] = {
    1: row_1,
    2: row_2,
    3: row_3,
    4: row_4,
    5: row_5,
    6: row_6,
    7: row_7,
    8: row_8,
    9: row_9,
    10: row_10,
    11: row_11,
}
NEEDS_KEY_FILES = {4, 5, 6, 7, 8, 9}
NEEDS_C_LOOP = {4, 5, 6, 7, 8}


def parse_rows(text: str) -> list[int]:
    """``1,3-5`` -> [1, 3, 4, 5]; every number must be a row."""
    rows: set[int] = set()
    for part in text.split(","):
        first, _, last = part.strip().partition("-")
        try:
            rows.update(range(int(first), int(last or first) + 1))
        except ValueError:
            raise argparse.ArgumentTypeError(f"--rows: {text!r} is not a list like 1,3-5") from None
    if not rows or not rows <= ROWS.keys():
        raise argparse.ArgumentTypeError(f"--rows: {text!r} names no row or a row outside 1-{max(ROWS)}")
    return sorted(rows)


def cells(result: RowResult) -> list[str]:
    """The printed cells of one row."""

    def seconds(values: list[float] | None) -> str:
        return "—" if not values else f"{statistics.median(values):.3f}"

    def ratio(value: float | None) -> str:
        return "—" if value is None else f"{value:.2f}×"

    met = {True: "yes", False: "**no**", None: "n/a"}[result.met]
    return [
        str(result.number),
        result.what,
        f"{result.median_seconds:.2f}",
        f"{min(result.seconds):.2f}–{max(result.seconds):.2f}",
        result.goal,
        met,
        seconds(result.c_seconds),
        ratio(result.ratio_to(result.c_seconds)),
        seconds(result.python_seconds),
        ratio(result.ratio_to(result.python_seconds)),
    ]


HEADER = ["row", "what", "hashaudit s (median)", "min–max", "goal", "met", "C loop s", "÷ C", "Python s", "÷ Python"]


def machine() -> str:
    """Cores, CPU model and memory, from /proc where there is one."""
    model = platform.processor() or platform.machine()
    memory = ""
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                model = line.split(":", 1)[1].strip()
                break
        for line in Path("/proc/meminfo").read_text().splitlines():
            if line.startswith("MemTotal:"):
                memory = f", {int(line.split()[1]) / 2**20:.0f} GiB"
                break
    except OSError:
        pass
    return f"{os.cpu_count()} cores, {model}{memory}, Python {platform.python_version()}"


def render(results: list[RowResult], markdown: bool, context: dict[str, str]) -> str:
    table = [HEADER, *(cells(r) for r in results)]
    if markdown:
        lines = [
            f"Measured {context['date']} with `python bench/speed_table.py{context['flags']}` on {context['machine']}; "
            f"load average {context['load_before']} before, {context['load_after']} after. Seconds are medians of "
            "three runs; rows 7 and 8 are differences between the two files' runs; ÷ is hashaudit's time over the "
            "reference's.",
            "",
            "| " + " | ".join(HEADER) + " |",
            "|" + "|".join("---:" if i in (0, 2, 6, 7, 8, 9) else "---" for i in range(len(HEADER))) + "|",
        ]
        lines += ["| " + " | ".join(row) + " |" for row in table[1:]]
        return "\n".join(lines)
    table = [[cell.replace("`", "").replace("**", "") for cell in row] for row in table]
    widths = [max(len(row[i]) for row in table) for i in range(len(HEADER))]
    lines = [f"{context['date']}, {context['machine']}, load {context['load_before']} / {context['load_after']}"]
    lines += ["  ".join(cell.ljust(width) for cell, width in zip(row, widths, strict=True)).rstrip() for row in table]
    return "\n".join(lines)


def load_average() -> str:
    return " ".join(f"{x:.2f}" for x in os.getloadavg())


def find_hashaudit() -> str:
    """The console command installed beside this Python, else the one on PATH."""
    beside = Path(sys.executable).parent / "hashaudit"
    found = str(beside) if beside.exists() else shutil.which("hashaudit")
    if not found:
        raise SystemExit("no hashaudit command beside this Python or on PATH: pip install -e . first")
    return found


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="1 M keys instead of 10 M (a smoke run)")
    parser.add_argument("--rows", type=parse_rows, default=sorted(ROWS), help="rows to measure, e.g. 3 or 1,4-6")
    parser.add_argument("--workdir", type=Path, help="folder of the key files, reused (default: a temporary folder)")
    parser.add_argument("--markdown", action="store_true", help="print the table in Markdown with date and machine")
    args = parser.parse_args()
    keys = 1_000_000 if args.quick else 10_000_000
    temporary = None
    if args.workdir is None:
        temporary = tempfile.TemporaryDirectory(prefix="speed_table_")
        workdir = Path(temporary.name)
    else:
        workdir = args.workdir
        workdir.mkdir(parents=True, exist_ok=True)
    try:
        c_binary = build_c_loop(workdir) if NEEDS_C_LOOP & set(args.rows) else None
        bench = Bench(workdir, keys, find_hashaudit(), c_binary)
        write_bytecode()
        if NEEDS_KEY_FILES & set(args.rows):
            write_key_files(bench.key_file(keys), bench.key_file(2 * keys), keys)
        context = {
            "date": datetime.now(UTC).strftime("%Y-%m-%d"),
            "machine": machine(),
            "load_before": load_average(),
            "flags": (" --quick" if args.quick else "")
            + ("" if args.rows == sorted(ROWS) else f" --rows {','.join(map(str, args.rows))}"),
        }
        results = []
        for number in args.rows:
            log(f"row {number}")
            results.append(ROWS[number](bench))
        context["load_after"] = load_average()
        print(render(results, args.markdown, context))
    finally:
        if temporary is not None:
            temporary.cleanup()


if __name__ == "__main__":
    main()
