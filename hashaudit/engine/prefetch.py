"""Read ahead: produce the next key batches on a background thread while the caller hashes the current one.

Reading (file I/O, decompression, the numba line splitter) and hashing (numba kernels) both release the GIL, so
on two cores they overlap. The queue is bounded, so memory stays at ``depth + 2`` batches whatever the input.
"""

from __future__ import annotations

import queue
import threading
import time
from collections.abc import Iterable, Iterator
from typing import TypeVar

T = TypeVar("T")
_DONE = object()


class _Failure:
    def __init__(self, error: BaseException) -> None:
        self.error = error


def prefetch(items: Iterable[T], depth: int = 2) -> Iterator[T]:
    """Iterate ``items`` on a background thread, at most ``depth`` items ahead.

    An exception raised while producing an item is re-raised in the consumer at that point; when the consumer
    stops early, the producer stops at its next item.
    """
    channel: queue.Queue[object] = queue.Queue(maxsize=depth)
    stop = threading.Event()

    def produce() -> None:
        try:
            for item in items:
                while not stop.is_set():
                    try:
                        channel.put(item, timeout=0.1)
                        break
                    except queue.Full:
                        continue
                if stop.is_set():
                    return
            channel.put(_DONE)
        except BaseException as exc:  # handed to the consumer, which raises it
            channel.put(_Failure(exc))

    worker = threading.Thread(target=produce, name="hashaudit-reader", daemon=True)
    worker.start()
    try:
        while True:
            item = channel.get()
            if item is _DONE:
                return
            if isinstance(item, _Failure):
                raise item.error
            yield item  # type: ignore[misc]
    finally:
        stop.set()
        # Free the queue so a producer blocked on put() sees the stop flag. A producer blocked on its input (a pipe
        # that stays open) cannot be interrupted: it is a daemon thread, so it is left behind rather than waited for.
        deadline = time.monotonic() + 1.0
        while worker.is_alive() and time.monotonic() < deadline:
            try:
                channel.get(timeout=0.05)
            except queue.Empty:
                pass
