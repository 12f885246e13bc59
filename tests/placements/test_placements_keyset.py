"""The shared key set holds what the placement tests claim it does."""

from __future__ import annotations

import re

from placement_keyset import COUNTS, LONG_MAX, LONG_MIN, N_KEYS

_TWO_BYTE = re.compile("[\u0080-\u07ff]")
_THREE_BYTE = re.compile("[\u0800-\uffff]")
_FOUR_BYTE = re.compile("[\U00010000-\U0010ffff]")


def _decoded(key: bytes) -> str | None:
    try:
        return key.decode("utf-8")
    except UnicodeDecodeError:
        return None


def test_key_set_covers_every_kind(placement_keys: list[bytes]) -> None:
    keys = placement_keys
    assert len(keys) == N_KEYS
    assert keys.count(b"") >= COUNTS["empty"]
    assert sum(LONG_MIN <= len(k) <= LONG_MAX for k in keys) == COUNTS["long"]
    assert max(len(k) for k in keys) <= LONG_MAX
    # the content checks look at every fourth key (25,000): the kinds are shuffled together
    sample = keys[::4]
    texts = [t for t in map(_decoded, sample) if t is not None]
    assert len(sample) - len(texts) > 2_500  # ill-formed UTF-8
    for characters in (_TWO_BYTE, _THREE_BYTE, _FOUR_BYTE):
        assert sum(characters.search(t) is not None for t in texts) > 2_500, characters.pattern
    for fragment in (b"{}", b"{{", b"}}", b"}{"):
        assert sum(fragment in k for k in sample) > 250, fragment
    assert sum(k.startswith(b"{") for k in sample) > 250 and sum(k.endswith(b"}") for k in sample) > 250
    assert sum(b"{" in k and b"}" not in k[k.index(b"{") :] for k in sample) > 250  # unclosed
