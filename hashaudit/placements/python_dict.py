"""CPython's ``dict`` of string keys: each key's ``hash()`` and its home slot in the index table the dict has after its
insertions.

**The hash.** Since Python 3.11 the default ``Py_HASH_ALGORITHM`` is SipHash-1-3 (one compression round, three
finalisation rounds; until 3.10 it was SipHash-2-4). ``hash(s)`` of a ``str`` is ``_Py_HashBytes`` over the string's
internal buffer, ``len(s) * kind`` bytes: every code point in one byte when all are below 256 (kind 1, Latin-1),
in two little-endian bytes when all are below 65,536 (kind 2, UCS-2), else in four (kind 4, UCS-4). An ASCII
string's buffer is its UTF-8 bytes; a Latin-1, BMP or astral one is not. The 64-bit result is read as a signed
``Py_hash_t``; -1 (the C API's error value) becomes -2, and a buffer of no bytes hashes to 0 whatever the secret.
``hash(b)`` of a ``bytes`` object is the same function over its bytes.

SipHash's 128-bit key is ``k0``, ``k1``: the first 16 bytes of the interpreter's 24-byte hash secret, read as two
little-endian words (on a little-endian machine, as the reference build is). ``PYTHONHASHSEED=0`` leaves the
secret zeroed; ``PYTHONHASHSEED=N`` for ``N`` from 1 to 4,294,967,295 fills it with ``lcg_urandom(N)``, the
linear congruential generator ``x = x * 214013 + 2531011`` (mod 2^32) giving the byte ``(x >> 16) & 0xFF`` at
each step. Without ``PYTHONHASHSEED`` every process draws a random secret at startup: its slots are those of a
seed nobody knows, statistically like any other seed.

**The keys.** A key arrives as bytes. A key that is well-formed UTF-8 is decoded (strictly, as
``bytes.decode("utf-8")``: no surrogates, no overlong forms, nothing above U+10FFFF) and hashed as that ``str``;
a key that is not is hashed as the ``bytes`` object of the same bytes, which is where a program that keeps
undecodable keys as ``bytes`` puts it (a ``str`` and a ``bytes`` key are never equal, so both can sit in one dict).
For ASCII keys the two agree: the ``str``'s buffer is the key's bytes.

**The table.** A dict is a compact array of entries in insertion order and an index table of ``n`` slots, ``n``
a power of two, that holds entry numbers. A key's home slot is ``hash & (n - 1)``; a new key goes to the first
free slot of the probe sequence from there, with the unsigned hash as ``perturb``: ``perturb >>= 5;
i = (i * 5 + perturb + 1) & (n - 1)`` (``PERTURB_SHIFT`` 5), which reaches every slot once the high bits are
used up. The table of a dict built from ``{}`` by inserting distinct keys one at a time starts at
``PyDict_MINSIZE`` (8) slots with the first key and holds ``USABLE_FRACTION(n) = 2n // 3`` entries; inserting one
more resizes it to the least power of two at or above ``GROWTH_RATE = used * 3`` (never below 8), which for
``used = 2n // 3`` is ``2n``: the table doubles. A resize re-inserts the entries in their order, so the slots after
``entries`` insertions are those of inserting the keys in order into the final table (:func:`insertion_slots`).

A dict whose keys are all ``str`` keeps a compact layout for them; the first key of another type (here a
``bytes`` key, for a key that is not UTF-8) switches it to the general layout with one more resize to
``GROWTH_RATE``, which doubles the table early when the dict already held ``str`` keys. From then on the dict
grows as before, so its table is the one of a single-type dict again once its entries pass two thirds of the table
the switch happened in. The placement rule takes the table of a dict of one key type (all keys UTF-8, or a
non-UTF-8 key first); :func:`table_size_after` takes the switch as a parameter. Deletions (which leave dummy
slots and make ``GROWTH_RATE`` smaller than ``2n``), dicts presized by ``dict.fromkeys`` of a dict or set,
``dict.copy`` and the merge of a whole dict, and shared-key instance dictionaries are not modelled.

The placement rule counts keys by home slot (the unit ``slot``): the slot a lookup of the key probes first, and
the slot every key with the same low bits of its hash competes for.

References
----------
J.-P. Aumasson, D. J. Bernstein, "SipHash: a fast short-input PRF", INDOCRYPT 2012, LNCS 7668 (SipHash-c-d,
SipRound, the initialisation constants and the length byte).
C. Heimes, PEP 456, "Secure and interchangeable hash algorithm" (SipHash for ``str`` and ``bytes``, the hash
secret, ``Py_HASH_CUTOFF``); PEP 393, "Flexible String Representation" (the kinds of a ``str``'s buffer).
CPython source (3.11 to 3.13): ``Python/pyhash.c`` (``_Py_HashBytes``, ``siphash13``), ``Include/pyhash.h``
(``_Py_HashSecret_t``, ``Py_HASH_ALGORITHM``), ``Objects/unicodeobject.c`` (``unicode_hash``),
``Objects/bytesobject.c`` (``bytes_hash``), ``Python/bootstrap_hash.c`` (``lcg_urandom``,
``_Py_HashRandomization_Init``), ``Objects/dictobject.c`` (``PyDict_MINSIZE``, ``USABLE_FRACTION``, ``GROWTH_RATE``,
``PERTURB_SHIFT``, ``calculate_log2_keysize``, ``insertdict``, ``insertion_resize``, ``find_empty_slot``,
``build_indices``, and the notes on the probe sequence at the top of the file). The Unicode Standard, section 3.9,
Table 3-7 "Well-Formed UTF-8 Byte Sequences".
"""

