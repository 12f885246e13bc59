"""Benchmark: would an ahead-of-time build of the kernels pay? The numbers behind the decision in docs/speed.md.

An audit's fixed cost on a machine whose numba cache is warm is mostly numba itself: importing it, its first use
in a process (which loads its typing and lowering registries, and scipy.linalg for a BLAS probe) and loading each
cached kernel. numba's ahead-of-time compiler (``numba.pycc``) builds a plain extension module that needs neither
numba nor a cache. This script measures both sides on the kernels an audit really uses:

1. runs an audit in this process (default: the default audit of ``sample_keys/orders.txt``) and collects every
   compiled hashaudit kernel with the signatures it was compiled for;
2. in fresh child processes, times importing numba and loading those kernels from the warm cache (what every
   audit pays on top of its work; importing the kernels' modules is not counted), and importing the
   ahead-of-time module built in step 3;
3. builds one extension module exporting every (kernel, signature) pair with ``numba.pycc`` and times the build
   (what an install would pay once), checking on random inputs that one exported hash kernel gives the JIT
   kernel's values, and whether two threads calling it at once run together (the JIT kernels are ``nogil``; the
   audit hashes, fills tables and concludes on threads).

Usage: ``python bench/bench_aot.py [-- AUDIT ARGS ...]``; ``--json FILE`` writes the figures.
"""

from __future__ import annotations

import argparse
import gc
import importlib
import json
import os
import pickle
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
DEFAULT_AUDIT = ["audit", str(ROOT / "sample_keys" / "orders.txt"), "-q"]

LOAD_CHILD = r"""
import importlib, json, pickle, sys, time
t0 = time.perf_counter()
import numba
t1 = time.perf_counter()
with open(sys.argv[1], "rb") as f:
    kernels = pickle.load(f)
modules = {name: importlib.import_module(name.rpartition(".")[0]) for name in kernels}
t_modules = time.perf_counter()
loaded = 0
for name, signatures in kernels.items():
    dispatcher = getattr(modules[name], name.rpartition(".")[2])
    for signature in signatures:
        dispatcher.compile(signature)
        loaded += 1
t2 = time.perf_counter() - (t_modules - t1)
print(json.dumps({"import_numba": t1 - t0, "load_kernels": t2 - t1, "loaded": loaded}))
"""

AOT_CHILD = r"""
import json, sys, time
sys.path.insert(0, sys.argv[1])
t0 = time.perf_counter()
import numpy
t1 = time.perf_counter()
import hashaudit_aot_probe
t2 = time.perf_counter()
print(json.dumps({"import_numpy": t1 - t0, "import_aot": t2 - t1, "numba_loaded": "numba" in sys.modules}))
"""


def audited_kernels(argv: list[str]) -> dict[str, list]:
    """Run ``hashaudit`` with ``argv`` here and return {module.kernel: [full signature, ...]} of every kernel it
    compiled or loaded."""
    from numba.core.registry import CPUDispatcher

    from hashaudit.cli import main

    stdout = sys.stdout
    try:
        sys.stdout = open(os.devnull, "w")  # noqa: SIM115 - restored below
        main(argv)
    except SystemExit:
        pass
    finally:
        sys.stdout.close()
        sys.stdout = stdout
    found: dict[str, list] = {}
    for obj in gc.get_objects():
        if isinstance(obj, CPUDispatcher) and obj.py_func.__module__.startswith("hashaudit") and obj.overloads:
            name = f"{obj.py_func.__module__}.{obj.py_func.__qualname__}"
            if "<locals>" not in name:
                found[name] = [obj.overloads[s].signature for s in obj.signatures]
    return found


def child_json(code: str, *args: str) -> dict:
    out = subprocess.run([sys.executable, "-c", code, *args], check=True, capture_output=True, text=True)
    return json.loads(out.stdout.strip().splitlines()[-1])


def build(kernels: dict[str, list], folder: str) -> tuple[float, float, int, list[str]]:
    """Build the extension module; returns (wall seconds, CPU seconds, bytes, exported names)."""
    from numba.pycc import CC

    cc = CC("hashaudit_aot_probe")
    cc.output_dir = folder
    cc.verbose = False
    names = []
    for name, signatures in kernels.items():
        module, _, attr = name.rpartition(".")
        dispatcher = getattr(importlib.import_module(module), attr)
        for i, signature in enumerate(signatures):
            export = f"{module.rpartition('.')[2]}__{attr.lstrip('_')}__{i}"
            cc.export(export, signature)(dispatcher.py_func)
            names.append(export)
    wall, cpu = time.perf_counter(), time.process_time()
    cc.compile()
    wall, cpu = time.perf_counter() - wall, time.process_time() - cpu
    built = next(Path(folder).glob("hashaudit_aot_probe*.so"))
    return wall, cpu, built.stat().st_size, names


