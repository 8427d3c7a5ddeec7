"""Overlap reading, converting and writing with two helper threads.

Arrow's CSV parser, zlib, SHA-256 and the Parquet writer all release the GIL, so on a
machine with two or more cores the three stages of a conversion can run side by side:

* :class:`Prefetch` runs the reader a few blocks ahead of the converter;
* :class:`BackgroundWriter` hands finished rows to the sink in the order they were given.

Both queues are bounded (a few chunks), so memory stays flat however long the file is. An
exception in a helper thread is raised again in the calling thread, at its next call.
"""

from __future__ import annotations

import queue
import threading
from typing import Callable, Generic, Iterable, Iterator, TypeVar

T = TypeVar("T")

_ITEM, _END, _ERROR = range(3)
_POLL_S = 0.05


class Prefetch(Generic[T]):
    """Iterate over ``source`` in a background thread, at most ``depth`` items ahead."""

    def __init__(self, source: Iterable[T], depth: int = 2, name: str = "countmill-read"):
        self._queue: queue.Queue = queue.Queue(maxsize=max(1, depth))
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._run, args=(source,), name=name, daemon=True)
        self._thread.start()

    def _run(self, source: Iterable[T]) -> None:
        try:
            for item in source:
                if not self._put((_ITEM, item)):
                    return
            self._put((_END, None))
        except BaseException as exc:  # handed to the consumer, raised there
            self._put((_ERROR, exc))

    def _put(self, message) -> bool:
        while not self._stop.is_set():
            try:
                self._queue.put(message, timeout=_POLL_S)
                return True
            except queue.Full:
                continue
        return False

    def __iter__(self) -> Iterator[T]:
        while True:
            kind, item = self._queue.get()
            if kind == _END:
                return
            if kind == _ERROR:
                raise item
            yield item

    def close(self) -> None:
        """Stop the producer and wait for it (call before closing what it reads from)."""
        self._stop.set()
        while self._thread.is_alive():
            try:
                self._queue.get(timeout=_POLL_S)
            except queue.Empty:
                pass
        self._thread.join()


class BackgroundWriter(Generic[T]):
    """Feed items to ``consume`` in a background thread, in order.

    ``start()`` runs in the thread before the first item (e.g. to open the output once its
    provenance is known); ``consume(item)`` is called for every item given to :meth:`put`.
    """

    def __init__(self, start: Callable[[], object], consume: Callable[[object, T], None], depth: int = 2,
                 name: str = "countmill-write"):
        self._start = start
        self._consume = consume
        self._queue: queue.Queue = queue.Queue(maxsize=max(1, depth))
        self._error: BaseException | None = None
        self._stop = threading.Event()
        self.target: object | None = None  # what ``start`` returned
        self._thread = threading.Thread(target=self._run, name=name, daemon=True)
        self._thread.start()

    def _run(self) -> None:
        try:
            self.target = self._start()
            while True:
                kind, item = self._queue.get()
                if kind == _END or self._stop.is_set():
                    return
                self._consume(self.target, item)
        except BaseException as exc:
            self._error = exc
            while not self._stop.is_set():  # keep the producer from blocking on a full queue
                try:
                    if self._queue.get(timeout=_POLL_S)[0] == _END:
                        return
                except queue.Empty:
                    pass

    def _raise_if_failed(self) -> None:
        if self._error is not None:
            raise self._error

    def put(self, item: T) -> None:
        while True:
            self._raise_if_failed()
            try:
                self._queue.put((_ITEM, item), timeout=_POLL_S)
                return
            except queue.Full:
                continue

    def finish(self) -> object:
        """Wait until every item is consumed; return what ``start`` returned."""
        while self._thread.is_alive():
            self._raise_if_failed()
            try:
                self._queue.put((_END, None), timeout=_POLL_S)
                break
            except queue.Full:
                continue
        self._thread.join()
        self._raise_if_failed()
        return self.target

    def stop(self) -> object | None:
        """Abandon the remaining items; wait for the thread; return what ``start`` returned."""
        self._stop.set()
        while self._thread.is_alive():
            while True:
                try:
                    self._queue.get_nowait()
                except queue.Empty:
                    break
            try:
                self._queue.put_nowait((_END, None))
            except queue.Full:
                pass
            self._thread.join(timeout=_POLL_S)
        return self.target


class InThread(Generic[T]):
    """Call ``function()`` in a background thread; :meth:`result` waits for its value."""

    def __init__(self, function: Callable[[], T], name: str = "countmill-task"):
        self._value: T | None = None
        self._error: BaseException | None = None
        self._thread = threading.Thread(target=self._run, args=(function,), name=name, daemon=True)
        self._thread.start()

    def _run(self, function: Callable[[], T]) -> None:
        try:
            self._value = function()
        except BaseException as exc:
            self._error = exc

    def result(self) -> T:
        self._thread.join()
        if self._error is not None:
            raise self._error
        return self._value  # type: ignore[return-value]
