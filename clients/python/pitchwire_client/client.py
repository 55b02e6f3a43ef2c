"""Client: the asyncio client of pitchwired's WebSocket protocol v1 (docs/protocol.md).

    async with Client(7350, token=lab_token, fields=["f0_hz"]) as c:
        async for frame in c.frames():
            ...
        marker = await c.mark("stimulus onset", {"trial": 3})

Thread contract: a Client belongs to the event loop it was connected on; use it from that loop's thread only
(BlockingClient runs one on a thread of its own for programs without asyncio). One task reads the
connection and files what arrives: answers to the requests waiting for them, messages into the receive
buffer (pitchwire_client._buffer) that frames(), stats(), events() and messages() read.
"""

from __future__ import annotations

import asyncio
import collections
import itertools
import json
import logging
import os
import random
import time
import urllib.parse
from typing import Any, AsyncIterator, Callable, Dict, Iterable, List, Optional, Tuple, Union

import websockets
import websockets.exceptions as wsx

from . import _buffer
from .band import BandHold, HoldTracker
from .clock import ClockEstimator, ClockOffset
from .errors import (BandTimeout, ConnectionLost, DaemonUnreachable, HandshakeRefused, PitchwireError,
                     RateLimitedError, RequestTimeout, TokenRefused, request_error)
from .messages import Band, Event, Frame, Hello, Marker, Message, Reconnected, Settled, Stats, parse_stream_message

__all__ = ["Client", "SUBPROTOCOL", "DEFAULT_PORT", "resolve_url"]

log = logging.getLogger("pitchwire_client")

SUBPROTOCOL = "pitchwire.v1"
DEFAULT_PORT = 7350
FIELDS = ("f0_hz", "voicing", "confidence", "level_dbfs")

Rate = Union[None, str, int, float, Dict[str, Any]]


def resolve_url(url_or_port: Union[int, str], token: Optional[str] = None,
                host: str = "127.0.0.1") -> Tuple[str, str, str]:
    """(url to connect to, the same without the token for messages, origin) for a port (7350), "host:port",
    an http:// address of the live page or a ws:// address. A token already in the address's query is kept
    unless `token` is given."""
    if isinstance(url_or_port, int) or (isinstance(url_or_port, str) and url_or_port.isdigit()):
        text = f"ws://{host}:{int(url_or_port)}/ws"
    else:
        text = str(url_or_port)
        if "://" not in text:
            text = "ws://" + text
    parts = urllib.parse.urlsplit(text)
    scheme = {"http": "ws", "https": "wss"}.get(parts.scheme, parts.scheme)
    if scheme not in ("ws", "wss"):
        raise ValueError(f"not a pitchwired address: {url_or_port!r} (a port, host:port, or ws://host:port/ws)")
    if not parts.hostname:
        raise ValueError(f"no host in {url_or_port!r}")
    path = parts.path if parts.path not in ("", "/") else "/ws"
    query = urllib.parse.parse_qsl(parts.query)
    if token is not None:
        query = [(k, v) for k, v in query if k != "token"] + [("token", token)]
    url = urllib.parse.urlunsplit((scheme, parts.netloc, path, urllib.parse.urlencode(query), ""))
    # The token is a secret: messages show the address without it.
    shown_query = "&".join(f"{k}=..." if k == "token" else urllib.parse.urlencode([(k, v)]) for k, v in query)
    shown = urllib.parse.urlunsplit((scheme, parts.netloc, path, shown_query, ""))
    origin = ("http" if scheme == "ws" else "https") + "://" + parts.netloc
    return url, shown, origin


def _rate_json(rate: Rate) -> Union[str, Dict[str, Any]]:
    if rate is None or rate == "hop":
        return "hop"
    if isinstance(rate, dict):
        return dict(rate)
    if isinstance(rate, (int, float)) and not isinstance(rate, bool):
        return {"fps": rate}
    raise ValueError(f"rate: {rate!r}; allowed: 'hop', a number of frames per second, {{'fps': x}} or {{'every': n}}")


