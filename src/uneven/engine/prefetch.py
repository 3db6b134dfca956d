"""Read the batches of an Arrow reader on a thread of their own while the caller reduces the last ones.

The stream plan (engine/stream.py) spends its time in two places after DuckDB's sort: producing the
sorted batches and reducing them with numpy. DuckDB releases the GIL while it produces a batch and
numpy releases it in its loops, so a reader thread filling a small bounded queue overlaps the two.

``prefetched(reader)`` yields the batches in order. An error raised by the reader (an input policy
check failing while the rows stream, out of memory) is raised in the caller's thread, as the same
exception object the serial loop would see. When the caller stops early (its own error, a break),
the thread is told to stop, the queue is emptied so that it is never blocked on a full queue, and
it is joined before ``prefetched`` returns: no thread outlives the call.
"""

from __future__ import annotations

import queue
import threading
from collections.abc import Generator, Iterable

THREAD_NAME = "uneven-stream-reader"
DEPTH = 2  # batches held ahead of the caller: enough to overlap, few enough to keep memory small
_END = object()


class _Failed:
    def __init__(self, error: BaseException):
        self.error = error


def prefetched(reader: Iterable, depth: int = DEPTH) -> Generator:
    """The reader's items in order, read ahead by one thread into a queue of ``depth`` items."""
    items: queue.Queue = queue.Queue(maxsize=depth)
    stop = threading.Event()

    def put(item) -> bool:
        while not stop.is_set():
            try:
                items.put(item, timeout=0.05)
                return True
            except queue.Full:
                continue
        return False

    def pull() -> None:
        try:
            for item in reader:
                if not put(item):
                    return
        except BaseException as e:  # noqa: BLE001 (handed to the caller's thread, raised there)
            put(_Failed(e))
            return
        put(_END)

    thread = threading.Thread(target=pull, name=THREAD_NAME, daemon=True)
    thread.start()
    try:
        while True:
            item = items.get()
            if item is _END:
                return
            if isinstance(item, _Failed):
                raise item.error
            yield item
    finally:
        stop.set()
        while thread.is_alive():  # it may be waiting on a full queue: make room until it sees stop
            try:
                items.get_nowait()
            except queue.Empty:
                pass
            thread.join(0.05)
