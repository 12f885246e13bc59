"""Numba kernels of the key sources: split lines, trim whitespace, lowercase, decode hex, parse decimal integers."""

from __future__ import annotations

import hashaudit._numba_setup  # noqa: F401  (sets the numba cache folder before numba loads)

# isort: split

import numpy as np
from numba import int64, njit, uint64

LF = 10
CR = 13

PARSE_OK = 0
PARSE_NOT_A_NUMBER = 1
PARSE_OUT_OF_RANGE = 2

# Computed here, in Python integers: inside a kernel, 2**64 - 1 is a uint64 and mixing it with an int64
# literal gives a float64.
_U64_CUTOFF = 0xFFFFFFFFFFFFFFFF // 10  # value * 10 + digit overflows once value exceeds this...
_U64_CUTOFF_DIGIT = 0xFFFFFFFFFFFFFFFF % 10  # ... or equals it and digit exceeds this
_I64_MIN_MAGNITUDE = 1 << 63


@njit(cache=True, nogil=True)
def _is_space(c):  # pragma: no cover - compiled
    # ASCII whitespace as Python's bytes.strip() sees it: space, \t, \n, \v, \f, \r.
    return c == 32 or (c >= 9 and c <= 13)


@njit(cache=True, nogil=True)
def split_lines(buf, stop, out, offsets):  # pragma: no cover - compiled
    """Copy the lines of ``buf[:stop]`` into ``out`` without their LF; return ``(lines, CR bytes seen)``.

    ``offsets`` (at least lines + 2 long) receives the line ends. Bytes after the last LF form one more,
    unterminated line whose end is left in ``offsets[lines + 1]``; the caller decides whether it counts.
    ``out`` needs one byte more than the output, for the LF stored (and then overwritten) last.

    Branch-free: every byte is stored and the output position advances unless it was an LF. That runs about
    a third faster than a branching loop on lines of varying length, where the LF branch mispredicts once per
    line. The CR count tells the caller whether :func:`split_lines_drop_cr` is needed at all.
    """
    j = 0
    k = 0
    crs = 0
    offsets[0] = 0
    for i in range(stop):
        c = buf[i]
        out[j] = c
        is_lf = int64(c == LF)
        crs += int64(c == CR)
        j += 1 - is_lf
        offsets[k + 1] = j
        k += is_lf
    return k, crs


@njit(cache=True, nogil=True)
def split_lines_drop_cr(buf, stop, out, offsets):  # pragma: no cover - compiled
    """:func:`split_lines`, also dropping a CR that immediately precedes an LF; return the number of lines."""
    j = 0
    k = 0
    offsets[0] = 0
    for i in range(stop):
        c = buf[i]
        if c == LF:
            if j > offsets[k] and out[j - 1] == CR:
                j -= 1
            k += 1
            offsets[k] = j
        else:
            out[j] = c
            j += 1
    offsets[k + 1] = j
    return k


@njit(cache=True, nogil=True)
def trim_spaces(data, offsets, starts, stops):  # pragma: no cover - compiled
    """Bounds of every key without leading and trailing ASCII whitespace; return how many keys change."""
    changed = 0
    for i in range(len(offsets) - 1):
        start = offsets[i]
        stop = offsets[i + 1]
        while start < stop and _is_space(data[start]):
            start += 1
        while stop > start and _is_space(data[stop - 1]):
            stop -= 1
        starts[i] = start
        stops[i] = stop
        changed += int64(stop - start != offsets[i + 1] - offsets[i])
    return changed


@njit(cache=True, nogil=True)
def gather(data, starts, stops, out, out_offsets):  # pragma: no cover - compiled
    """Copy ``data[starts[i]:stops[i]]`` for every ``i`` back to back into ``out``; return the bytes written."""
    j = 0
    out_offsets[0] = 0
    for i in range(len(starts)):
        for p in range(starts[i], stops[i]):
            out[j] = data[p]
            j += 1
        out_offsets[i + 1] = j
    return j


@njit(cache=True, nogil=True)
def ascii_lower(data, out):  # pragma: no cover - compiled
    """``out`` = ``data`` with ASCII ``A``-``Z`` mapped to ``a``-``z`` (a select LLVM vectorises)."""
    for i in range(len(data)):
        c = data[i]
        out[i] = c + 32 if c >= 65 and c <= 90 else c


HEX_DIGIT_VALUES = np.full(256, 0xFF, dtype=np.uint8)
"""Value of each hex digit byte (either case); 0xFF for every other byte."""
HEX_DIGIT_VALUES[np.frombuffer(b"0123456789", dtype=np.uint8)] = np.arange(10)
HEX_DIGIT_VALUES[np.frombuffer(b"abcdef", dtype=np.uint8)] = np.arange(10, 16)
HEX_DIGIT_VALUES[np.frombuffer(b"ABCDEF", dtype=np.uint8)] = np.arange(10, 16)


@njit(cache=True, nogil=True)
def hex_pairs(data, values, out):  # pragma: no cover - compiled
    """``out[i]`` = the byte of hex digits ``data[2i]``, ``data[2i + 1]``; return False if any byte is not a digit.

    Branch-free (a bad digit is noticed from the high bits of the OR of all looked-up values), so the caller
    finds the culprit in a second pass, only when there is one.
    """
    seen = np.uint8(0)
    for i in range(len(out)):
        high = values[data[2 * i]]
        low = values[data[2 * i + 1]]
        seen |= high | low
        out[i] = (high << 4) | low
    return seen < 16


@njit(cache=True, nogil=True)
def parse_decimal(data, offsets, out):  # pragma: no cover - compiled
    """Parse each key as a decimal integer into ``out`` (two's complement for negatives).

    Returns ``(index, code)``: ``(-1, PARSE_OK)`` when every key parsed, else the first bad key and why.
    """
    ten = uint64(10)
    cutoff = uint64(_U64_CUTOFF)
    cutoff_digit = uint64(_U64_CUTOFF_DIGIT)
    for i in range(len(offsets) - 1):
        start = offsets[i]
        stop = offsets[i + 1]
        while start < stop and _is_space(data[start]):
            start += 1
        while stop > start and _is_space(data[stop - 1]):
            stop -= 1
        negative = False
        if start < stop and (data[start] == 45 or data[start] == 43):  # '-' or '+'
            negative = data[start] == 45
            start += 1
        if start == stop:
            return i, PARSE_NOT_A_NUMBER
        value = uint64(0)
        overflow = False
        for p in range(start, stop):
            digit = uint64(data[p]) - uint64(48)  # wraps for bytes below '0', so one test covers both ends
            if digit > uint64(9):
                return i, PARSE_NOT_A_NUMBER
            if value > cutoff or (value == cutoff and digit > cutoff_digit):
                overflow = True  # keep scanning: a later non-digit makes it "not a number" instead
            else:
                value = value * ten + digit
        if overflow:
            return i, PARSE_OUT_OF_RANGE
        if negative:
            if value > uint64(_I64_MIN_MAGNITUDE):
                return i, PARSE_OUT_OF_RANGE
            value = uint64(0) - value
        out[i] = value
    return -1, PARSE_OK