class Client:
    """A connection to pitchwired, with its subscription, requests, clock estimate and optional reconnection.

    Arguments:
      url_or_port: the daemon's port (7350), "host:port", or its ws:// (or live page's http://) address.
      token: the lab or supervisor token (the files lab.token and supervisor.token in the daemon's token
        folder); none for the observer role, which may subscribe and ping but not mark.
      fields: frame fields to subscribe to (default all: f0_hz, voicing, confidence, level_dbfs).
      settled: also receive Settled corrections.
      rate: "hop" (every frame, 200 per second at 5 ms hops), a number of frames per second at most, or
        {"every": n} / {"fps": x} as in the protocol.
      subscribe: False to receive no frames (statistics and events still come).
      reconnect: reconnect when the connection is lost, with backoff from `reconnect_initial_s` doubling up
        to `reconnect_max_s`, giving up after `reconnect_give_up_s` (None: never); each time the client
        subscribes again and puts a Reconnected notice in every stream.
      queue_frames, queue_stats: bounds of the receive buffer (the oldest is dropped beyond them, counted in
        dropped_frames and dropped_stats); events are never dropped.
      open_timeout_s: for the connection and the daemon's hello; request_timeout_s: for each request's answer.
      clock: the local clock the offset is estimated against (seconds, a float); time.time by default (so
        that wall_time() is comparable with the markers' `wall`), or time.monotonic, time.perf_counter, or a
        stimulus package's own clock.
      clock_pings: pings per clock estimate (3 ms apart on average; 0 to estimate nothing at connect);
        clock_interval_s: estimate again this often while connected (None: only at connect).
      origin: the Origin header; by default that of the daemon's own page (http://host:port), which the
        daemon accepts.
    """

    def __init__(self, url_or_port: Union[int, str] = DEFAULT_PORT, *, token: Optional[str] = None,
                 fields: Optional[Iterable[str]] = None, settled: bool = False, rate: Rate = "hop",
                 subscribe: bool = True, reconnect: bool = False, reconnect_initial_s: float = 0.1,
                 reconnect_max_s: float = 2.0, reconnect_give_up_s: Optional[float] = None,
                 queue_frames: int = 1024, queue_stats: int = 256, open_timeout_s: float = 5.0,
                 request_timeout_s: float = 5.0, clock: Callable[[], float] = time.time, clock_pings: int = 12,
                 clock_interval_s: Optional[float] = 30.0, host: str = "127.0.0.1", origin: Optional[str] = None,
                 _buffer_impl: Optional[Any] = None) -> None:
        self._url, self.url, default_origin = resolve_url(url_or_port, token, host)
        self._origin = origin if origin is not None else default_origin
        self._token_given = token is not None or "token=" in urllib.parse.urlsplit(self._url).query
        self._sub: Optional[Dict[str, Any]] = None
        if subscribe:
            self._sub = {"rate": _rate_json(rate), "fields": list(FIELDS if fields is None else fields),
                         "settled": bool(settled)}
            bad = [f for f in self._sub["fields"] if f not in FIELDS]
            if bad:
                raise ValueError(f"fields: {bad}; allowed: {list(FIELDS)}")
        self.reconnect = reconnect
        self.reconnect_initial_s, self.reconnect_max_s = reconnect_initial_s, reconnect_max_s
        self.reconnect_give_up_s = reconnect_give_up_s
        self.open_timeout_s, self.request_timeout_s = open_timeout_s, request_timeout_s
        self.clock = clock
        self.clock_pings, self.clock_interval_s = clock_pings, clock_interval_s
        self._buf = _buffer_impl if _buffer_impl is not None else _buffer.AsyncBuffer(queue_frames, queue_stats)

        self.hello: Optional[Hello] = None
        self.subscription: Optional[Dict[str, Any]] = None  # the daemon's subscribe result: every, fps, fields, settled
        self.bands: Dict[str, Band] = {}
        self.daemon_dropped_frames = 0  # told by the daemon (dropped_frames events): lost before reaching us
        self.reconnects = 0
        self.last_time_s: Optional[float] = None  # the newest audio time seen
        self._clock = ClockEstimator()
        self._ws: Optional[Any] = None
        self._state = "new"  # new, connecting, open, reconnecting, closed
        self._reader: Optional[asyncio.Task] = None
        self._tasks: List[asyncio.Task] = []
        self._pending: "collections.OrderedDict[str, Tuple[asyncio.Future, str]]" = collections.OrderedDict()
        self._waiters: List[Tuple[Callable[[Event], bool], asyncio.Future]] = []
        self._ids = itertools.count(1)
        self._id_prefix = "py" + os.urandom(3).hex() + "-"
        self._lost_at: Optional[float] = None
        self._held: Optional[List[Message]] = None  # while reconnecting: messages of the new connection

    # ---- lifecycle ------------------------------------------------------------------------------------

    async def __aenter__(self) -> "Client":
        await self.connect()
        return self

    async def __aexit__(self, *exc: Any) -> None:
        await self.close()

    async def connect(self) -> "Client":
        """Connects, reads hello, subscribes and estimates the clock offset. Raises DaemonUnreachable when
        nothing answers, TokenRefused for a token the daemon does not know, HandshakeRefused for other
        refusals. The first connection is not retried, even with reconnect=True."""
        if self._state != "new":
            raise RuntimeError("connect() once per Client")
        self._state = "connecting"
        try:
            await self._establish()
        except BaseException:
            self._state = "closed"
            raise
        self._state = "open"
        if self.clock_interval_s:
            self._tasks.append(asyncio.ensure_future(self._clock_loop()))
        return self

    async def close(self) -> None:
        """Closes the connection; iterators end (StopAsyncIteration) once they have taken what was queued."""
        if self._state == "closed":
            return
        self._state = "closed"
        for t in self._tasks:
            t.cancel()
        ws = self._ws
        if ws is not None:
            try:
                await asyncio.wait_for(ws.close(), 2.0)
            except Exception:  # noqa: BLE001 - closing anyway
                pass
        if self._reader is not None:
            self._reader.cancel()
        for t in [*self._tasks, *([self._reader] if self._reader else [])]:
            try:
                await t
            except BaseException:  # noqa: BLE001 - cancelled or failed: nothing to report at close
                pass
        self._fail_pending(ConnectionLost("the client was closed", url=self.url))
        self._buf.end(None)

    @property
    def connected(self) -> bool:
        return self._state == "open"

    @property
    def role(self) -> Optional[str]:
        return self.hello.role if self.hello else None

    @property
    def dropped_frames(self) -> int:
        """Frames dropped from this client's receive buffer because the application took them too slowly."""
        return self._buf.dropped_frames

    @property
    def dropped_stats(self) -> int:
        return self._buf.dropped_stats

    def pending(self) -> Dict[str, int]:
        """Messages waiting in the receive buffer, per stream (frames, stats, events)."""
        return self._buf.pending()

    async def _open_socket(self) -> Any:
        try:
            ws = await websockets.connect(self._url, subprotocols=[SUBPROTOCOL], origin=self._origin,
                                          open_timeout=self.open_timeout_s, compression=None, max_size=1 << 22,
                                          max_queue=256)
        except wsx.InvalidStatusCode as e:
            status = e.status_code
            if status == 403 and self._token_given:
                raise TokenRefused(f"pitchwired at {self.url} refused the token (HTTP 403): it is not this daemon's "
                                   "lab or supervisor token (read lab.token or supervisor.token in its token folder)",
                                   url=self.url, status=status) from None
            raise HandshakeRefused(f"pitchwired at {self.url} refused the connection (HTTP {status}); it refuses a "
                                   "foreign Origin or Host, a client without the subprotocol pitchwire.v1, and "
                                   "clients beyond max_clients", url=self.url, status=status) from None
        except wsx.InvalidHandshake as e:
            raise HandshakeRefused(f"the WebSocket handshake with {self.url} failed: {e}", url=self.url) from None
        except asyncio.TimeoutError:
            raise DaemonUnreachable(f"no WebSocket handshake from {self.url} within {self.open_timeout_s:g} s: "
                                    "is pitchwired running there?", url=self.url) from None
        except OSError as e:
            raise DaemonUnreachable(f"cannot connect to pitchwired at {self.url} ({e.strerror or e}): is it running, "
                                    "on this port? (start it with `pitchwired --input demo`, which prints its "
                                    "address)", url=self.url) from None
        if ws.subprotocol != SUBPROTOCOL:
            await ws.close()
            raise HandshakeRefused(f"{self.url} did not accept the subprotocol {SUBPROTOCOL}", url=self.url)
        return ws

    async def _establish(self, fresh_clock: bool = False) -> None:
        """One connection: socket, hello, the reader, subscription, clock. Raises on any failure (and leaves
        no reader running)."""
        ws = await self._open_socket()
        try:
            first = json.loads(await asyncio.wait_for(ws.recv(), self.open_timeout_s))
        except (asyncio.TimeoutError, wsx.ConnectionClosed, ValueError) as e:
            await ws.close()
            raise ConnectionLost(f"no hello from {self.url}: {str(e) or type(e).__name__}", url=self.url) from None
        if not isinstance(first, dict) or first.get("type") != "hello":
            await ws.close()
            raise HandshakeRefused(f"{self.url} did not begin with hello: is it pitchwired?", url=self.url)
        self.hello = Hello.from_json(first)
        self.bands = {b.name: b for b in self.hello.bands}
        self._ws = ws
        self._reader = asyncio.ensure_future(self._read(ws))
        try:
            if self._sub is not None:
                ack = await self.request("subscribe", **self._sub)
                self.subscription = ack.get("result", {})
            if self.clock_pings > 0:
                await self.sync_clock(self.clock_pings, fresh=fresh_clock)
        except BaseException:
            self._reader.cancel()
            await ws.close()
            raise

    # ---- reading --------------------------------------------------------------------------------------

    async def _read(self, ws: Any) -> None:
        try:
            async for raw in ws:
                self._dispatch(json.loads(raw), self.clock())
        except wsx.ConnectionClosed:
            pass
        except asyncio.CancelledError:
            raise
        except Exception as e:  # noqa: BLE001 - a bug or bad JSON: the connection is unusable either way
            log.warning("pitchwire_client: reading %s failed: %r", self.url, e)
            await ws.close()
        self._lost(ws)

    def _dispatch(self, j: Dict[str, Any], now: float) -> None:
        t = j.get("type")
        if t in ("ack", "pong", "error"):
            self._answer(j)
            return
        msg = parse_stream_message(j, now)
        if msg is None:
            return  # a message type this client does not know (protocol v1 may add some)
        time_s = getattr(msg, "time_s", None)
        if time_s is not None and (self.last_time_s is None or time_s > self.last_time_s):
            self.last_time_s = time_s
        if isinstance(msg, Event):
            self._on_event(msg)
        if self._held is not None:
            self._held.append(msg)
        else:
            self._buf.put(msg)

    def _on_event(self, ev: Event) -> None:
        if ev.kind == "band_changed":
            self.bands = {b.name: b for b in (Band.from_json(x) for x in ev.payload.get("bands", []))}
        elif ev.kind == "dropped_frames":
            self.daemon_dropped_frames += int(ev.payload.get("count", 0))
        for pred, fut in list(self._waiters):
            if not fut.done() and pred(ev):
                fut.set_result(ev)

    def _answer(self, j: Dict[str, Any]) -> None:
        rid = j.get("id")
        if rid is None:
            # Refused before it was parsed (rate_limited): the daemon answers each connection's requests in
            # order, so this answers the oldest request still waiting.
            if not self._pending:
                log.warning("pitchwire_client: error with no request waiting: %s", j)
                return
            rid = next(iter(self._pending))
        entry = self._pending.pop(rid, None)
        if entry is None:
            return  # answered after its request timed out
        fut, req = entry
        if fut.done():
            return
        if j.get("type") == "error":
            fut.set_exception(request_error(str(j.get("code")), str(j.get("message", "")), request=req, request_id=rid))
        else:
            fut.set_result(j)

    def _fail_pending(self, exc: BaseException) -> None:
        for fut, _ in self._pending.values():
            if not fut.done():
                fut.set_exception(exc)
        self._pending.clear()
        for _, fut in self._waiters:
            if not fut.done():
                fut.set_exception(exc)

    def _lost(self, ws: Any) -> None:
        """The reader of `ws` ended."""
        code, reason = getattr(ws, "close_code", None), getattr(ws, "close_reason", "") or ""
        what = {1001: "the daemon stopped (1001, going away)", 1008: f"the daemon closed it (1008, policy: {reason})",
                1009: "the daemon closed it (1009, message too big)"}.get(code, f"closed ({code} {reason})".strip())
        err = ConnectionLost(f"connection to {self.url} lost: {what}", url=self.url, close_code=code, close_reason=reason)
        if ws is not self._ws:
            return  # an earlier connection
        self._fail_pending(err)
        if self._state != "open":
            return  # a connection being set up (its _establish raises) or the client closing
        self._lost_at = self.clock()
        if self.reconnect:
            self._state = "reconnecting"
            self._tasks.append(asyncio.ensure_future(self._reconnect(code)))
        else:
            self._state = "closed"
            self._buf.end(err)

    async def _reconnect(self, close_code: Optional[int]) -> None:
        lost_at = self._lost_at if self._lost_at is not None else self.clock()
        last_time = self.last_time_s
        old_clock = self._clock.estimate()
        started = time.monotonic()
        delay = self.reconnect_initial_s
        attempts = 0
        try:
            while self._state == "reconnecting":
                await asyncio.sleep(delay * (0.8 + 0.4 * random.random()))
                if self._state != "reconnecting":
                    return
                attempts += 1
                # What the new connection sends before it is ready waits here, behind the notice.
                self._held = []
                try:
                    await self._establish(fresh_clock=True)
                except TokenRefused as e:
                    # The daemon came back with new tokens: retrying will not help.
                    self._state = "closed"
                    self._buf.end(e)
                    return
                except (PitchwireError, OSError) as e:
                    log.info("pitchwire_client: reconnecting to %s, attempt %d: %s", self.url, attempts, e)
                    if self.reconnect_give_up_s is not None and time.monotonic() - started >= self.reconnect_give_up_s:
                        self._state = "closed"
                        self._buf.end(ConnectionLost(
                            f"connection to {self.url} lost and not back after {attempts} attempts in "
                            f"{self.reconnect_give_up_s:g} s: {e.args[0] if e.args else e}", url=self.url,
                            close_code=close_code))
                        return
                    delay = min(self.reconnect_max_s, delay * 2)
                    continue
                if self._state != "reconnecting":
                    return
                new_clock = await self._audio_clock_restarted(old_clock, last_time)
                self.reconnects += 1
                self._state = "open"
                assert self.hello is not None
                self._buf.put(Reconnected(lost_at=lost_at, back_at=self.clock(), attempts=attempts,
                                          new_audio_clock=new_clock, hello=self.hello, close_code=close_code))
                for msg in self._held:
                    self._buf.put(msg)
                self._held = None
                if self._ws is not None and self._reader is not None and self._reader.done():
                    self._lost(self._ws)  # lost again while we were finishing
                return
        finally:
            self._held = None

    async def _audio_clock_restarted(self, old: Optional[ClockOffset], last_time: Optional[float]) -> bool:
        """Whether the daemon's audio clock began again (the daemon restarted) while we were away: its offset
        to our clock moved (a daemon that kept running keeps it, within its drift), or, without estimates, the
        audio clock is now behind the newest time we had seen."""
        new = self._clock.estimate()
        if old is not None and new is not None:
            restarted = abs(new.offset_s - old.offset_s) > 0.05 + old.uncertainty_s + new.uncertainty_s
        else:
            try:
                now_audio = await self.ping()
            except PitchwireError:
                return False
            restarted = last_time is not None and now_audio < last_time
        if restarted:
            self.last_time_s = None
        return restarted

    # ---- streams ------------------------------------------------------------------------------------

    async def _iterate(self, lanes: Tuple[str, ...]) -> AsyncIterator[Any]:
        while True:
            try:
                yield await self._buf.get(lanes)
            except _buffer.BufferEnded:
                return

    def frames(self) -> AsyncIterator[Union[Frame, Settled, Reconnected]]:
        """Frame objects (and Settled ones when subscribed with settled=True), oldest first, and the
        Reconnected notices. Raises ConnectionLost when the connection is lost for good; ends after close()."""
        return self._iterate((_buffer.FRAMES,))

    def events(self) -> AsyncIterator[Union[Event, Reconnected]]:
        """Event objects (Marker for markers), never dropped, and the Reconnected notices."""
        return self._iterate((_buffer.EVENTS,))

    def stats(self) -> AsyncIterator[Union[Stats, Reconnected]]:
        """Stats objects (every stats_interval_s of audio, 0.5 s by default) and the Reconnected notices."""
        return self._iterate((_buffer.STATS,))

    def messages(self) -> AsyncIterator[Message]:
        """Everything in arrival order: Frame, Settled, Stats, Event, Reconnected (each notice once)."""
        return self._iterate(_buffer.ALL_LANES)

    async def next_message(self, timeout: Optional[float] = None) -> Message:
        """The next message of any kind; asyncio.TimeoutError after `timeout` seconds."""
        return await self._buf.get(_buffer.ALL_LANES, timeout)

    # ---- requests -------------------------------------------------------------------------------------

    def _new_id(self, kind: str) -> str:
        return f"{self._id_prefix}{kind[0]}{next(self._ids)}"

    async def request(self, type_: str, *, timeout: Optional[float] = None, request_id: Optional[str] = None,
                      **members: Any) -> Dict[str, Any]:
        """Sends request `type_` with `members` and returns the daemon's answer (`ack` or `pong`) as JSON.
        Raises RequestError (ForbiddenError, RateLimitedError...) for an `error` answer, RequestTimeout after
        `timeout` (request_timeout_s by default), ConnectionLost when not connected or lost meanwhile."""
        ws = self._ws
        if ws is None or self._state in ("new", "closed"):
            raise ConnectionLost(f"not connected to {self.url}", url=self.url)
        rid = request_id or self._new_id(type_)
        fut: asyncio.Future = asyncio.get_running_loop().create_future()
        self._pending[rid] = (fut, type_)
        try:
            await ws.send(json.dumps({"type": type_, "id": rid, **members}, separators=(",", ":")))
        except wsx.ConnectionClosed:
            self._pending.pop(rid, None)
            again = " (reconnecting)" if self._state == "reconnecting" else ""
            raise ConnectionLost(f"connection to {self.url} lost{again}: {type_} not sent", url=self.url) from None
        try:
            return await asyncio.wait_for(fut, self.request_timeout_s if timeout is None else timeout)
        except asyncio.TimeoutError:
            self._pending.pop(rid, None)
            raise RequestTimeout(f"{type_} {rid}: no answer from {self.url} within "
                                 f"{self.request_timeout_s if timeout is None else timeout:g} s") from None

    async def _request_then_event(self, type_: str, pred: Callable[[str, Event], bool],
                                  timeout: Optional[float], **members: Any) -> Tuple[Dict[str, Any], Event]:
        """A request whose effect comes back as an event (to every connection): waits for both."""
        rid = self._new_id(type_)
        fut: asyncio.Future = asyncio.get_running_loop().create_future()
        waiter = (lambda ev: pred(rid, ev), fut)
        self._waiters.append(waiter)
        try:
            ack = await self.request(type_, timeout=timeout, request_id=rid, **members)
            t = self.request_timeout_s if timeout is None else timeout
            try:
                ev = await asyncio.wait_for(fut, t)
            except asyncio.TimeoutError:
                raise RequestTimeout(f"{type_} {rid}: acknowledged, but its event did not arrive within {t:g} s") from None
            return ack, ev
        finally:
            self._waiters.remove(waiter)
            if fut.done() and not fut.cancelled():
                fut.exception()  # retrieved: a failure here was already raised through the request
            else:
                fut.cancel()

    async def mark(self, label: str, data: Optional[Dict[str, Any]] = None, *,
                   timeout: Optional[float] = None) -> Marker:
        """Adds a marker at the daemon's audio clock when it arrives, and returns the daemon's `marker` event:
        `time_s` (audio clock), `sample` (input sample index), `wall` (the daemon's UTC wall clock), `label`,
        `data`. Needs the lab or supervisor token (ForbiddenError otherwise). `label`: 1 to 200 characters,
        one line; `data`: a JSON object of at most 4096 bytes."""
        members: Dict[str, Any] = {"label": label}
        if data is not None:
            members["data"] = data
        _, ev = await self._request_then_event(
            "mark", lambda rid, ev: ev.kind == "marker" and ev.payload.get("id") == rid, timeout, **members)
        assert isinstance(ev, Marker)
        return ev

    async def set_band(self, name: str, low: Union[float, str], high: Union[float, str], *,
                       timeout: Optional[float] = None) -> Band:
        """Sets (or replaces) target band `name`; `low`/`high` in Hz, as note names ("A3") or semitones re the
        reference ("-2st"). Supervisor only. Returns the band as the daemon decoded it, in Hz."""
        _, ev = await self._request_then_event(
            "set_band", lambda rid, ev: ev.kind == "band_changed" and ev.payload.get("name") == name
            and ev.by is not None, timeout, name=name, low=low, high=high)
        for b in ev.payload.get("bands", []):
            if b.get("name") == name:
                return Band.from_json(b)
        raise PitchwireError(f"band_changed after set_band {name!r} does not list the band", code="internal")

    async def clear_band(self, name: str, *, timeout: Optional[float] = None) -> None:
        """Removes target band `name` (supervisor only; RequestError with code unknown_band when there is none)."""
        await self.request("clear_band", timeout=timeout, name=name)

    async def set_reference(self, reference: Union[float, str], *, timeout: Optional[float] = None) -> float:
        """Sets the reference pitch (Hz, note name, or "+2st"); supervisor only. Returns it in Hz."""
        _, ev = await self._request_then_event(
            "set_reference", lambda rid, ev: ev.kind == "reference_changed" and ev.by is not None, timeout,
            reference=reference)
        return float(ev.payload["reference_hz"])

    async def start_exercise(self, preset: str, label: Optional[str] = None, *,
                             timeout: Optional[float] = None) -> Event:
        """Starts an exercise preset of the daemon's configuration (supervisor only); returns exercise_started."""
        members: Dict[str, Any] = {"preset": preset}
        if label is not None:
            members["label"] = label
        _, ev = await self._request_then_event(
            "start_exercise", lambda rid, ev: ev.kind == "exercise_started" and ev.by is not None, timeout, **members)
        return ev

    async def end_exercise(self, *, timeout: Optional[float] = None) -> Event:
        """Ends the running exercise (supervisor only); returns exercise_ended with its summary."""
        _, ev = await self._request_then_event(
            "end_exercise", lambda rid, ev: ev.kind == "exercise_ended" and ev.by is not None, timeout)
        return ev

    async def subscribe(self, *, fields: Optional[Iterable[str]] = None, settled: Optional[bool] = None,
                        rate: Rate = None) -> Dict[str, Any]:
        """Changes the subscription (members left None keep their value); it is also the one renewed after a
        reconnection. Returns the daemon's result: every, fps, fields, settled."""
        sub = dict(self._sub or {"rate": "hop", "fields": list(FIELDS), "settled": False})
        if fields is not None:
            sub["fields"] = list(fields)
        if settled is not None:
            sub["settled"] = bool(settled)
        if rate is not None:
            sub["rate"] = _rate_json(rate)
        ack = await self.request("subscribe", **sub)
        self._sub = sub
        self.subscription = ack.get("result", {})
        return self.subscription

    async def ping(self, *, timeout: Optional[float] = None) -> float:
        """The daemon's audio clock now (pong.time_s)."""
        return float((await self.request("ping", timeout=timeout))["time_s"])

    # ---- clocks ---------------------------------------------------------------------------------------

    async def sync_clock(self, pings: Optional[int] = None, spacing_s: float = 0.003, *,
                         fresh: bool = False) -> ClockOffset:
        """Pings the daemon `pings` times (clock_pings by default), `spacing_s` apart plus a random part so
        that they fall at different points of the audio clock's blocks, and returns the new estimate
        (pitchwire_client.clock) from these and the round trips of the last minute (with `fresh`: from
        these alone). Each ping counts against the daemon's request rate (20 per second on average, bursts
        of 40, by default)."""
        n = max(1, self.clock_pings if pings is None else pings)
        got: List[Tuple[float, float, float]] = []
        tries = 0
        while len(got) < n:
            if tries:
                await asyncio.sleep(spacing_s * (0.5 + random.random()))
            tries += 1
            t_send = self.clock()
            try:
                audio = await self.ping()
            except RateLimitedError:
                if tries >= 3 * n:
                    raise
                await asyncio.sleep(0.06)  # the daemon's bucket refills at requests_per_s (20 per s by default)
                continue
            got.append((t_send, self.clock(), audio))
        # Added together, so that a failed attempt leaves the previous estimate as it was.
        if fresh:
            self._clock.clear()
        for sample in got:
            self._clock.add(*sample)
        est = self._clock.estimate()
        assert est is not None
        return est

    async def _clock_loop(self) -> None:
        while True:
            await asyncio.sleep(self.clock_interval_s or 30.0)
            if self._state == "open":
                try:
                    await self.sync_clock()
                except PitchwireError as e:
                    log.info("pitchwire_client: clock estimate failed: %s", e)

    @property
    def clock_offset(self) -> Optional[ClockOffset]:
        """The current estimate (local clock = audio clock + offset_s), or None before any ping."""
        return self._clock.estimate()

    def _offset(self) -> ClockOffset:
        est = self._clock.estimate()
        if est is None:
            raise PitchwireError("no clock estimate yet: call sync_clock() (or connect with clock_pings > 0)",
                                 code="no_clock")
        return est

    def wall_time(self, time_s: float) -> float:
        """The local clock (`clock`, time.time by default) at audio time `time_s`."""
        return self._offset().wall_time(time_s)

    def audio_time(self, wall: float) -> float:
        """The audio time at local clock `wall`."""
        return self._offset().audio_time(wall)

    # ---- the band trigger -----------------------------------------------------------------------------

    def _band_limits(self, low_hz: Optional[float], high_hz: Optional[float],
                     band: Optional[str]) -> Callable[[], Optional[Tuple[float, float]]]:
        return band_limits(self, low_hz, high_hz, band)

    async def wait_until_in_band(self, low_hz: Optional[float] = None, high_hz: Optional[float] = None,
                                 hold_s: float = 0.5, timeout_s: float = 10.0, *, band: Optional[str] = None,
                                 fresh: bool = True) -> BandHold:
        """Returns once the live voice has been voiced and inside [low_hz, high_hz] (or the target band named
        `band`, followed if the supervisor changes it) continuously for `hold_s` seconds of audio
        (pitchwire_client.band). Returns a BandHold whose `time_s` is the audio time the hold was complete.
        Raises BandTimeout (a TimeoutError) when that has not happened within `timeout_s` seconds on the local
        monotonic clock. Reads, and so takes, the frames stream meanwhile; with `fresh` (the default) the
        frames already queued are discarded first, so that only voice after the call counts."""
        limits = self._band_limits(low_hz, high_hz, band)
        tracker = self._tracker(limits, hold_s)
        if fresh:
            self._buf.discard_frames()
        deadline = time.monotonic() + timeout_s
        while True:
            left = deadline - time.monotonic()
            if left <= 0:
                raise band_timeout(tracker, limits, hold_s, timeout_s)
            try:
                msg = await self._buf.get((_buffer.FRAMES,), left)
            except asyncio.TimeoutError:
                continue
            except _buffer.BufferEnded:
                raise ConnectionLost("the client was closed while waiting for the band", url=self.url) from None
            hit = feed_tracker(tracker, msg)
            if hit is not None:
                return hit

    def _tracker(self, limits: Callable[[], Optional[Tuple[float, float]]], hold_s: float) -> HoldTracker:
        return make_tracker(self, limits, hold_s)


