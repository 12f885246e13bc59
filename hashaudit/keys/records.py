"""What a source hands on: keys with the numbers of the records they came from, and running counts.

Also how a source's messages speak of what it read. A message names the record (source, line or row, byte
offset, column) and the reason, never the content of a key, a field or a row: key dumps are often personal data
or credentials, and error lines end up in CI logs and tickets. Values the user typed (a column name, a
delimiter, a pattern) may be quoted.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field

import numpy as np

from hashaudit.keys.batch import KeyBatch


@dataclass
class SourceStats:
    """Counts gathered while a source is read.

    Attributes
    ----------
    records : int
        Records read: lines of a text or JSON Lines file, data rows of a delimited file.
    keys : int
        Keys handed on, after every normalisation and skip.
    empty_keys : int
        Of ``keys``, how many are empty (zero bytes).
    skipped : dict of str to int
        Records dropped, by reason: ``pattern_no_match``, ``empty``, ``null``, ``blank_line``; with
        ``on_bad_record="skip"`` also ``bad_json``, ``missing_field``, ``bad_weight``, ``bad_key_format``,
        ``bad_utf8``, ``nul_byte`` and ``ragged_row``.
    bytes_read : int
        Bytes taken from the file or pipe (compressed bytes for a compressed file), for progress against
        ``KeyStream.size_bytes``.
    """

    records: int = 0
    keys: int = 0
    empty_keys: int = 0
    skipped: dict[str, int] = field(default_factory=dict)
    bytes_read: int = 0

    def skip(self, reason: str, count: int = 1) -> None:
        """Count ``count`` records dropped for ``reason``."""
        if count:
            self.skipped[reason] = self.skipped.get(reason, 0) + int(count)


@dataclass(frozen=True)
class RecordBatch:
    """Keys of one batch and where they came from, so an error can name the line or row.

    Parameters
    ----------
    keys : KeyBatch
        The keys.
    first_record : int
        1-based number of the record of key 0.
    records : numpy.ndarray of int64 or None
        Record number of every key when they are not ``first_record, first_record + 1, ...``.
    weights : numpy.ndarray of float64 or None
        Weight of every key, when the source has a weight column.
    """

    keys: KeyBatch
    first_record: int
    records: np.ndarray | None = None
    weights: np.ndarray | None = None

    def record_of(self, index: int) -> int:
        """1-based record number of key ``index``."""
        if self.records is None:
            return self.first_record + int(index)
        return int(self.records[index])

    def subset(self, keys: KeyBatch, kept: np.ndarray | None) -> RecordBatch:
        """The batch after a step that kept only the keys at positions ``kept`` (None: all of them)."""
        if kept is None:
            return RecordBatch(keys, self.first_record, self.records, self.weights)
        weights = None if self.weights is None else self.weights[kept]
        if self.records is None:
            return RecordBatch(keys, self.first_record, self.first_record + kept.astype(np.int64), weights)
        return RecordBatch(keys, self.first_record, self.records[kept], weights)


def weight_problem(number: float) -> str | None:
    """What is wrong with a weight, worded for a message (``"is negative"``), or None for a usable weight.

    Parameters
    ----------
    number : float
        The weight as parsed (NaN when the field is not a number).

    Returns
    -------
    str or None
        ``"is not a number"``, ``"is not finite"``, ``"is negative"`` or None. The value itself is never part of
        it: a weight is not a key, but it is a field of a record.
    """
    if math.isnan(number):
        return "is not a number"
    if math.isinf(number):
        return "is not finite"
    if number < 0:
        return "is negative"
    return None


# pyarrow quotes the text some messages are about: a ragged row ("Expected 4 columns, got 5: <row>"), a CSV field
# it could not convert ("invalid value '<field>'"), a string a cast could not parse ("Failed to parse string:
# '<field>' as a scalar of type double"). The quoted part goes; the words and numbers around it stay.
_ARROW_CONTENT = (
    (re.compile(r"(Expected \d+ columns?, got \d+)\s*:.*", re.DOTALL), r"\1"),
    (re.compile(r"(invalid value)\s*'.*", re.DOTALL), r"\1"),
    (re.compile(r"(Failed to parse string)\s*:\s*'.*' (as a scalar of type \S+)", re.DOTALL), r"\1 \2"),
)


def arrow_reason(error: BaseException) -> str:
    """A pyarrow error's message on one line, without the row or field text pyarrow appends to some of them.

    Parameters
    ----------
    error : BaseException
        Typically a ``pyarrow.ArrowException``.

    Returns
    -------
    str
        The message with whitespace collapsed and any quoted content cut (``"CSV parse error: Expected 4 columns,
        got 5"``); the numbers pyarrow gives (rows, columns) stay.
    """
    text = " ".join(str(error).split()) or type(error).__name__
    for pattern, kept in _ARROW_CONTENT:
        text = pattern.sub(kept, text)
    return text
