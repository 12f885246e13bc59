"""Fixtures of the placement tests: the shared key set of :mod:`placement_keyset`, as bytes and as a batch."""

from __future__ import annotations

import numpy as np
import pytest
from placement_keyset import make_keys

from hashaudit.keys.batch import KeyBatch


@pytest.fixture(scope="session")
def placement_keys() -> list[bytes]:
    """100,000 generated keys (see :mod:`placement_keyset`)."""
    return make_keys()


@pytest.fixture(scope="session")
def placement_batch(placement_keys: list[bytes]) -> KeyBatch:
    """The shared keys inside a larger buffer: junk bytes before and after, so offsets do not start at 0."""
    inner = KeyBatch.from_keys(placement_keys)
    # "{" before and a UTF-8 lead byte after: a kernel reading outside its key changes its result
    data = np.concatenate([np.full(13, 0x7B, np.uint8), inner.data, np.full(5, 0xE2, np.uint8)])
    return KeyBatch(data, inner.offsets + 13)
