"""Key formats (raw bytes, hex, base64, decimal integers) and the normalisations applied before hashing.

Order, for every source: ``pattern`` (keep the first group of the first match; other keys are skipped),
``strip``, ``lowercase``, ``skip_empty``, then the key format. Dropping empty keys just before decoding is
the same as dropping them after it for hex and base64 (empty text decodes to an empty key) and lets
``--skip-empty`` pass over blank lines of an integer file, where an empty text has no integer value.

hex, strip, lowercase and int run numba kernels and skip_empty is a numpy mask; pattern and base64 make one
Python call per key (the regular expression engine and :mod:`binascii` work on one string at a time).

With ``on_bad_record="skip"`` a key its format cannot decode is dropped (counted as ``bad_key_format``) instead of
stopping the read. A batch is first decoded as usual; only a batch that fails is sorted into good and bad keys
(a numpy mask for hex, the integer kernel resumed after each bad key, one pass for base64).
"""

from __future__ import annotations

import binascii
import re
from collections.abc import Callable

import numpy as np

from hashaudit.errors import InputError, UsageError
from hashaudit.keys._kernels import (
    HEX_DIGIT_VALUES,
    PARSE_NOT_A_NUMBER,
    ascii_lower,
    gather,
    hex_pairs,
    parse_decimal,
    trim_spaces,
)
from hashaudit.keys.batch import KeyBatch
from hashaudit.keys.options import KEY_FORMATS, SourceOptions
from hashaudit.keys.records import RecordBatch, SourceStats
from hashaudit.settings import SettingError

# RFC 4648 section 5 (URL- and filename-safe alphabet) differs from section 4 only in these two characters.
_URLSAFE_TO_STANDARD = bytes.maketrans(b"-_", b"+/")


class KeyValueError(InputError):
    """A key its key format cannot decode; ``index`` is the key's position in the batch."""

    def __init__(self, index: int, reason: str) -> None:
        super().__init__(f"key {index}: {reason}")
        self.index = index
        self.reason = reason


def key_size(length: int) -> str:
    """How an error message describes a key it may not show: by its length (``"(12 bytes)"``, ``"(empty key)"``).

    Keys in production dumps are often personal data or credentials, so a message names the record and the
    reason, never the key's text (the caller names the record).
    """
    if length == 0:
        return "(empty key)"
    return "(1 byte)" if length == 1 else f"({length} bytes)"


def _length(batch: KeyBatch, index: int) -> int:
    return int(batch.offsets[index + 1] - batch.offsets[index])


def _packed(batch: KeyBatch) -> tuple[np.ndarray, np.ndarray]:
    """The batch's bytes and offsets rebased to start at 0 (the data is a view, not a copy)."""
    start = int(batch.offsets[0])
    return batch.data[start : int(batch.offsets[-1])], batch.offsets - start