from __future__ import annotations

import hashaudit._numba_setup  # noqa: F401  (sets the numba cache folder before numba loads)

# isort: split

import operator

import numpy as np
from numba import njit, uint64

from hashaudit.hashes.murmur import _load64
from hashaudit.hashes.siphash import _sip_init, _sipround
from hashaudit.keys.batch import KeyBatch
from hashaudit.placements.jvm import REPLACEMENT, _next_code_point
from hashaudit.placements.rules import ModLayout

PYDICT_MINSIZE = 8
PERTURB_SHIFT = 5
SEED_MAX = (1 << 32) - 1  # PYTHONHASHSEED is an unsigned long read from 0 to 4294967295
_SECRET_BYTES = 24  # sizeof(_Py_HashSecret_t)


def lcg_urandom(seed: int, size: int = _SECRET_BYTES) -> bytes:
    """CPython's ``lcg_urandom``: the bytes that ``PYTHONHASHSEED=seed`` (seed > 0) writes into the hash secret.

    Parameters
    ----------
    seed : int
        The starting value ``x0``, an unsigned 32-bit integer.
    size : int, default 24
        Bytes to produce (the secret's size).

    Returns
    -------
    bytes
        ``(x >> 16) & 0xFF`` after each step ``x = x * 214013 + 2531011`` modulo 2^32.

    References
    ----------
    CPython, ``Python/bootstrap_hash.c``: ``lcg_urandom`` and ``_Py_HashRandomization_Init``.
    """
    x = operator.index(seed) & SEED_MAX
    out = bytearray()
    for _ in range(size):
        x = (x * 214013 + 2531011) & SEED_MAX
        out.append((x >> 16) & 0xFF)
    return bytes(out)


def hash_secret(seed: int) -> tuple[int, int]:
    """SipHash's key ``(k0, k1)`` in an interpreter started with ``PYTHONHASHSEED=seed``.

    Parameters
    ----------
    seed : int
        The ``PYTHONHASHSEED`` value, 0 to 4,294,967,295; 0 leaves the secret zeroed.

    Returns
    -------
    tuple of int
        ``k0`` and ``k1``: the secret's bytes 0–7 and 8–15 as little-endian 64-bit words.

    Raises
    ------
    ValueError
        When ``seed`` is outside 0 to 4,294,967,295 (CPython refuses to start with such a value).

    References
    ----------
    CPython, ``Python/bootstrap_hash.c`` (``_Py_HashRandomization_Init``) and ``Include/pyhash.h``
    (``_Py_HashSecret_t``: ``siphash.k0``, ``siphash.k1``).
    """
    seed = operator.index(seed)
    if not 0 <= seed <= SEED_MAX:
        raise ValueError(f"PYTHONHASHSEED is an integer from 0 to {SEED_MAX} (got {seed})")
    secret = lcg_urandom(seed) if seed else bytes(_SECRET_BYTES)
    return int.from_bytes(secret[:8], "little"), int.from_bytes(secret[8:16], "little")


