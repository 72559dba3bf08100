"""Run a producer (reading and converting batches) ahead of its consumer in a thread.

Parquet decoding and numpy arithmetic release the GIL, so reading batch n+1 while the
rules run on batch n uses the second core.  The queue is bounded, so memory holds at most
``depth`` batches beyond the one being checked.
"""

from __future__ import annotations

import queue
import threading
from collections import deque
from collections.abc import Callable, Iterable, Iterator
from concurrent.futures import Future, ThreadPoolExecutor
from typing import TypeVar

T = TypeVar("T")
R = TypeVar("R")

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


def ordered_map(function: Callable[[T], R], items: Iterable[T], workers: int = 1
                ) -> Iterator[R]:
    """``map(function, items)`` on ``workers`` threads, results in input order.

    At most ``workers + 1`` items are in flight, so memory stays bounded however long
    ``items`` is.  With one worker this is plain ``map``.
    """
    if workers <= 1:
        yield from map(function, items)
        return
    pending: deque[Future[R]] = deque()
    with ThreadPoolExecutor(max_workers=workers, thread_name_prefix="catcheck-check") as pool:
        try:
            for item in items:
                pending.append(pool.submit(function, item))
                if len(pending) > workers:
                    yield pending.popleft().result()
            while pending:
                yield pending.popleft().result()
        finally:
            for future in pending:
                future.cancel()
