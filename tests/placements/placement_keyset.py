"""The key set of the placement tests: 100,000 keys from a fixed seed (shared through ``conftest.py``).

The mix (exact counts, shuffled together) covers what the placement rules are sensitive to: printable and
control ASCII; UTF-8 beyond ASCII with 2-, 3- and 4-byte characters; hash-tag keys with ``{`` and ``}`` in
every position (proper tags, empty ``{}``, nested ``{{...}}``, unclosed ``{``, ``}`` before ``{``); random
bytes and crafted ill-formed UTF-8 (truncated sequences, overlong forms, encoded surrogates, code points
above U+10FFFF, stray continuation bytes, at every range boundary); empty keys; long keys of 1 to 4 KiB.

``random.Random`` draws the keys: its sequence for a given seed is fixed across Python versions, and its
scalar draws are cheap, which keeps building 100,000 keys well under a second.
"""

from __future__ import annotations

import random

N_KEYS = 100_000
SEED = 20260517
LONG_MIN, LONG_MAX = 1024, 4096

# keys per kind out of N_KEYS; "ascii" takes the rest
COUNTS = {"empty": 200, "long": 300, "ascii_control": 5_000, "utf8": 20_000, "tags": 25_000, "random": 8_000}
COUNTS["ill_formed"] = 11_500
COUNTS["ascii"] = N_KEYS - sum(COUNTS.values())

# byte maps applied to random bytes: printable ASCII, any ASCII, and word characters "-" .. "z" (no braces)
_PRINTABLE = bytes(0x20 + b % 95 for b in range(256))
_ANY_ASCII = bytes(b & 0x7F for b in range(256))
_WORD = bytes(0x2D + b % 78 for b in range(256))
_DIGITS = bytes(0x30 + b % 10 for b in range(256))
# the UTF-8 code point ranges by encoded length; the surrogates D800..DFFF are not characters
_CODE_POINT_RANGES = [(0x00, 0x80), (0x80, 0x800), (0x800, 0xD800), (0xE000, 0x10000), (0x10000, 0x110000)]
# lead bytes and following bytes at the edges of the well-formed ranges (Unicode Table 3-7)
_LEADS = [0x80, 0xBF, 0xC0, 0xC1, 0xC2, 0xDF, 0xE0, 0xE1, 0xEC, 0xED, 0xEE, 0xEF, 0xF0, 0xF1, 0xF3, 0xF4, 0xF5, 0xFF]
_FOLLOWERS = [0x00, 0x41, 0x7F, 0x80, 0x8F, 0x90, 0x9F, 0xA0, 0xBF, 0xC0, 0xC2, 0xE0, 0xF0]
_BRACES = [b"{", b"}", b"{}", b"}{", b"{{", b"}}", b"{{}}", b"{}{", b"}{}"]


def _mapped(r: random.Random, length: int, table: bytes) -> bytes:
    return r.randbytes(length).translate(table)


def _utf8(r: random.Random, characters: int) -> bytes:
    ranges = r.choices(_CODE_POINT_RANGES, k=characters)
    return "".join(chr(lo + int(r.random() * (hi - lo))) for lo, hi in ranges).encode("utf-8")


def _word(r: random.Random) -> bytes:
    # letters, digits and separators, sometimes non-ASCII characters; may be empty
    if r.random() < 0.2:
        return _utf8(r, r.randint(1, 3))
    return _mapped(r, r.randint(0, 8), _WORD)


def _tag_key(r: random.Random) -> bytes:
    if r.random() < 0.5:
        # a proper tag at the start, middle or end; prefix, tag and suffix may each be empty
        return _word(r) + b"{" + _word(r) + b"}" + _word(r)
    # braces and words in any order: empty, nested, unclosed and reversed tags
    return b"".join(r.choice(_BRACES) if r.random() < 0.45 else _word(r) for _ in range(r.randint(1, 7)))


def _ill_formed(r: random.Random) -> bytes:
    parts = []
    for _ in range(r.randint(1, 5)):
        roll = r.random()
        if roll < 0.6:  # a lead byte and 0 to 3 following bytes near the range edges
            parts.append(bytes([r.choice(_LEADS), *r.choices(_FOLLOWERS, k=r.randint(0, 3))]))
        elif roll < 0.8:
            parts.append(_utf8(r, 1))
        else:
            parts.append(_mapped(r, r.randint(1, 3), _PRINTABLE))
    return b"".join(parts)


def _long(r: random.Random) -> bytes:
    # the cut at a character boundary may drop up to 3 bytes
    length = r.randint(LONG_MIN + 3, LONG_MAX)
    style = r.randrange(3)
    if style == 0:
        return _mapped(r, length, _PRINTABLE)
    if style == 1:  # characters of every encoded length, cut at a character boundary
        text = _utf8(r, length // 2)
        while len(text) < length:
            text += _utf8(r, 16)
        return text[:length].decode("utf-8", "ignore").encode("utf-8")
    body = _mapped(r, length - 8, _WORD)
    at = r.randint(0, len(body))
    return body[:at] + b"{" + _mapped(r, 6, _DIGITS) + b"}" + body[at:]


def make_keys(seed: int = SEED) -> list[bytes]:
    """The shared key set: exact counts per kind, shuffled together."""
    r = random.Random(seed)
    keys: list[bytes] = [b""] * COUNTS["empty"]
    keys += [_long(r) for _ in range(COUNTS["long"])]
    keys += [_mapped(r, r.randint(1, 48), _PRINTABLE) for _ in range(COUNTS["ascii"])]
    keys += [_mapped(r, r.randint(1, 32), _ANY_ASCII) for _ in range(COUNTS["ascii_control"])]
    keys += [_utf8(r, r.randint(1, 24)) for _ in range(COUNTS["utf8"])]
    keys += [_tag_key(r) for _ in range(COUNTS["tags"])]
    keys += [r.randbytes(r.randint(1, 32)) for _ in range(COUNTS["random"])]
    keys += [_ill_formed(r) for _ in range(COUNTS["ill_formed"])]
    r.shuffle(keys)
    return keys
