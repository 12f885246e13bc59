"""``FirstValues``: the hash values of the first distinct keys in stream order, for the simulated tables.

Simulations replay keys in the order a system would insert them, so they keep the values of the first ``limit``
distinct keys of the input, each with its position in the stream. Hashing lanes see interleaved slices of each
batch; the positions put the values back in stream order when lanes merge, so the kept values are the same
whatever the number of threads, batch size or number of passes.
"""

from __future__ import annotations

import numpy as np

from hashaudit.errors import MergeError


class FirstValues:
    """Accumulator of the first ``limit`` values by stream position.

    Parameters
    ----------
    limit : int
        How many values to keep.
    """

    def __init__(self, limit: int) -> None:
        self.limit = int(limit)
        self._values: list[np.ndarray] = []
        self._positions: list[np.ndarray] = []
        self._held = 0
        self._cutoff = np.iinfo(np.int64).max  # once ``limit`` values are kept: the last position among them

    def update(self, values: np.ndarray, positions: np.ndarray) -> None:
        """Add values with their stream positions (in any order across calls; a later pass over the input may
        bring earlier positions)."""
        if len(values) == 0 or self.limit == 0:
            return
        if positions[0] > self._cutoff:
            return  # increasing within a call: nothing here comes early enough
        keep = positions < self._cutoff
        self._values.append(np.array(values[keep][: self.limit], dtype=np.uint64))
        self._positions.append(np.array(positions[keep][: self.limit], dtype=np.int64))
        self._held += len(self._values[-1])
        if self._held >= 2 * self.limit or (self._cutoff == np.iinfo(np.int64).max and self._held >= self.limit):
            self._compact()

    def _compact(self) -> None:
        values = np.concatenate(self._values)
        positions = np.concatenate(self._positions)
        order = np.argsort(positions, kind="stable")[: self.limit]
        self._values, self._positions = [values[order]], [positions[order]]
        self._held = len(order)
        if self._held == self.limit:
            self._cutoff = int(positions[order[-1]])

    def merge(self, other: FirstValues) -> FirstValues:
        """Keep the first ``limit`` values of both by position."""
        if not isinstance(other, FirstValues) or other.limit != self.limit:
            raise MergeError("cannot merge FirstValues with a different limit")
        self._values += other._values
        self._positions += other._positions
        self._held += other._held
        if self._held:
            self._compact()
        return self

    def values(self) -> np.ndarray:
        """The kept values in stream order."""
        if not self._held:
            return np.zeros(0, dtype=np.uint64)
        self._compact()
        return self._values[0]
