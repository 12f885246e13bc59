"""The Dask engine against a cluster started the way one is deployed: a ``dask scheduler`` process and two
``dask worker`` processes started on their own (in another working directory), reached with ``--scheduler``."""

from __future__ import annotations

import json
import os
import shutil
import socket
import subprocess
import sys
import time

import numpy as np
import pytest

pytest.importorskip("distributed")

from cli_runner import run  # noqa: E402


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


@pytest.fixture(scope="module")
def scheduler(tmp_path_factory):
    dask = shutil.which("dask", path=os.path.dirname(sys.executable))
    if dask is None:
        pytest.skip("the dask command is not installed beside this Python")
    address = f"tcp://127.0.0.1:{_free_port()}"
    elsewhere = tmp_path_factory.mktemp("workers")  # workers must not depend on the client's working directory
    quiet = {"stdout": subprocess.DEVNULL, "stderr": subprocess.DEVNULL, "cwd": elsewhere}
    port = address.rsplit(":", 1)[1]
    procs = [subprocess.Popen([dask, "scheduler", "--host", "127.0.0.1", "--port", port, "--no-dashboard"], **quiet)]
    worker = [dask, "worker", address, "--nthreads", "1", "--no-dashboard", "--memory-limit", "1GiB"]
    procs += [subprocess.Popen(worker, **quiet) for _ in range(2)]
    try:
        from distributed import Client

        deadline = time.monotonic() + 60
        while True:
            try:
                with Client(address, timeout=5) as client:
                    client.wait_for_workers(2, timeout=60)
                break
            except OSError:
                if time.monotonic() > deadline:
                    raise
                time.sleep(0.5)
        yield address
    finally:
        for proc in procs:
            proc.terminate()
        for proc in procs:
            try:
                proc.wait(timeout=20)
            except subprocess.TimeoutExpired:
                proc.kill()


def test_a_separately_started_cluster_gives_the_local_engines_report(scheduler, tmp_path, monkeypatch):
    rng = np.random.default_rng(17)
    keys = [b"berth-%d" % x for x in rng.integers(0, 30_000, size=50_000)]
    keys[::25] = [
        b"berth-12"
    ] * 2000  # a hot key: the heavy keys are settled (by a second read locally, in stage 2 on the workers)
    (tmp_path / "keys.txt").write_bytes(b"\n".join(keys) + b"\n")
    monkeypatch.chdir(tmp_path)  # a relative path: the workers, elsewhere, must still find the file
    args = ["audit", "keys.txt", "-H", "murmur3_32", "-H", "xxh3_64", "-m", "4096", "--shards", "8", "-q"]
    args += ["--checks", "buckets,collisions,shards"]
    code_local, _, err_local = run([*args, "--json", "local.json"])
    code_dask, _, err_dask = run([*args, "--json", "dask.json", "--engine", "dask", "--scheduler", scheduler])
    assert code_local == code_dask and code_local in (0, 1), (err_local, err_dask)
    local, dist = (json.loads((tmp_path / name).read_text()) for name in ("local.json", "dask.json"))
    assert dist["run"]["engine"] == "dask" and dist["run"]["passes"] == 1 and local["run"]["passes"] == 2
    local.pop("run"), dist.pop("run")
    assert dist == local
