"""Reused memory for the read-only count views the estimators read.

A dense count view is built in fresh memory every time it is read, and writing
into fresh memory costs one page fault per 4 KiB page: at Garnet(20, 4, 5) the
(24, 20, 4, 20) views of one cell fill 75 pages, and the faults cost more than
the scatter that fills them (about 0.25 ms a cell on a virtual machine, a fifth
of a quick check's own work). :class:`ReusedBuffers` hands a buffer out behind
a read-only view and takes it back only once nothing can read it any more: no
view of it, and no view of a view, is alive (a weak reference to the view's
buffer object says so). An estimator that keeps ``batch.counts`` keeps its
buffer; the next block then gets a fresh one. The numbers never change: a
buffer is handed out again only with zeros wherever the next writer does not
write (see :meth:`ReusedBuffers.take`).
"""

from __future__ import annotations

import threading
import weakref
from typing import Any

import numpy as np
from numpy.typing import NDArray

__all__ = ["ReusedBuffers", "COUNT_VIEWS"]


class _Entry:
    __slots__ = ("buffer", "layout", "reader")

    def __init__(self, buffer: NDArray[np.int64], layout: object, reader: weakref.ref[Any]) -> None:
        self.buffer, self.layout, self.reader = buffer, layout, reader


class ReusedBuffers:
    """Flat int64 buffers behind read-only views, reused once no view of them is alive.

    At most ``keep`` buffers and ``limit`` bytes are kept for reuse (a process
    holds them while idle); a larger request, or one made while every kept
    buffer is in use, gets fresh memory. Safe under threads.
    """

    def __init__(self, keep: int = 4, limit: int = 64 * 2**20) -> None:
        self.keep, self.limit = keep, limit
        self._entries: list[_Entry] = []
        self._lock = threading.Lock()

    def take(self, size: int, layout: object) -> tuple[NDArray[np.int64], NDArray[np.int64]]:
        """A writable flat buffer of ``size`` int64 and a read-only view of it.

        ``layout`` names the positions the caller writes (compared by identity,
        for example the index array it scatters with). The buffer is zero
        everywhere, except, when it was last taken with the same ``layout``, at
        the positions that layout writes, which the caller overwrites in full.
        The buffer is free again once the view, and every view made from it,
        is gone.
        """
        with self._lock:
            entry = self._free(size, layout)
            if entry is None:
                buffer = np.zeros(size, dtype=np.int64)
            else:
                buffer = entry.buffer
                if entry.layout is not layout:
                    buffer.fill(0)
            view = np.frombuffer(buffer.data.toreadonly(), dtype=np.int64)
            reader = weakref.ref(view.base)  # the buffer object every view of `view` leads back to
            if entry is not None:
                entry.layout, entry.reader = layout, reader
            elif self._room(size):
                self._entries.append(_Entry(buffer, layout, reader))
        return buffer, view

    def _free(self, size: int, layout: object) -> _Entry | None:
        free = [entry for entry in self._entries if entry.buffer.size == size and entry.reader() is None]
        for entry in free:  # one written in the same layout needs no zeroing
            if entry.layout is layout:
                return entry
        return free[0] if free else None

    def _room(self, size: int) -> bool:
        if 8 * size > self.limit:
            return False
        while self._entries and (len(self._entries) >= self.keep
                                 or 8 * (size + sum(e.buffer.size for e in self._entries)) > self.limit):
            idle = next((e for e in self._entries if e.reader() is None), None)
            if idle is None:
                return False
            self._entries.remove(idle)
        return True


#: The buffers of the dense count views of one process.
COUNT_VIEWS = ReusedBuffers()
