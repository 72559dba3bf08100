"""Concurrency, bounded: a reading thread ahead of the checks, and ordered parallel maps.

Parquet decoding and numpy arithmetic release the GIL, so reading batch n+1 while the
rules run on batch n uses the second core.  The queue is bounded, so memory holds at most
``depth`` batches beyond the one being checked.  For ``--workers``, :func:`forked_map`
spreads whole row groups over processes (no GIL), :func:`ordered_map` batches over threads
where a catalogue cannot be cut into pieces.
"""

from __future__ import annotations

import contextlib
import multiprocessing
import os
import pickle
import queue
import signal
import threading
from collections import deque
from collections.abc import Callable, Iterable, Iterator
from concurrent.futures import Future, ThreadPoolExecutor
from typing import BinaryIO, TypeVar

from catcheck.errors import WorkerLostError

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


def can_fork() -> bool:
    """True where worker processes can be forked (Linux, and Unix generally)."""
    return "fork" in multiprocessing.get_all_start_methods()


def forked_map(function: Callable[[int], R], count: int, workers: int) -> Iterator[R]:
    """``function(0), ..., function(count - 1)`` in ``workers`` forked processes, in order.

    Worker ``w`` computes the indices ``w, w + workers, ...`` and sends each result down
    its own pipe; results are read here in index order.  ``function`` and everything it
    reads (profile, rules, group statistics) are inherited by the fork, never pickled;
    only results travel, and a worker waits while its pipe is full, so memory stays
    bounded.  Workers ignore SIGINT and die on SIGTERM (the signal reaches them with the
    whole process group): this process alone decides what an interrupt means, and kills
    and reaps them whenever it stops reading (done, error, interrupt).  A worker that
    dies (out of memory, killed) ends the run with one clear error.  Call it with no
    other thread of ours running: a fork copies only the calling thread.
    """
    children: list[tuple[int, BinaryIO]] = []
    try:
        for worker in range(min(workers, count)):
            read_end, write_end = os.pipe()
            pid = os.fork()
            if pid == 0:  # the worker: compute its indices, send each result, leave
                try:
                    _become_worker()
                    for _, source in children:
                        source.close()
                    os.close(read_end)
                    with os.fdopen(write_end, "wb") as sink:
                        for index in range(worker, count, workers):
                            try:
                                outcome = (True, function(index))
                            except BaseException as exc:  # re-raised by the parent
                                outcome = (False, exc)
                            pickle.dump(outcome, sink)
                            sink.flush()
                            if not outcome[0]:
                                break
                finally:
                    os._exit(0)
            os.close(write_end)
            children.append((pid, os.fdopen(read_end, "rb")))
        for index in range(count):
            ok, value = _receive(children[index % len(children)][1])
            if not ok:
                raise value
            yield value
    finally:
        for pid, source in children:
            _stop(pid)
            source.close()


def _become_worker() -> None:
    """Signals in a worker: Ctrl-C is the parent's to handle, SIGTERM ends it quietly."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    signal.signal(signal.SIGTERM, signal.SIG_DFL)


def _receive(source: BinaryIO) -> tuple[bool, object]:
    try:
        return pickle.load(source)
    except EOFError:
        raise WorkerLostError("a worker process ended unexpectedly (out of memory, or killed)",
                         fix="try fewer --workers or a smaller --batch-rows") from None


def _stop(pid: int) -> None:
    """Kill a child process (if it still runs) and reap it."""
    with contextlib.suppress(ProcessLookupError):
        os.kill(pid, signal.SIGKILL)
    with contextlib.suppress(ChildProcessError):
        os.waitpid(pid, 0)


class ForkedCall:
    """``function()`` run in a forked child process while this one goes on.

    :meth:`result` waits for the child and returns what ``function`` returned (or raises
    what it raised); :meth:`cancel` stops the child when the result is no longer wanted.
    With ``fork`` False, or where processes cannot be forked, ``function`` runs when the
    result is asked for.
    Fork with no other thread of ours running: the child has only the calling thread.
    """

    def __init__(self, function: Callable[[], object], fork: bool = True) -> None:
        self.function = function
        self.pid = 0
        if not (fork and can_fork()):
            return
        read_end, write_end = os.pipe()
        pid = os.fork()
        if pid == 0:  # the child: compute, send, and leave without running our cleanup
            try:
                _become_worker()
                os.close(read_end)
                try:
                    outcome = (True, function())
                except BaseException as exc:  # handed to the parent, which re-raises it
                    outcome = (False, exc)
                with os.fdopen(write_end, "wb") as sink:
                    pickle.dump(outcome, sink)
            finally:
                os._exit(0)
        os.close(write_end)
        self.pid, self.source = pid, os.fdopen(read_end, "rb")

    def result(self) -> object:
        """The child's result (waits for it)."""
        if not self.pid:
            return self.function()
        try:
            ok, value = _receive(self.source)
        finally:
            self.source.close()
            _stop(self.pid)
            self.pid = 0
        if not ok:
            raise value
        return value

    def cancel(self) -> None:
        """Stop the child (no-op once the result was taken)."""
        if self.pid:
            _stop(self.pid)
            self.source.close()
            self.pid = 0
