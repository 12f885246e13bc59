"""The compiled kernels go to one folder per machine user, shared by every install of the same source."""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
from pathlib import Path

import hashaudit._numba_setup as setup

# the FNV-1a 32 kernel's value for "a" (draft-eastlake-fnv test vector) and how its dispatcher met the cache
PROBE = (
    "import hashaudit\n"
    "from hashaudit import get_hash\n"
    "from hashaudit.hashes import fnv\n"
    "value = get_hash('fnv1a_32').hash_key(b'a')\n"
    "stats = fnv._fnv32_kernel.stats\n"
    "print(hashaudit.__file__, value, sum(stats.cache_hits.values()), sum(stats.cache_misses.values()))\n"
)


def _probe(cache: Path, cwd: Path, pythonpath: Path | None = None) -> tuple[str, int, int, int]:
    env = {k: v for k, v in os.environ.items() if k not in ("NUMBA_CACHE_DIR", "PYTHONPATH")}
    env["HASHAUDIT_CACHE_DIR"] = str(cache)
    if pythonpath is not None:
        env["PYTHONPATH"] = str(pythonpath)
    out = subprocess.run(
        [sys.executable, "-c", PROBE], env=env, cwd=cwd, capture_output=True, text=True, check=True
    ).stdout.split()
    return out[0], int(out[1]), int(out[2]), int(out[3])


def test_cache_folder_follows_the_environment(monkeypatch, tmp_path):
    monkeypatch.setenv("HASHAUDIT_CACHE_DIR", str(tmp_path / "mine"))
    assert setup.cache_base() == tmp_path / "mine" / "numba"
    monkeypatch.delenv("HASHAUDIT_CACHE_DIR")
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "xdg"))
    assert setup.cache_base() == tmp_path / "xdg" / "hashaudit" / "numba"


def test_unwritable_cache_folder_falls_back_to_a_temporary_one(monkeypatch, tmp_path):
    blocked = tmp_path / "blocked"
    blocked.write_text("a file where the folder should be")
    monkeypatch.setenv("HASHAUDIT_CACHE_DIR", str(blocked))
    chosen = setup.cache_base()
    assert chosen is not None and chosen.parent.name == f"hashaudit-{os.getuid()}" and chosen.name == "numba"


def test_user_numba_cache_dir_wins(monkeypatch, tmp_path):
    monkeypatch.setenv("NUMBA_CACHE_DIR", str(tmp_path))
    assert setup.configure_numba_cache() == str(tmp_path)


def test_kernels_compile_into_the_chosen_folder_by_their_place_in_the_package(tmp_path):
    where, value, hits, misses = _probe(tmp_path, Path.cwd())
    assert value == 0xE40C292C
    assert (hits, misses) == (0, 1)  # an empty folder: compiled
    versions = f"py{sys.version_info[0]}.{sys.version_info[1]}-numba"
    folders = [p for p in (tmp_path / "numba").iterdir() if p.name.startswith(versions)]
    assert len(folders) == 1
    assert list((folders[0] / "hashaudit" / "hashes").glob("fnv._fnv32_kernel-*.nbi"))
    assert _probe(tmp_path, Path.cwd())[2:] == (1, 0)  # the next process loads it


def test_another_install_of_the_same_source_loads_the_kernels(tmp_path):
    cache = tmp_path / "cache"
    assert _probe(cache, Path.cwd())[2:] == (0, 1)
    # the package copied elsewhere (a new virtualenv, a reinstall, a second checkout): no compiling
    copy = tmp_path / "elsewhere"
    shutil.copytree(Path(setup.__file__).parent, copy / "hashaudit", ignore=shutil.ignore_patterns("__pycache__"))
    where, value, hits, misses = _probe(cache, tmp_path, pythonpath=copy)
    assert Path(where).resolve().is_relative_to(copy.resolve())
    assert (value, hits, misses) == (0xE40C292C, 1, 0)
    # a changed module is not taken for the cached one: numba stamps kernels with a hash of their source
    fnv = copy / "hashaudit" / "hashes" / "fnv.py"
    fnv.write_text(fnv.read_text() + "\n# changed\n")
    assert _probe(cache, tmp_path, pythonpath=copy)[2:] == (0, 1)
