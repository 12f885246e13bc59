"""The numba kernels never index outside their arrays (numba does not check bounds unless asked)."""

from __future__ import annotations

import os
import subprocess
import sys
import textwrap
from pathlib import Path

REPO = Path(__file__).resolve().parents[2]

SCRIPT = textwrap.dedent(
    """
    import io
    import numpy as np
    from hashaudit.keys import KeyBatch
    from hashaudit.keys.encode import decode_hex, lowercase_keys, parse_int, strip_keys
    from hashaudit.keys.lines import read_lines

    rng = np.random.default_rng(3)
    alphabet = [b"a", b"B", b"\\n", b"\\r", b" ", b"\\t", b"0", b"7", b"-"]
    for trial in range(300):
        blob = b"".join(alphabet[i] for i in rng.integers(0, len(alphabet), size=int(rng.integers(0, 40))))
        for keep_cr in (False, True):
            block = int(rng.integers(1, 50))
            batches = list(read_lines(io.BytesIO(blob), "t", keep_cr=keep_cr, block_bytes=block))
            keys = [k for b in batches for k in b.keys.to_list()]
            parts = blob.split(b"\\n")
            expected = [p if keep_cr or not p.endswith(b"\\r") else p[:-1] for p in parts[:-1]]
            expected += [parts[-1]] if parts[-1] else []
            assert keys == expected, (blob, keys, expected)
        batch = KeyBatch.from_keys(blob.split(b"\\n"))
        assert strip_keys(batch).to_list() == [k.strip(b" \\t\\n\\r\\x0b\\x0c") for k in blob.split(b"\\n")]
        assert lowercase_keys(batch).to_list() == [k.lower() for k in blob.split(b"\\n")]
    numbers = [b"0", b"-1", b"18446744073709551615", b" +42 ", b"-9223372036854775808"]
    parse_int(KeyBatch.from_keys(numbers))
    for bad in ([b""], [b"1", b"x"], [b"18446744073709551616"]):
        try:
            parse_int(KeyBatch.from_keys(bad))
        except Exception as exc:
            assert type(exc).__name__ == "KeyValueError", exc
    assert decode_hex(KeyBatch.from_keys([b"", b"00ff", b"Ab"])).to_list() == [b"", b"\\x00\\xff", b"\\xab"]
    print("ok")
    """
)


def test_kernels_within_bounds(tmp_path):
    path = os.pathsep.join(filter(None, [str(REPO), os.environ.get("PYTHONPATH")]))
    env = dict(os.environ, NUMBA_BOUNDSCHECK="1", NUMBA_CACHE_DIR=str(tmp_path / "numba-cache"), PYTHONPATH=path)
    result = subprocess.run([sys.executable, "-c", SCRIPT], env=env, capture_output=True, text=True, timeout=600)
    assert result.returncode == 0, result.stderr[-3000:]
    assert result.stdout.strip() == "ok"
