"""The numba compile cache goes to a writable folder when the package folder is not writable."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import hashaudit._numba_setup as setup


def test_user_cache_folder_when_package_folder_is_read_only(monkeypatch, tmp_path):
    package_cache = Path(setup.__file__).parent / "hashes" / "__pycache__"
    real_writable = setup._writable
    monkeypatch.setattr(setup, "_writable", lambda p: p != package_cache and real_writable(p))
    monkeypatch.delenv("NUMBA_CACHE_DIR", raising=False)
    monkeypatch.delenv("HASHAUDIT_CACHE_DIR", raising=False)
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path))
    chosen = setup.configure_numba_cache()
    assert chosen == str(tmp_path / "hashaudit" / "numba")
    assert os.environ["NUMBA_CACHE_DIR"] == chosen


def test_kernels_compile_into_the_chosen_folder(tmp_path):
    env = {k: v for k, v in os.environ.items() if k != "NUMBA_CACHE_DIR"}
    env["HASHAUDIT_CACHE_DIR"] = str(tmp_path)
    code = "from hashaudit import KeyBatch, get_hash;print(get_hash('fnv1a_32').hash_key(b'a'))"
    out = subprocess.run([sys.executable, "-c", code], env=env, capture_output=True, text=True, check=True)
    assert out.stdout.strip() == str(0xE40C292C)  # FNV-1a 32 of "a" (draft-eastlake-fnv test vector)
    cached = list((tmp_path / "numba").rglob("*.nbi"))
    assert cached, "numba wrote no index file into the chosen cache folder"