def decode_hex(batch: KeyBatch) -> KeyBatch:
    """Decode every key from hexadecimal text (RFC 4648 section 8, either case).

    Raises
    ------
    KeyValueError
        A key of odd length or with a character that is not a hex digit.
    """
    data, offsets = _packed(batch)
    odd = np.flatnonzero(np.diff(offsets) & 1)
    if len(odd):
        i = int(odd[0])
        raise KeyValueError(i, f"not hexadecimal: an odd number of digits {key_size(_length(batch, i))}")
    # Every key has even length and keys are back to back, so digit pairs never straddle two keys.
    decoded = np.empty(len(data) // 2, dtype=np.uint8)
    if not hex_pairs(data, HEX_DIGIT_VALUES, decoded):
        bad = int(np.flatnonzero(HEX_DIGIT_VALUES[data] == 0xFF)[0])
        i = int(np.searchsorted(offsets, bad, side="right")) - 1
        column = int(bad - offsets[i]) + 1
        size = key_size(int(offsets[i + 1] - offsets[i]))
        raise KeyValueError(i, f"not hexadecimal: byte {column} is not a hex digit {size}")
    return KeyBatch(decoded, offsets // 2)


def _base64_key(key: bytes) -> bytes:
    """One key decoded from base64 (either alphabet, padding optional); raises :class:`binascii.Error`."""
    text = key.translate(_URLSAFE_TO_STANDARD)
    if len(text) % 4 == 1:
        raise binascii.Error("a length of 4k + 1 characters is impossible")
    return binascii.a2b_base64(text + b"=" * (-len(text) % 4), strict_mode=True)


def decode_base64(batch: KeyBatch) -> KeyBatch:
    """Decode every key from base64 (RFC 4648 section 4 or 5 alphabet, padding optional).

    One :func:`binascii.a2b_base64` call per key (a Python loop).

    Raises
    ------
    KeyValueError
        A key that is not base64.
    """
    decoded = []
    for i, key in enumerate(batch.to_list()):
        try:
            decoded.append(_base64_key(key))
        except binascii.Error as exc:
            # binascii's reasons are fixed texts ("Incorrect padding"): they never quote the input
            why = str(exc).rstrip(".")
            raise KeyValueError(i, f"not base64: {why[:1].lower()}{why[1:]} {key_size(len(key))}") from None
    return KeyBatch.from_keys(decoded)


def parse_int(batch: KeyBatch) -> KeyBatch:
    """Parse every key as a decimal integer, giving 8-byte little-endian keys (``KeyBatch.from_uint64``).

    An optional ``+`` or ``-`` and surrounding ASCII whitespace are allowed. Values from -2^63 to 2^64 - 1
    are accepted; negative ones become their 64-bit two's complement, as a C ``(uint64_t)int64`` cast does.

    Raises
    ------
    KeyValueError
        A key that is not a decimal integer or lies outside that range.
    """
    values = np.empty(len(batch), dtype=np.uint64)
    index, code = parse_decimal(batch.data, batch.offsets, values)
    if index >= 0:
        what = "not a decimal integer" if code == PARSE_NOT_A_NUMBER else "integer out of range [-2^63, 2^64-1]"
        raise KeyValueError(int(index), f"{what} {key_size(_length(batch, int(index)))}")
    return KeyBatch.from_uint64(values)


def strip_keys(batch: KeyBatch) -> KeyBatch:
    """Remove leading and trailing ASCII whitespace (space, tab, CR, LF, VT, FF) from every key."""
    starts = np.empty(len(batch), dtype=np.int64)
    stops = np.empty(len(batch), dtype=np.int64)
    if not trim_spaces(batch.data, batch.offsets, starts, stops):
        return batch  # nothing to trim: spare the copy
    out = np.empty(int((stops - starts).sum()), dtype=np.uint8)
    offsets = np.empty(len(batch) + 1, dtype=np.int64)
    gather(batch.data, starts, stops, out, offsets)
    return KeyBatch(out, offsets)


def lowercase_keys(batch: KeyBatch) -> KeyBatch:
    """Map ASCII ``A``-``Z`` to ``a``-``z`` in every key; other bytes, UTF-8 included, are left alone."""
    data, offsets = _packed(batch)
    out = np.empty_like(data)
    ascii_lower(data, out)
    return KeyBatch(out, offsets)


def drop_empty(batch: KeyBatch) -> tuple[KeyBatch, np.ndarray | None]:
    """Drop empty keys; return the batch and the positions kept (None when nothing was dropped)."""
    nonempty = np.diff(batch.offsets) > 0
    if nonempty.all():
        return batch, None
    # An empty key owns no bytes, so dropping it only removes one offset; the data is shared.
    offsets = np.concatenate((batch.offsets[:1], batch.offsets[1:][nonempty]))
    return KeyBatch(batch.data, offsets), np.flatnonzero(nonempty)


def compile_pattern(pattern: str) -> re.Pattern[str]:
    """Compile a ``--pattern``; it must have a group, whose text becomes the key.

    Raises
    ------
    UsageError
        Not a regular expression, or one without a group.
    """
    try:
        regex = re.compile(pattern)
    except re.error as exc:
        raise SettingError("pattern", f"{pattern!r} is not a valid regular expression: {exc}") from None
    if regex.groups < 1:
        raise SettingError("pattern", f"{pattern!r} has no group: put the part that is the key in parentheses")
    return regex


def extract_pattern(batch: KeyBatch, regex: re.Pattern[str]) -> tuple[KeyBatch, np.ndarray | None]:
    """Replace each key by the first group of the first match of ``regex`` (:func:`re.search`).

    Keys are matched as UTF-8 text (bytes that are not UTF-8 pass through unchanged, as surrogate escapes),
    one Python call per key. Keys with no match, or whose first group took no part in the match, are
    dropped; returns the batch and the positions kept (None when every key matched).
    """
    found = []
    kept = []
    for i, key in enumerate(batch.to_list()):
        match = regex.search(key.decode("utf-8", "surrogateescape"))
        group = match.group(1) if match else None
        if group is not None:
            found.append(group.encode("utf-8", "surrogateescape"))
            kept.append(i)
    if len(kept) == len(batch):
        return KeyBatch.from_keys(found), None
    return KeyBatch.from_keys(found), np.asarray(kept, dtype=np.int64)


_DECODERS: dict[str, Callable[[KeyBatch], KeyBatch]] = {"hex": decode_hex, "base64": decode_base64, "int": parse_int}


def check_key_format(key_format: str) -> None:
    """Raise UsageError unless ``key_format`` is one of ``KEY_FORMATS``."""
    if key_format not in KEY_FORMATS:
        raise UsageError(f"unknown key format {key_format!r}; choose one of {', '.join(KEY_FORMATS)}")


def apply_key_format(batch: KeyBatch, key_format: str) -> KeyBatch:
    """Decode every key of ``batch`` from ``key_format`` (``bytes`` leaves it as it is)."""
    check_key_format(key_format)
    decoder = _DECODERS.get(key_format)
    return batch if decoder is None else decoder(batch)


def _hex_decodable(batch: KeyBatch) -> np.ndarray:
    """Mask of the keys :func:`decode_hex` accepts: an even number of characters, every one a hex digit."""
    data, offsets = _packed(batch)
    bad_bytes = (HEX_DIGIT_VALUES[data] == 0xFF).view(np.uint8)
    good = (np.diff(offsets) & 1) == 0
    nonempty = np.flatnonzero(np.diff(offsets))
    if len(nonempty):
        # Keys are back to back, so the segment from one non-empty key's start to the next one's is that key.
        good[nonempty] &= np.bitwise_or.reduceat(bad_bytes, offsets[nonempty]) == 0
    return good


def _int_decodable(batch: KeyBatch) -> np.ndarray:
    """Mask of the keys :func:`parse_int` accepts; the kernel resumes after each bad key, so one pass in all."""
    good = np.ones(len(batch), dtype=bool)
    values = np.empty(len(batch), dtype=np.uint64)
    start = 0
    while start < len(batch):
        index, _ = parse_decimal(batch.data, batch.offsets[start:], values[start:])
        if index < 0:
            break
        good[start + index] = False
        start += int(index) + 1
    return good


_DECODABLE: dict[str, Callable[[KeyBatch], np.ndarray]] = {"hex": _hex_decodable, "int": _int_decodable}


def apply_key_format_skipping(batch: KeyBatch, key_format: str) -> tuple[KeyBatch, np.ndarray | None]:
    """Decode the keys of ``batch`` that ``key_format`` can decode and drop the others.

    Returns the decoded batch and the positions kept (None when every key decoded). A batch without a bad key
    costs what :func:`apply_key_format` costs; only a batch with one is looked at key by key.
    """
    try:
        return apply_key_format(batch, key_format), None
    except KeyValueError:
        pass
    if key_format == "base64":  # decoded key by key anyway: keep the good ones in the same pass
        decoded, positions = [], []
        for i, key in enumerate(batch.to_list()):
            try:
                decoded.append(_base64_key(key))
            except binascii.Error:
                continue
            positions.append(i)
        return KeyBatch.from_keys(decoded), np.asarray(positions, dtype=np.int64)
    kept = np.flatnonzero(_DECODABLE[key_format](batch))
    return apply_key_format(batch.take(kept), key_format), kept


class Normaliser:
    """The per-key steps ``SourceOptions`` asks for, applied batch by batch.

    Parameters
    ----------
    options : SourceOptions
        Uses ``pattern``, ``strip``, ``lowercase``, ``skip_empty``, ``key_format`` and ``on_bad_record`` (``skip``:
        keys the key format cannot decode are dropped and counted as ``bad_key_format``).

    Raises
    ------
    UsageError
        Unknown key format or unusable pattern.
    """

    def __init__(self, options: SourceOptions) -> None:
        check_key_format(options.key_format)
        self.regex = compile_pattern(options.pattern) if options.pattern is not None else None
        self.options = options
        self.skip_bad = options.on_bad_record == "skip"

    @property
    def is_identity(self) -> bool:
        """True when batches pass through unchanged."""
        o = self.options
        return self.regex is None and not (o.strip or o.lowercase or o.skip_empty) and o.key_format == "bytes"

    def apply(self, records: RecordBatch, stats: SourceStats, locate: Callable[[int], str]) -> RecordBatch:
        """Normalise one batch, counting skipped keys in ``stats``.

        ``locate(record_number)`` names a record in an error message (``"keys.txt line 7"``).
        """
        o = self.options
        if self.regex is not None:
            keys, kept = extract_pattern(records.keys, self.regex)
            stats.skip("pattern_no_match", len(records.keys) - len(keys))
            records = records.subset(keys, kept)
        if o.strip:
            records = records.subset(strip_keys(records.keys), None)
        if o.lowercase:
            records = records.subset(lowercase_keys(records.keys), None)
        if o.skip_empty:
            keys, kept = drop_empty(records.keys)
            stats.skip("empty", len(records.keys) - len(keys))
            records = records.subset(keys, kept)
        if self.skip_bad:
            keys, kept = apply_key_format_skipping(records.keys, o.key_format)
            stats.skip("bad_key_format", len(records.keys) - len(keys))
            return records.subset(keys, kept)
        try:
            return records.subset(apply_key_format(records.keys, o.key_format), None)
        except KeyValueError as exc:
            raise InputError(f"{locate(records.record_of(exc.index))}: {exc.reason}") from None
