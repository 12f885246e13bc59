"""A progress line on standard error for long reads: keys read, keys per second, and — when the size of the input
is known — the share read and the time left. It appears only on a terminal, after the first second, and is erased
when the audit ends, so short runs and redirected output never see it."""

from __future__ import annotations

import sys
import time
from typing import Any, TextIO


class ProgressLine:
    """Callable with the keys of each batch (the ``progress`` of :func:`hashaudit.engine.sources.audit`).

    Parameters
    ----------
    stream : text file, optional
        Where to draw (default: standard error).
    delay, interval : float
        Seconds before the first drawing, and between two.
    """

    def __init__(self, stream: TextIO | None = None, delay: float = 1.0, interval: float = 0.2) -> None:
        self.stream = stream or sys.stderr
        self.delay, self.interval = delay, interval
        self.started = time.monotonic()
        self.keys = 0
        self._drawn = 0.0
        self._width = 0
        self._streams: list[Any] = []

    def attach(self, streams: list[Any]) -> None:
        """The key streams being read: their ``size_bytes`` and ``stats.bytes_read`` give the share read."""
        self._streams = list(streams)

    def fraction(self) -> float | None:
        """Share of the input read, when every source's size is known."""
        sizes = [getattr(s, "size_bytes", None) for s in self._streams]
        known = [int(size) for size in sizes if size is not None and size > 0]
        if not sizes or len(known) < len(sizes):
            return None
        done = sum(s.stats.bytes_read for s in self._streams)
        return min(1.0, done / sum(known))

    def __call__(self, keys: int) -> None:
        self.keys += keys
        now = time.monotonic()
        if now - self.started < self.delay or now - self._drawn < self.interval:
            return
        self._drawn = now
        self.draw(now)

    def text(self, now: float) -> str:
        """The progress line (without the carriage return)."""
        elapsed = max(now - self.started, 1e-9)
        rate = self.keys / elapsed
        line = f"hashaudit: {self.keys:,} keys read, {rate / 1e6:.1f} M keys/s"
        share = self.fraction()
        if share is not None and share > 0:
            left = elapsed * (1 - share) / share
            bar = "#" * int(share * 20)
            line += f"  [{bar:<20}] {100 * share:.0f} %, about {left:.0f} s left"
        return line

    def draw(self, now: float | None = None) -> None:
        line = self.text(time.monotonic() if now is None else now)
        self._width = max(self._width, len(line))
        self.stream.write("\r" + line.ljust(self._width))
        self.stream.flush()

    def close(self) -> None:
        """Erase the line if one was drawn."""
        if self._width:
            self.stream.write("\r" + " " * self._width + "\r")
            self.stream.flush()
            self._width = 0
