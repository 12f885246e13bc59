"""A file that changes between the passes of one audit is refused instead of giving figures from two states."""

from __future__ import annotations

import pytest

from hashaudit.engine.plan import AuditPlan
from hashaudit.engine.sources import audit
from hashaudit.errors import InputError


def test_a_file_growing_during_a_several_pass_read_is_refused(tmp_path):
    path = tmp_path / "keys.txt"
    path.write_bytes(b"".join(b"parcel-%08d\n" % i for i in range(400_000)))  # 400 k distinct: two passes at 4 MiB
    plan = AuditPlan(hashes=("xxh3_64",), checks=("buckets",), buckets=(1 << 12,), distinct_memory=4 << 20)
    assert audit([path], plan).run["passes"] >= 2  # the same file, unchanged: several passes, no complaint
    appended = []

    def append_once(keys: int) -> None:
        if not appended:
            with open(path, "ab") as f:
                f.write(b"".join(b"late-%d\n" % i for i in range(1000)))
            appended.append(keys)

    with pytest.raises(InputError, match="changed while it was being read"):
        audit([path], plan, progress=append_once)