def same_values(folder: str) -> bool:
    """The exported MurmurHash3 x86_32 kernel gives the JIT kernel's values on random keys."""
    import numpy as np

    from hashaudit.hashes import murmur

    sys.path.insert(0, folder)
    module = importlib.import_module("hashaudit_aot_probe")
    exported = [n for n in dir(module) if n.startswith("murmur__murmur3_32_kernel__")]
    if not exported:
        return False
    rng = np.random.default_rng(20261203)
    lengths = rng.integers(0, 40, 100_000)
    offsets = np.zeros(len(lengths) + 1, dtype=np.int64)
    np.cumsum(lengths, out=offsets[1:])
    data = rng.integers(0, 256, int(offsets[-1]), dtype=np.uint8)
    jit, aot = np.empty(len(lengths), np.uint64), np.empty(len(lengths), np.uint64)
    murmur._murmur3_32_kernel(data, offsets, jit, np.uint32(7))
    getattr(module, exported[0])(data, offsets, aot, np.uint32(7))
    return bool((jit == aot).all())


def _speedup(kernel, data, offsets, seed) -> float:
    """Two calls of ``kernel`` one after the other over two calls at once on two threads (the best of five): about
    2 when the kernel lets go of the GIL on a free 2-core machine, about 1 when it holds it."""
    import threading

    import numpy as np

    outs = [np.empty(len(offsets) - 1, np.uint64) for _ in range(2)]
    kernel(data, offsets, outs[0], seed)  # loaded or compiled before timing
    serial, together = [], []
    for _ in range(5):
        start = time.perf_counter()
        for out in outs:
            kernel(data, offsets, out, seed)
        serial.append(time.perf_counter() - start)
        threads = [threading.Thread(target=kernel, args=(data, offsets, out, seed)) for out in outs]
        start = time.perf_counter()
        for thread in threads:
            thread.start()
        for thread in threads:
            thread.join()
        together.append(time.perf_counter() - start)
    return min(serial) / min(together)


def two_threads(folder: str) -> tuple[float, float]:
    """The two-thread speed-up (:func:`_speedup`) of MurmurHash3 x86_32 over 8 M keys of 16 bytes: the JIT kernel
    (``nogil=True``), then the exported one (``numba.pycc`` wrappers do not release the GIL)."""
    import numpy as np

    from hashaudit.hashes import murmur

    sys.path.insert(0, folder)
    module = importlib.import_module("hashaudit_aot_probe")
    exported = getattr(module, next(n for n in dir(module) if n.startswith("murmur__murmur3_32_kernel__")))
    keys = 8_000_000
    offsets = np.arange(0, 16 * (keys + 1), 16, dtype=np.int64)
    data = np.random.default_rng(20261203).integers(0, 256, 16 * keys, dtype=np.uint8)
    seed = np.uint32(7)
    return _speedup(murmur._murmur3_32_kernel, data, offsets, seed), _speedup(exported, data, offsets, seed)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--json", help="write the figures to this file")
    parser.add_argument("audit", nargs="*", help="hashaudit arguments (after --); default: the default audit")
    args = parser.parse_args()
    argv = args.audit or DEFAULT_AUDIT
    kernels = audited_kernels(argv)
    pairs = sum(len(v) for v in kernels.values())
    with tempfile.TemporaryDirectory(prefix="hashaudit-aot-") as folder:
        listed = Path(folder) / "kernels.pickle"
        listed.write_bytes(pickle.dumps({name: [s.args for s in sigs] for name, sigs in kernels.items()}))
        loads = [child_json(LOAD_CHILD, str(listed)) for _ in range(3)]
        wall, cpu, size, names = build(kernels, folder)
        agrees = same_values(folder)
        jit_speedup, aot_speedup = two_threads(folder)
        imports = [child_json(AOT_CHILD, folder) for _ in range(3)]
    median = lambda values: sorted(values)[len(values) // 2]  # noqa: E731
    figures = {
        "audit": " ".join(argv),
        "kernels": len(kernels),
        "signatures": pairs,
        "jit_import_numba_s": round(median([x["import_numba"] for x in loads]), 3),
        "jit_load_cached_kernels_s": round(median([x["load_kernels"] for x in loads]), 3),
        "aot_build_wall_s": round(wall, 1),
        "aot_build_cpu_s": round(cpu, 1),
        "aot_module_bytes": size,
        "aot_import_s": round(median([x["import_aot"] for x in imports]), 4),
        "aot_needs_numba": any(x["numba_loaded"] for x in imports),
        "aot_same_values": agrees,
        "jit_two_thread_speedup": round(jit_speedup, 2),
        "aot_two_thread_speedup": round(aot_speedup, 2),
        "load_average": " ".join(f"{x:.2f}" for x in os.getloadavg()),
    }
    for key, value in figures.items():
        print(f"{key:28} {value}")
    if args.json:
        Path(args.json).write_text(json.dumps(figures, indent=1) + "\n")


if __name__ == "__main__":
    main()
