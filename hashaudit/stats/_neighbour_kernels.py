"""Kernels of the neighbour families (``hashaudit.stats.neighbours``): each family kernel writes its candidates into
preallocated buffers (sized from an upper bound) and returns how many keys and bytes it wrote."""

from __future__ import annotations

import hashaudit._numba_setup  # noqa: F401

# isort: split

import numpy as np
from numba import njit


@njit(cache=True, nogil=True)
def _is_digit(c):  # pragma: no cover - compiled
    """An ASCII digit."""
    return 48 <= c <= 57


@njit(cache=True, nogil=True)
def counter_kernel(data, offsets, steps, out_data, out_offsets):  # pragma: no cover - compiled
    """For each key with a digit, the next ``steps`` values of its last run of digits (same width)."""
    position = 0
    f = 0
    out_offsets[0] = 0
    for i in range(offsets.shape[0] - 1):
        s = offsets[i]
        length = offsets[i + 1] - s
        end = length
        while end > 0 and not _is_digit(data[s + end - 1]):
            end -= 1
        if end == 0:
            continue
        begin = end - 1
        while begin > 0 and _is_digit(data[s + begin - 1]):
            begin -= 1
        digits = data[s + begin : s + end].copy()
        for _ in range(steps):
            # add one with carry; a carry out of the leftmost digit would widen the counter: stop
            j = digits.shape[0] - 1
            while j >= 0 and digits[j] == 57:
                digits[j] = 48
                j -= 1
            if j < 0:
                break
            digits[j] += 1
            for t in range(begin):
                out_data[position + t] = data[s + t]
            for t in range(end - begin):
                out_data[position + begin + t] = digits[t]
            for t in range(end, length):
                out_data[position + t] = data[s + t]
            position += length
            f += 1
            out_offsets[f] = position
    return f, position


@njit(cache=True, nogil=True)
def _is_printable(data, s, length):  # pragma: no cover - compiled
    """Every byte of the key is printable ASCII (0x20-0x7E)."""
    for t in range(length):
        if data[s + t] < 32 or data[s + t] > 126:
            return False
    return True


@njit(cache=True, nogil=True)
def _in_window(j, length, positions):  # pragma: no cover - compiled
    """Position j is among the first or the last ``positions`` bytes of the key."""
    return j < positions or j >= length - positions


@njit(cache=True, nogil=True)
def one_char_kernel(data, offsets, positions, out_data, out_offsets):  # pragma: no cover - compiled
    """Byte j plus one, then minus one, for every j in the window of every key."""
    position = 0
    f = 0
    out_offsets[0] = 0
    for i in range(offsets.shape[0] - 1):
        s = offsets[i]
        length = offsets[i + 1] - s
        low, high = (32, 126) if _is_printable(data, s, length) else (0, 255)
        for j in range(length):
            if not _in_window(j, length, positions):
                continue
            for delta in (1, -1):
                v = np.int64(data[s + j]) + delta
                if v < low or v > high:
                    continue
                for t in range(length):
                    out_data[position + t] = data[s + t]
                out_data[position + j] = np.uint8(v)
                position += length
                f += 1
                out_offsets[f] = position
    return f, position


@njit(cache=True, nogil=True)
def case_kernel(data, offsets, positions, out_data, out_offsets):  # pragma: no cover - compiled
    """The case of letter j flipped, for every ASCII letter j in the window of every key."""
    position = 0
    f = 0
    out_offsets[0] = 0
    for i in range(offsets.shape[0] - 1):
        s = offsets[i]
        length = offsets[i + 1] - s
        for j in range(length):
            c = data[s + j]
            if not _in_window(j, length, positions) or not (65 <= c <= 90 or 97 <= c <= 122):
                continue
            for t in range(length):
                out_data[position + t] = data[s + t]
            out_data[position + j] = c ^ np.uint8(32)
            position += length
            f += 1
            out_offsets[f] = position
    return f, position


@njit(cache=True, nogil=True)
def append_kernel(data, offsets, per_key, first_value, out_data, out_offsets):  # pragma: no cover - compiled
    """Key i followed by one byte, for the ``per_key`` values ``first_value[i], first_value[i] + 1, ...`` mod 256."""
    position = 0
    f = 0
    out_offsets[0] = 0
    for i in range(offsets.shape[0] - 1):
        s = offsets[i]
        length = offsets[i + 1] - s
        for r in range(per_key):
            for t in range(length):
                out_data[position + t] = data[s + t]
            out_data[position + length] = np.uint8((first_value[i] + r) & 255)
            position += length + 1
            f += 1
            out_offsets[f] = position
    return f, position


@njit(cache=True, nogil=True)
def prefix_kernel(data, offsets, skip, prefix, lengths, out_data, out_offsets):  # pragma: no cover - compiled
    """``prefix[:L] + key[skip:]`` for every L in ``lengths`` (outer loop) and every key."""
    position = 0
    f = 0
    out_offsets[0] = 0
    for L in lengths:
        for i in range(offsets.shape[0] - 1):
            s = offsets[i] + skip
            tail = offsets[i + 1] - s
            for t in range(L):
                out_data[position + t] = prefix[t]
            for t in range(tail):
                out_data[position + L + t] = data[s + t]
            position += L + tail
            f += 1
            out_offsets[f] = position
    return f, position


@njit(cache=True, nogil=True)
def _same_key(data, a, b, offsets):  # pragma: no cover - compiled
    """Keys a and b have the same bytes."""
    sa = offsets[a]
    la = offsets[a + 1] - sa
    sb = offsets[b]
    if offsets[b + 1] - sb != la:
        return False
    for t in range(la):
        if data[sa + t] != data[sb + t]:
            return False
    return True


@njit(cache=True, nogil=True)
def first_occurrence_kernel(data, offsets, fingerprints, order, keep):  # pragma: no cover - compiled
    """``keep[k]``: no earlier key (smaller index) has the same bytes. ``order`` sorts the fingerprints stably,
    so within a run of equal fingerprints the indices increase."""
    n = order.shape[0]
    i = 0
    while i < n:
        j = i + 1
        while j < n and fingerprints[order[j]] == fingerprints[order[i]]:
            j += 1
        keep[order[i]] = True
        for q in range(i + 1, j):
            k = order[q]
            keep[k] = True
            for r in range(i, q):
                if _same_key(data, order[r], k, offsets):
                    keep[k] = False
                    break
        i = j
