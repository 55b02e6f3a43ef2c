"""The client's receive buffer: what the connection's reader has received and the application has not yet
taken, in arrival order, in three lanes.

- frames: Frame and Settled, bounded; when full the oldest frame is dropped (the newest wins, as in the
  daemon's own queues) and counted in `dropped_frames`.
- stats: Stats, bounded; the oldest is dropped when full and counted in `dropped_stats` (a statistics
  message is a summary that the next one supersedes).
- events: Event, never dropped.

A client notice (Reconnected) goes into every lane under one arrival number, so that a reader of any lane
sees it once, and a reader of all lanes (messages()) sees it once too. The end of the stream (the client
closed, or the connection lost for good) is a state, not an item: readers get what is queued first.

Thread contract: put() and end() run on the event loop's thread (the connection's reader). AsyncBuffer is
read on that same thread; ThreadBuffer from any other thread (BlockingClient), under its condition variable.
"""

from __future__ import annotations

import asyncio
import collections
import threading
import time
from typing import Deque, Iterable, Optional, Tuple

from .messages import Frame, Reconnected, Settled, Stats

FRAMES, STATS, EVENTS = "frames", "stats", "events"
ALL_LANES = (FRAMES, STATS, EVENTS)

Item = Tuple[int, object]


class _Lanes:
    """The lanes and their accounting; callers hold whatever lock their variant needs."""

    def __init__(self, max_frames: int, max_stats: int) -> None:
        if max_frames < 1 or max_stats < 1:
            raise ValueError("queue sizes must be at least 1")
        self.max = {FRAMES: max_frames, STATS: max_stats}
        self.lanes = {lane: collections.deque() for lane in ALL_LANES}  # type: dict[str, Deque[Item]]
        self.messages = {lane: 0 for lane in ALL_LANES}  # items in each lane that are not notices
        self.counter = 0
        self.dropped = {FRAMES: 0, STATS: 0}
        self.ended = False
        self.end_error: Optional[BaseException] = None

    def put(self, msg: object) -> None:
        self.counter += 1
        item = (self.counter, msg)
        if isinstance(msg, Reconnected):
            for q in self.lanes.values():
                q.append(item)
            return
        lane = FRAMES if isinstance(msg, (Frame, Settled)) else STATS if isinstance(msg, Stats) else EVENTS
        q = self.lanes[lane]
        if lane in self.max and self.messages[lane] >= self.max[lane]:
            # The head is nearly always the oldest message; a notice ahead of it is kept.
            for i, (_, m) in enumerate(q):
                if not isinstance(m, Reconnected):
                    del q[i]
                    break
            self.messages[lane] -= 1
            self.dropped[lane] += 1
        q.append(item)
        self.messages[lane] += 1

    def take(self, lanes: Iterable[str]) -> Optional[object]:
        heads = [(self.lanes[lane][0][0], lane) for lane in lanes if self.lanes[lane]]
        if not heads:
            return None
        first = min(n for n, _ in heads)
        msg = None
        for n, lane in heads:
            if n == first:
                msg = self.lanes[lane].popleft()[1]
                if not isinstance(msg, Reconnected):
                    self.messages[lane] -= 1
        return msg

    def discard_frames(self) -> int:
        q = self.lanes[FRAMES]
        self.lanes[FRAMES] = collections.deque(item for item in q if isinstance(item[1], Reconnected))
        n, self.messages[FRAMES] = self.messages[FRAMES], 0
        return n

    def pending(self) -> dict:
        return dict(self.messages)


class BufferEnded(Exception):
    """Raised by get() once the stream has ended and the lanes asked for are empty (no error: closed)."""


class AsyncBuffer:
    """Read with `await get()` on the event loop's thread."""

    def __init__(self, max_frames: int, max_stats: int) -> None:
        self._l = _Lanes(max_frames, max_stats)
        self._wake: Optional[asyncio.Event] = None

    def _event(self) -> asyncio.Event:
        if self._wake is None:
            self._wake = asyncio.Event()
        return self._wake

    @property
    def dropped_frames(self) -> int:
        return self._l.dropped[FRAMES]

    @property
    def dropped_stats(self) -> int:
        return self._l.dropped[STATS]

    def pending(self) -> dict:
        return self._l.pending()

    def put(self, msg: object) -> None:
        self._l.put(msg)
        self._event().set()

    def end(self, error: Optional[BaseException]) -> None:
        if not self._l.ended:
            self._l.ended, self._l.end_error = True, error
        self._event().set()

    def discard_frames(self) -> int:
        return self._l.discard_frames()

    async def get(self, lanes: Iterable[str] = ALL_LANES, timeout: Optional[float] = None) -> object:
        """The next message of `lanes`; raises asyncio.TimeoutError after `timeout` seconds, the end error (or
        BufferEnded) when the stream has ended and nothing is left."""
        lanes = tuple(lanes)
        deadline = None if timeout is None else time.monotonic() + timeout
        while True:
            msg = self._l.take(lanes)
            if msg is not None:
                return msg
            if self._l.ended:
                raise self._l.end_error if self._l.end_error is not None else BufferEnded()
            ev = self._event()
            ev.clear()
            if deadline is None:
                await ev.wait()
            else:
                left = deadline - time.monotonic()
                if left <= 0:
                    raise asyncio.TimeoutError()
                try:
                    await asyncio.wait_for(ev.wait(), left)
                except asyncio.TimeoutError:
                    pass


class ThreadBuffer:
    """Read with get() from a thread other than the event loop's (BlockingClient)."""

    def __init__(self, max_frames: int, max_stats: int) -> None:
        self._l = _Lanes(max_frames, max_stats)
        self._cond = threading.Condition()

    @property
    def dropped_frames(self) -> int:
        with self._cond:
            return self._l.dropped[FRAMES]

    @property
    def dropped_stats(self) -> int:
        with self._cond:
            return self._l.dropped[STATS]

    def pending(self) -> dict:
        with self._cond:
            return self._l.pending()

    def put(self, msg: object) -> None:
        with self._cond:
            self._l.put(msg)
            self._cond.notify_all()

    def end(self, error: Optional[BaseException]) -> None:
        with self._cond:
            if not self._l.ended:
                self._l.ended, self._l.end_error = True, error
            self._cond.notify_all()

    def discard_frames(self) -> int:
        with self._cond:
            return self._l.discard_frames()

    def get(self, lanes: Iterable[str] = ALL_LANES, timeout: Optional[float] = None) -> object:
        """As AsyncBuffer.get, blocking; raises the built-in TimeoutError after `timeout` seconds."""
        lanes = tuple(lanes)
        deadline = None if timeout is None else time.monotonic() + timeout
        with self._cond:
            while True:
                msg = self._l.take(lanes)
                if msg is not None:
                    return msg
                if self._l.ended:
                    raise self._l.end_error if self._l.end_error is not None else BufferEnded()
                if deadline is None:
                    self._cond.wait()
                else:
                    left = deadline - time.monotonic()
                    if left <= 0:
                        raise TimeoutError()
                    self._cond.wait(left)
