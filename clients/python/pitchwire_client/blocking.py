"""BlockingClient: the client for programs without asyncio (a stimulus program's frame loop, a script).

    with BlockingClient(7350, token=lab_token, fields=["f0_hz"], rate=50) as c:
        for frame in c.frames(timeout=1.0):
            ...
        marker = c.mark("stimulus onset")

Thread contract: the connection lives on an asyncio event loop in a thread of its own ("pitchwire-client"),
which reads the daemon all the time into a bounded buffer; the methods here may be called from any thread
and wait for that loop. When the program takes frames more slowly than they come, the oldest frames are
dropped (counted in dropped_frames), events never: so the daemon never sees a slow client, and the program
always gets the newest frames.
"""

from __future__ import annotations

import asyncio
import concurrent.futures
import threading
import time
from typing import Any, Coroutine, Dict, Iterator, Optional, TypeVar, Union

from . import _buffer
from .band import BandHold
from .client import DEFAULT_PORT, Client, band_limits, band_timeout, feed_tracker, make_tracker
from .clock import ClockOffset
from .errors import ConnectionLost, RequestTimeout
from .messages import Band, Event, Frame, Hello, Marker, Message, Reconnected, Settled, Stats

__all__ = ["BlockingClient"]

T = TypeVar("T")


class BlockingClient:
    """The same connection as Client, for code that is not asyncio; it connects in its constructor.

    Takes Client's keyword arguments; `queue_frames` (256 by default, 1.3 s at 200 frames per second) bounds
    the frames waiting for the program. Use it as a context manager or call close().
    """

    def __init__(self, url_or_port: Union[int, str] = DEFAULT_PORT, *, queue_frames: int = 256,
                 queue_stats: int = 256, **client_kwargs: Any) -> None:
        self._buf = _buffer.ThreadBuffer(queue_frames, queue_stats)
        self._loop = asyncio.new_event_loop()
        self._thread = threading.Thread(target=self._run_loop, name="pitchwire-client", daemon=True)
        self._closed = False
        self._client = Client(url_or_port, _buffer_impl=self._buf, **client_kwargs)
        self._thread.start()
        try:
            self._call(self._client.connect(), None)
        except BaseException:
            self._stop_loop()
            raise

    def _run_loop(self) -> None:
        asyncio.set_event_loop(self._loop)
        try:
            self._loop.run_forever()
        finally:
            tasks = [t for t in asyncio.all_tasks(self._loop) if not t.done()]
            for t in tasks:
                t.cancel()
            if tasks:
                self._loop.run_until_complete(asyncio.gather(*tasks, return_exceptions=True))
            self._loop.close()

    def _call(self, coro: Coroutine[Any, Any, T], timeout: Optional[float]) -> T:
        """Runs `coro` on the client's loop and waits for its result (its exception is raised here)."""
        if not self._thread.is_alive():
            coro.close()
            raise ConnectionLost(f"the client for {self._client.url} is closed", url=self._client.url)
        fut = asyncio.run_coroutine_threadsafe(coro, self._loop)
        try:
            return fut.result(timeout)
        except concurrent.futures.TimeoutError:
            fut.cancel()
            raise RequestTimeout(f"no result from the client's loop within {timeout:g} s") from None

    def _stop_loop(self) -> None:
        if self._thread.is_alive():
            self._loop.call_soon_threadsafe(self._loop.stop)
            self._thread.join(5.0)

    def close(self) -> None:
        """Closes the connection and stops the client's thread; iterators end once the queue is empty."""
        if self._closed:
            return
        self._closed = True
        try:
            self._call(self._client.close(), 5.0)
        finally:
            self._buf.end(None)
            self._stop_loop()

    def __enter__(self) -> "BlockingClient":
        return self

    def __exit__(self, *exc: Any) -> None:
        self.close()

    # ---- state ----------------------------------------------------------------------------------------

    @property
    def url(self) -> str:
        return self._client.url

    @property
    def hello(self) -> Optional[Hello]:
        return self._client.hello

    @property
    def role(self) -> Optional[str]:
        return self._client.role

    @property
    def bands(self) -> Dict[str, Band]:
        return dict(self._client.bands)

    @property
    def subscription(self) -> Optional[Dict[str, Any]]:
        return self._client.subscription

    @property
    def connected(self) -> bool:
        return self._client.connected

    @property
    def dropped_frames(self) -> int:
        """Frames dropped from the queue because the program took them too slowly (the oldest go first)."""
        return self._buf.dropped_frames

    @property
    def dropped_stats(self) -> int:
        return self._buf.dropped_stats

    @property
    def daemon_dropped_frames(self) -> int:
        """Frames the daemon reported it dropped for this connection (dropped_frames events)."""
        return self._client.daemon_dropped_frames

    @property
    def reconnects(self) -> int:
        return self._client.reconnects

    def pending(self) -> Dict[str, int]:
        return self._buf.pending()

    # ---- streams ------------------------------------------------------------------------------------

    def get(self, timeout: Optional[float] = None) -> Message:
        """The next message of any kind; the built-in TimeoutError after `timeout` seconds; ConnectionLost
        when the connection is lost for good or the client is closed."""
        return self._get(_buffer.ALL_LANES, timeout)

    def _get(self, lanes: tuple, timeout: Optional[float]) -> Any:
        try:
            return self._buf.get(lanes, timeout)
        except _buffer.BufferEnded:
            raise ConnectionLost(f"the client for {self.url} is closed", url=self.url) from None

    def _iterate(self, lanes: tuple, timeout: Optional[float]) -> Iterator[Any]:
        while True:
            try:
                yield self._buf.get(lanes, timeout)
            except _buffer.BufferEnded:
                return

    def frames(self, timeout: Optional[float] = None) -> Iterator[Union[Frame, Settled, Reconnected]]:
        """Frames (and Settled ones when subscribed), oldest queued first, and Reconnected notices. Raises
        TimeoutError when none comes for `timeout` seconds (None: waits), ConnectionLost when the connection
        is lost for good; ends after close()."""
        return self._iterate((_buffer.FRAMES,), timeout)

    def events(self, timeout: Optional[float] = None) -> Iterator[Union[Event, Reconnected]]:
        """Events (Marker for markers), never dropped, and Reconnected notices."""
        return self._iterate((_buffer.EVENTS,), timeout)

    def stats(self, timeout: Optional[float] = None) -> Iterator[Union[Stats, Reconnected]]:
        return self._iterate((_buffer.STATS,), timeout)

    def messages(self, timeout: Optional[float] = None) -> Iterator[Message]:
        """Everything in arrival order, each Reconnected notice once."""
        return self._iterate(_buffer.ALL_LANES, timeout)

    def latest_frame(self) -> Optional[Frame]:
        """Takes every queued frame and returns the newest live Frame (None when none was queued): for a
        program that only wants the voice now, once per screen refresh. Notices in the frames stream are
        skipped here; events() still has them."""
        newest = None
        while True:
            try:
                msg = self._buf.get((_buffer.FRAMES,), 0)
            except (TimeoutError, _buffer.BufferEnded):
                return newest
            if isinstance(msg, Frame):
                newest = msg

    # ---- requests -------------------------------------------------------------------------------------

    def _timeout(self, timeout: Optional[float]) -> float:
        # The request's own timeout runs on the loop; this one only guards against a loop that stopped.
        return (self._client.request_timeout_s if timeout is None else timeout) * 2 + 1.0

    def mark(self, label: str, data: Optional[Dict[str, Any]] = None, *, timeout: Optional[float] = None) -> Marker:
        """As Client.mark: returns the daemon's marker event, with `time_s`, `sample` and `wall`."""
        return self._call(self._client.mark(label, data, timeout=timeout), self._timeout(timeout))

    def set_band(self, name: str, low: Union[float, str], high: Union[float, str], *,
                 timeout: Optional[float] = None) -> Band:
        return self._call(self._client.set_band(name, low, high, timeout=timeout), self._timeout(timeout))

    def clear_band(self, name: str, *, timeout: Optional[float] = None) -> None:
        return self._call(self._client.clear_band(name, timeout=timeout), self._timeout(timeout))

    def set_reference(self, reference: Union[float, str], *, timeout: Optional[float] = None) -> float:
        return self._call(self._client.set_reference(reference, timeout=timeout), self._timeout(timeout))

    def start_exercise(self, preset: str, label: Optional[str] = None, *, timeout: Optional[float] = None) -> Event:
        return self._call(self._client.start_exercise(preset, label, timeout=timeout), self._timeout(timeout))

    def end_exercise(self, *, timeout: Optional[float] = None) -> Event:
        return self._call(self._client.end_exercise(timeout=timeout), self._timeout(timeout))

    def subscribe(self, **kwargs: Any) -> Dict[str, Any]:
        return self._call(self._client.subscribe(**kwargs), self._timeout(None))

    def request(self, type_: str, *, timeout: Optional[float] = None, **members: Any) -> Dict[str, Any]:
        return self._call(self._client.request(type_, timeout=timeout, **members), self._timeout(timeout))

    def ping(self, *, timeout: Optional[float] = None) -> float:
        return self._call(self._client.ping(timeout=timeout), self._timeout(timeout))

    # ---- clocks ---------------------------------------------------------------------------------------

    def sync_clock(self, pings: Optional[int] = None, *, fresh: bool = False) -> ClockOffset:
        return self._call(self._client.sync_clock(pings, fresh=fresh), self._timeout(None) * max(1, pings or 12))

    @property
    def clock_offset(self) -> Optional[ClockOffset]:
        # Read on this thread: the estimator's list is replaced, never changed in place, by the loop's thread.
        return self._client.clock_offset

    def wall_time(self, time_s: float) -> float:
        return self._client.wall_time(time_s)

    def audio_time(self, wall: float) -> float:
        return self._client.audio_time(wall)

    # ---- the band trigger -----------------------------------------------------------------------------

    def wait_until_in_band(self, low_hz: Optional[float] = None, high_hz: Optional[float] = None,
                           hold_s: float = 0.5, timeout_s: float = 10.0, *, band: Optional[str] = None,
                           fresh: bool = True) -> BandHold:
        """As Client.wait_until_in_band, in the calling thread: returns a BandHold (`time_s`: the audio time
        the hold was complete) or raises BandTimeout."""
        limits = band_limits(self._client, low_hz, high_hz, band)
        tracker = make_tracker(self._client, limits, hold_s)
        if fresh:
            self._buf.discard_frames()
        deadline = time.monotonic() + timeout_s
        while True:
            left = deadline - time.monotonic()
            if left <= 0:
                raise band_timeout(tracker, limits, hold_s, timeout_s)
            try:
                msg = self._get((_buffer.FRAMES,), left)
            except TimeoutError:
                continue
            hit = feed_tracker(tracker, msg)
            if hit is not None:
                return hit
