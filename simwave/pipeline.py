"""Overlapped block streaming: read ahead and write behind on worker threads.

The readers (libsndfile, h5py, numpy parsing) and the filter core
(scipy.signal.sosfilt) release the GIL for their heavy work, so a reader
thread, the filtering thread and a writer thread run at the same time on a
multi-core machine. Queues are bounded, so memory stays at a few blocks
whatever the length of the file.
"""

from __future__ import annotations

import queue
import threading
from typing import Callable, Iterable, Iterator, TypeVar

T = TypeVar("T")

_DONE = object()


class _Failure:
    def __init__(self, exc: BaseException) -> None:
        self.exc = exc


def read_ahead(items: Iterable[T], depth: int = 2) -> Iterator[T]:
    """Iterate over ``items`` with up to ``depth`` items produced in advance on a thread.

    An exception raised by the producer is re-raised in the consumer at the
    point where the failing item would have arrived. Closing the returned
    generator early stops the producer.
    """
    q: queue.Queue = queue.Queue(maxsize=max(1, depth))
    stop = threading.Event()

    def produce() -> None:
        try:
            for item in items:
                while not stop.is_set():
                    try:
                        q.put(item, timeout=0.1)
                        break
                    except queue.Full:
                        continue
                if stop.is_set():
                    return
            q.put(_DONE)
        except BaseException as exc:  # noqa: BLE001 - handed to the consumer
            q.put(_Failure(exc))

    worker = threading.Thread(target=produce, name="simwave-read-ahead", daemon=True)
    worker.start()
    try:
        while True:
            item = q.get()
            if item is _DONE:
                return
            if isinstance(item, _Failure):
                raise item.exc
            yield item
    finally:
        stop.set()
        # Drain so a producer blocked on put() can see the stop flag and end.
        while worker.is_alive():
            try:
                q.get(timeout=0.05)
            except queue.Empty:
                pass
        worker.join()


class WriteBehind:
    """Call ``write(item)`` for each submitted item on a worker thread, in order.

    ``submit`` blocks when ``depth`` items are waiting, which bounds memory.
    ``close()`` waits for the queue to drain and re-raises the first error the
    writer hit; after an error further submissions raise it at once.
    """

    def __init__(self, write: Callable[[T], None], depth: int = 2) -> None:
        self._write = write
        self._q: queue.Queue = queue.Queue(maxsize=max(1, depth))
        self._error: BaseException | None = None
        self._dropping = False
        self._thread = threading.Thread(target=self._run, name="simwave-write-behind", daemon=True)
        self._thread.start()

    def _run(self) -> None:
        while True:
            item = self._q.get()
            if item is _DONE:
                return
            if self._error is None and not self._dropping:
                try:
                    self._write(item)
                except BaseException as exc:  # noqa: BLE001 - re-raised in submit/close
                    self._error = exc

    def submit(self, item: T) -> None:
        if self._error is not None:
            raise self._error
        self._q.put(item)

    def close(self) -> None:
        self._q.put(_DONE)
        self._thread.join()
        if self._error is not None:
            raise self._error

    def abort(self) -> None:
        """Drop what is still queued and wait for the thread to end (the run failed or was
        stopped: nothing more is written, and no thread outlives the run)."""
        self._dropping = True
        self._q.put(_DONE)
        self._thread.join()


class WriteNow:
    """The same interface as :class:`WriteBehind`, writing on the caller's thread.

    For a run of one block, where starting a thread and handing the block over
    costs more than the overlap can save.
    """

    def __init__(self, write: Callable[[T], None]) -> None:
        self._write = write

    def submit(self, item: T) -> None:
        self._write(item)

    def close(self) -> None:
        pass

    def abort(self) -> None:
        pass
