"""Run a producer (reading and converting batches) ahead of its consumer in a thread.

Parquet decoding and numpy arithmetic release the GIL, so reading batch n+1 while the
rules run on batch n uses the second core.  The queue is bounded, so memory holds at most
``depth`` batches beyond the one being checked.
"""

from __future__ import annotations

import queue
import threading
from collections.abc import Iterator
from typing import TypeVar

T = TypeVar("T")

_DONE = object()


def prefetch(items: Iterator[T], depth: int = 2) -> Iterator[T]:
    """Yield ``items`` in order, produced by a background thread up to ``depth`` ahead.

    An exception raised by the producer is re-raised in the consumer at the point where the
    failed item would have arrived.  If the consumer stops early, the producer stops too.
    """
    buffer: queue.Queue = queue.Queue(maxsize=depth)
    stop = threading.Event()

    def produce() -> None:
        try:
            for item in items:
                if not _put(buffer, item, stop):
                    return
        except BaseException as exc:  # handed to the consumer, which re-raises it
            _put(buffer, _Failure(exc), stop)
            return
        _put(buffer, _DONE, stop)

    worker = threading.Thread(target=produce, name="catcheck-prefetch", daemon=True)
    worker.start()
    try:
        while True:
            item = buffer.get()
            if item is _DONE:
                return
            if isinstance(item, _Failure):
                raise item.error
            yield item
    finally:
        stop.set()
        worker.join(timeout=5)


class _Failure:
    def __init__(self, error: BaseException) -> None:
        self.error = error


def _put(buffer: queue.Queue, item: object, stop: threading.Event) -> bool:
    """Put ``item`` unless the consumer has gone; False when it has."""
    while not stop.is_set():
        try:
            buffer.put(item, timeout=0.1)
            return True
        except queue.Full:
            continue
    return False
