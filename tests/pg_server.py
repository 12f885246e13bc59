"""A throwaway PostgreSQL server for the database tests (skips the test when its binaries are not installed)."""

from __future__ import annotations

import glob
import os
import shutil
import socket
import subprocess
import tempfile
from collections.abc import Iterator
from contextlib import contextmanager

import pytest


def _pg_bin() -> str | None:
    found = sorted(glob.glob("/usr/lib/postgresql/*/bin"))
    if found and os.path.exists(os.path.join(found[-1], "initdb")):
        return found[-1]
    initdb = shutil.which("initdb")
    return os.path.dirname(initdb) if initdb else None


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


@contextmanager
def throwaway_postgres() -> Iterator[str]:
    """Start a PostgreSQL cluster in a temporary folder and yield its URL (as the postgres user when running as
    root: initdb refuses root); stop it and remove the folder afterwards."""
    pgbin = _pg_bin()
    if pgbin is None:
        pytest.skip("PostgreSQL server binaries are not installed (.ci/run installs them)")
    root = os.geteuid() == 0
    if root and shutil.which("runuser") is None:
        pytest.skip("running as root without runuser: cannot start PostgreSQL as another user")
    as_pg = ["runuser", "-u", "postgres", "--"] if root else []
    base = tempfile.mkdtemp(prefix="hashaudit-pg-")
    os.chmod(base, 0o755)
    data = os.path.join(base, "data")
    os.makedirs(data)
    if root:
        shutil.chown(data, "postgres", "postgres")
    os.chmod(data, 0o700)
    port = _free_port()
    run = lambda *cmd: subprocess.run([*as_pg, *cmd], check=True, capture_output=True)  # noqa: E731
    try:
        run(f"{pgbin}/initdb", "-D", data, "-U", "postgres", "--auth=trust", "-E", "UTF8", "--no-locale")
        run(f"{pgbin}/pg_ctl", "-D", data, "-l", f"{data}/server.log", "-w", "-t", "60", "-o",
            f"-c listen_addresses=127.0.0.1 -p {port} -k {data} -c fsync=off", "start")  # fmt: skip
        yield f"postgresql://postgres@127.0.0.1:{port}/postgres"
    finally:
        subprocess.run([*as_pg, f"{pgbin}/pg_ctl", "-D", data, "-m", "fast", "-w", "stop"], capture_output=True)
        shutil.rmtree(base, ignore_errors=True)