@njit(cache=True, nogil=True)
def _widest_code_point(data, start, stop):  # pragma: no cover - compiled
    # the largest code point of the key decoded as UTF-8 (0 for no bytes), or -1 when it is not well-formed; the
    # lenient decoder returns U+FFFD for an ill-formed subpart, and only EF BF BD is a well-formed U+FFFD
    p = start
    while p < stop and data[p] < 0x80:
        p += 1
    if p == stop:
        return np.int64(0x7F) if stop > start else np.int64(0)
    widest = np.int64(0x7F)
    while p < stop:
        cp, q = _next_code_point(data, p, stop)
        if cp == REPLACEMENT and not (data[p] == 0xEF and q == p + 3):
            return np.int64(-1)
        if cp > widest:
            widest = cp
        p = q
    return widest


@njit(cache=True, nogil=True)
def _finish(v0, v1, v2, v3, word, total):  # pragma: no cover - compiled
    # the last word with the length byte, one compression round, three finalisation rounds; -1 read as -2
    word |= uint64(total & 0xFF) << uint64(56)
    v3 ^= word
    v0, v1, v2, v3 = _sipround(v0, v1, v2, v3)
    v0 ^= word
    v2 ^= uint64(0xFF)
    v0, v1, v2, v3 = _sipround(v0, v1, v2, v3)
    v0, v1, v2, v3 = _sipround(v0, v1, v2, v3)
    v0, v1, v2, v3 = _sipround(v0, v1, v2, v3)
    h = v0 ^ v1 ^ v2 ^ v3
    if h == uint64(0xFFFFFFFFFFFFFFFF):  # -1 is the C API's error value
        h = uint64(0xFFFFFFFFFFFFFFFE)
    return h


@njit(cache=True, nogil=True)
def _py_hash_kernel(data, offsets, k0, k1, out):  # pragma: no cover - compiled
    init0, init1, init2, init3 = _sip_init(k0, k1)
    for i in range(len(offsets) - 1):
        start = offsets[i]
        stop = offsets[i + 1]
        if stop == start:  # the empty str (or bytes) hashes to 0 whatever the secret
            out[i] = uint64(0)
            continue
        widest = _widest_code_point(data, start, stop)
        v0 = init0
        v1 = init1
        v2 = init2
        v3 = init3
        if widest < 0x80:  # bytes, or ASCII: the buffer is the key's bytes
            length = stop - start
            block_end = start + (length & ~7)
            p = start
            while p < block_end:
                m = _load64(data, p)  # little-endian, at any alignment
                v3 ^= m
                v0, v1, v2, v3 = _sipround(v0, v1, v2, v3)
                v0 ^= m
                p += 8
            word = uint64(0)
            for t in range(length & 7):
                word |= uint64(data[block_end + t]) << uint64(8 * t)
            out[i] = _finish(v0, v1, v2, v3, word, length)
            continue
        kind = 1 if widest < 0x100 else 2 if widest < 0x10000 else 4
        word = uint64(0)
        filled = 0  # bytes of the buffer in ``word``; a unit of 1, 2 or 4 bytes never straddles two words
        total = 0
        p = start
        while p < stop:
            cp, p = _next_code_point(data, p, stop)
            word |= uint64(cp) << uint64(8 * filled)
            filled += kind
            total += kind
            if filled == 8:
                v3 ^= word
                v0, v1, v2, v3 = _sipround(v0, v1, v2, v3)
                v0 ^= word
                word = uint64(0)
                filled = 0
        out[i] = _finish(v0, v1, v2, v3, word, total)


