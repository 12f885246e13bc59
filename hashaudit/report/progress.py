"""A progress line on standard error for long reads: keys read, keys per second, and — when the size of the input
is known — the share read and the time left; after the reading, the phase under way (a check group concluding for
one hash function, another read) once it has taken more than :data:`PHASE_DELAY` seconds, with its time so far. It
appears only on a terminal, after the first second, and is erased when the audit ends, so short runs and redirected
output never see it."""

from __future__ import annotations

import sys
import threading
import time
from typing import Any, TextIO

PHASE_DELAY = 2.0
"""Seconds a phase after the reading runs silently before the line names it."""


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
        self._phase: tuple[str, float] | None = None
        self._lock = threading.Lock()
        self._ticker: threading.Thread | None = None
        self._stopped = threading.Event()

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

    def phase(self, label: str) -> None:
        """A phase after the reading begins (``"avalanche checks of xxh3_64"``); the line names it once it has run for
        :data:`PHASE_DELAY` seconds, redrawn by a background ticker while nothing else calls."""
        with self._lock:
            self._phase = (label, time.monotonic())
        if self._ticker is None:
            self._ticker = threading.Thread(target=self._tick, name="hashaudit-progress", daemon=True)
            self._ticker.start()

    def _tick(self) -> None:
        while not self._stopped.wait(self.interval):
            with self._lock:
                current = self._phase
            if current is not None and time.monotonic() - current[1] >= PHASE_DELAY:
                self.draw()

    def text(self, now: float) -> str:
        """The progress line (without the carriage return)."""
        with self._lock:
            current = self._phase
        if current is not None:
            label, since = current
            return f"hashaudit: {self.keys:,} keys read; {label} ({now - since:.0f} s)"
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
        with self._lock:
            self._width = max(self._width, len(line))
            self.stream.write("\r" + line.ljust(self._width))
            self.stream.flush()

    def close(self) -> None:
        """Stop the ticker and erase the line if one was drawn."""
        self._stopped.set()
        if self._ticker is not None:
            self._ticker.join()
        with self._lock:
            if self._width:
                self.stream.write("\r" + " " * self._width + "\r")
                self.stream.flush()
                self._width = 0