# Shared with BlockingClient ------------------------------------------------------------------------------

def band_limits(client: Client, low_hz: Optional[float], high_hz: Optional[float],
                band: Optional[str]) -> Callable[[], Optional[Tuple[float, float]]]:
    if band is not None:
        if low_hz is not None or high_hz is not None:
            raise ValueError("give either low_hz and high_hz or band, not both")
        if band not in client.bands:
            raise ValueError(f"no target band {band!r}; the daemon has {sorted(client.bands) or 'none'}")

        def named() -> Optional[Tuple[float, float]]:
            b = client.bands.get(band)
            return (b.low_hz, b.high_hz) if b else None
        return named
    if low_hz is None or high_hz is None or not low_hz < high_hz:
        raise ValueError(f"need low_hz < high_hz (got {low_hz}, {high_hz}) or a band name")
    fixed = (float(low_hz), float(high_hz))
    return lambda: fixed


def make_tracker(client: Client, limits: Callable[[], Optional[Tuple[float, float]]], hold_s: float) -> HoldTracker:
    sub = client.subscription or {}
    if client._sub is None or "f0_hz" not in sub.get("fields", []):
        raise ValueError("wait_until_in_band needs a subscription with the field f0_hz")
    return HoldTracker(limits, hold_s, int(sub.get("every", 1)))


def feed_tracker(tracker: HoldTracker, msg: object) -> Optional[BandHold]:
    if isinstance(msg, Frame):
        return tracker.feed(msg)
    if isinstance(msg, Reconnected):
        tracker.gap()
    return None


def band_timeout(tracker: HoldTracker, limits: Callable[[], Optional[Tuple[float, float]]], hold_s: float,
                 timeout_s: float) -> BandTimeout:
    lim = limits()
    where = f"{lim[0]:g}-{lim[1]:g} Hz" if lim else "the band (gone)"
    return BandTimeout(f"the voice was not held inside {where} for {hold_s:g} s within {timeout_s:g} s "
                       f"(longest stretch {tracker.longest_s:.3f} s; {tracker.inside_frames} of {tracker.frames} "
                       "frames inside)", longest_hold_s=tracker.longest_s, frames=tracker.frames,
                       inside_frames=tracker.inside_frames)