def str_hash(batch: KeyBatch, seed: int = 0) -> np.ndarray:
    """CPython's ``hash()`` of every key: of the ``str`` it decodes to, or of its ``bytes`` when it is not UTF-8.

    Parameters
    ----------
    batch : KeyBatch
        The keys. Well-formed UTF-8 is hashed as the ``str`` (SipHash-1-3 over its buffer of 1, 2 or 4 bytes per
        code point); anything else as the ``bytes`` object (SipHash-1-3 over the key's bytes).
    seed : int, default 0
        The interpreter's ``PYTHONHASHSEED``, 0 to 4,294,967,295.

    Returns
    -------
    numpy.ndarray of int64, shape (n,)
        The ``Py_hash_t`` of every key, as ``hash()`` returns it (``.view(numpy.uint64)`` gives the unsigned bits
        the dict masks).

    References
    ----------
    J.-P. Aumasson, D. J. Bernstein, "SipHash: a fast short-input PRF", INDOCRYPT 2012.
    PEP 456; PEP 393. CPython, ``Python/pyhash.c`` (``_Py_HashBytes``, ``siphash13``), ``Objects/unicodeobject.c``
    (``unicode_hash``), ``Objects/bytesobject.c`` (``bytes_hash``).
    """
    k0, k1 = hash_secret(seed)
    out = np.empty(len(batch), dtype=np.uint64)
    _py_hash_kernel(batch.data, batch.offsets, np.uint64(k0), np.uint64(k1), out)
    return out.view(np.int64)


def usable_fraction(table_size: int) -> int:
    """``USABLE_FRACTION(n) = (n << 1) / 3``: the entries a table of ``table_size`` slots holds before it grows.

    References
    ----------
    CPython, ``Objects/dictobject.c``, ``USABLE_FRACTION``.
    """
    return (operator.index(table_size) << 1) // 3


def table_size_after(entries: int, switched_after: int = 0) -> int:
    """The index table's slots in a dict built from ``{}`` by inserting ``entries`` distinct keys one at a time.

    Parameters
    ----------
    entries : int
        Distinct keys inserted (at least 1; an empty dict shares a table of no usable slots).
    switched_after : int, default 0
        The ``str`` keys the dict held when the first key of another type was inserted; 0 when the first key
        inserted was of another type, or every key is a ``str``.

    Returns
    -------
    int
        ``PyDict_MINSIZE`` (8), then, each time an insertion finds no usable entry left, the least power of two at
        or above ``GROWTH_RATE = used * 3`` (at least 8) with ``used = USABLE_FRACTION(n)``: a doubling. The switch
        to the general layout after ``switched_after`` keys (before ``entries``) resizes to ``GROWTH_RATE`` too,
        ``3 * switched_after``, which for 1 to ``USABLE_FRACTION(n)`` keys in ``n`` slots doubles the table (for
        one or two keys as well: 3.11's ``calculate_log2_keysize`` rounds ``(minsize | 8) - 1`` up to a power of
        two, which gives 16 for a ``minsize`` of 3 or 6; CPython 3.12 and 3.13 build the same tables).

    Raises
    ------
    ValueError
        When ``entries`` is below 1 or ``switched_after`` below 0.

    References
    ----------
    CPython, ``Objects/dictobject.c``: ``insert_to_emptydict`` (the first table of ``PyDict_MINSIZE`` slots),
    ``insertdict`` (``insertion_resize`` for a key that is not a ``str`` in a dict of ``str`` keys, and when
    ``dk_usable <= 0``), ``GROWTH_RATE``, ``calculate_log2_keysize`` and ``USABLE_FRACTION``.
    """
    entries = operator.index(entries)
    switched_after = operator.index(switched_after)
    if entries < 1 or switched_after < 0:
        raise ValueError(f"entries must be at least 1 and switched_after at least 0 (got {entries}, {switched_after})")
    size = _single_type_size(entries)
    if 0 < switched_after < entries:
        size = max(size, 2 * _single_type_size(switched_after))
    return size


def _single_type_size(entries: int) -> int:
    """The table after ``entries`` insertions into a dict that never switches layout."""
    size = PYDICT_MINSIZE
    while entries > usable_fraction(size):
        growth = 3 * usable_fraction(size)  # GROWTH_RATE: used * 3, with every usable entry used
        size = max(PYDICT_MINSIZE, 1 << (growth - 1).bit_length())
    return size


@njit(cache=True, nogil=True)
def _insertion_slots_kernel(values, mask, slots, probes):  # pragma: no cover - compiled
    taken = np.zeros(mask + 1, dtype=np.bool_)
    for k in range(len(values)):
        h = values[k]
        i = h & mask
        perturb = h
        count = 1
        while taken[i]:
            perturb >>= uint64(PERTURB_SHIFT)
            i = (i * uint64(5) + perturb + uint64(1)) & mask
            count += 1
        taken[i] = True
        slots[k] = i
        probes[k] = count


def insertion_slots(values: np.ndarray, table_size: int) -> tuple[np.ndarray, np.ndarray]:
    """The slot every key takes when distinct keys with these hashes are inserted in order into a table.

    Parameters
    ----------
    values : numpy.ndarray
        The hashes of distinct keys in insertion order (``int64`` as ``hash()`` gives them, or their ``uint64``
        bits).
    table_size : int
        The index table's slots, a power of two with room for every key (at most ``USABLE_FRACTION`` of it used).

    Returns
    -------
    slots : numpy.ndarray of int64
        The slot each key's entry number is stored in: the first free slot of its probe sequence.
    probes : numpy.ndarray of int64
        Slots looked at to find it (1 when the home slot was free): what a later lookup of the key looks at too.

    Raises
    ------
    ValueError
        When ``table_size`` is not a power of two, the keys are more than the table holds, or the values are not
        64-bit integers.

    References
    ----------
    CPython, ``Objects/dictobject.c``: ``find_empty_slot`` and ``build_indices`` (``i = hash & mask``, then
    ``perturb >>= PERTURB_SHIFT; i = (i*5 + perturb + 1) & mask`` with ``perturb`` the unsigned hash).
    """
    table_size = operator.index(table_size)
    if table_size < 1 or table_size & (table_size - 1):
        raise ValueError(f"table_size must be a power of two (got {table_size})")
    values = np.ascontiguousarray(values)
    if values.dtype not in (np.int64, np.uint64):
        raise ValueError(f"values must be int64 or uint64 hashes (got {values.dtype})")
    bits = values.view(np.uint64)
    if len(bits) > usable_fraction(table_size):
        raise ValueError(f"a table of {table_size} slots holds {usable_fraction(table_size)} entries, not {len(bits)}")
    slots = np.empty(len(bits), dtype=np.uint64)
    probes = np.empty(len(bits), dtype=np.int64)
    _insertion_slots_kernel(bits, np.uint64(table_size - 1), slots, probes)
    return slots.astype(np.int64), probes


class DictLayout(ModLayout):
    """The home slots of a dict's index table of ``shards`` slots (a power of two, at least 8): ``hash & (shards -
    1)`` of the unsigned hash, which is ``hash % shards``; a dict that only gains keys grows by doubling."""

    def __init__(self, shards: int) -> None:
        super().__init__(shards)
        if self.shards < PYDICT_MINSIZE or self.shards & (self.shards - 1):
            raise ValueError(f"a dict's table has a power of two of at least 8 slots (got {self.shards})")

    def resized(self, shards: int) -> DictLayout:
        """The table after the dict's next growth, whatever ``shards`` above the current size is asked for: inserting
        distinct keys only ever doubles it (``GROWTH_RATE``)."""
        return DictLayout(2 * self.shards if shards > self.shards else self.shards)

    def ideal_moved(self, shards: int, width: int = 64) -> float | None:
        """Half the values change home slot on a doubling: those with the new bit set."""
        return 0.5 if shards > self.shards else 0.0

    @property
    def label(self) -> str:
        return f"{self.shards} slots"
