#!/usr/bin/env python3
"""Protocol v1 against the running daemon: starts pitchwired on its demo voice and checks the wire.

Starts `pitchwired --input demo --port 0 --config <tmp>/pitchwired.jsonc` (tokens and log in a fresh
temporary folder, a small frame queue, slow_client_s 2), then connects WebSocket and plain HTTP clients to it and checks:
  - the handshake: hello first, the role each token gives (query string or subprotocol entry), refusals of
    a wrong token, of a client without the subprotocol pitchwire.v1, of a foreign Origin and of a Host
    that is not this server (DNS rebinding), also for plain GET;
  - subscriptions: no frames before subscribe, rates "hop", {"every": n} and {"fps": x}, field selection,
    settled corrections (index lag settle_ms / hop_ms, same time_s as the frame), contiguous seq;
  - the demo voice: voiced frames with F0 in the search range, unvoiced frames with f0_hz null; stats to
    every connection, subscribed or not;
  - requests: ping, mark, set_band with note names, clear_band, start_exercise and end_exercise, with the
    role checks and error codes of docs/protocol.md;
  - bad input: error codes, too_large, close codes 1009 (RFC 6455, message too big) and 1003 (binary), a
    flood answered with rate_limited and closed with 1008, while a subscribed client loses nothing;
  - slow clients: one that stops reading is disconnected (slow_client_s), one that stops now and then sees
    gaps in seq and dropped_frames events that account for them; a client that keeps up meanwhile loses
    nothing;
  - static files: the live page, no way out of the web root, 405 for POST; and, with a second daemon whose
    web_root does not exist, that nothing is served at all;
  - SIGTERM: every client gets close code 1001 and the daemon exits 0 within 1.5 s.
Every message received in the whole run is validated against protocol/schema/server_message.json.

Usage: protocol_live_test.py --daemon PATH/TO/pitchwired --schemas protocol/schema --source REPOSITORY
Needs Debian's python3-websockets (10.x) and python3-jsonschema. Prints PASS or FAIL for every check, with
what it is checked against; exit status 0 when all pass, 1 otherwise.
"""
import argparse
import asyncio
import base64
import json
import math
import os
import pathlib
import re
import signal
import socket
import sys
import tempfile
import time

import jsonschema
import websockets

# Settings written to the daemon's configuration file (see daemon/include/pitchwire/daemon/config.h).
QUEUE_FRAMES = 32       # frames queued per client before dropping (default 64)
SLOW_CLIENT_S = 2.0     # a client behind for longer than this is closed (default 10)
REQUEST_BURST = 40      # the defaults of request_burst and requests_per_s, checked by the flood
REQUESTS_PER_S = 20
# Receive buffer of the clients that stop reading. With it, the kernel buffers between the daemon (its 32 KiB
# send buffer) and such a client hold about 500 messages of the full stream (every hop, every field, settled:
# 400 messages per second), so that frames are dropped about 1.3 s after the client stops reading.
SMALL_RCVBUF = 4096
TOTAL_TIMEOUT_S = 100.0

results = []    # (name, passed)
received = []   # (connection name, text) of every message received, validated at the end


def check(name, ok, ref, detail=""):
    results.append((name, bool(ok)))
    line = f"{'PASS' if ok else 'FAIL'}: {name} [{ref}]"
    if detail:
        line += f" -- {detail}"
    print(line, flush=True)
    return bool(ok)


def short(value, n=160):
    text = value if isinstance(value, str) else json.dumps(value)
    return text if len(text) <= n else text[:n] + "..."


# ---- the daemon -----------------------------------------------------------------------------------------

class Daemon:
    def __init__(self, exe, workdir, web_root):
        self.exe = exe
        self.dir = workdir
        workdir.mkdir(parents=True, exist_ok=True)
        self.token_dir = workdir / "tokens"
        self.log_file = workdir / "log" / "pitchwired.log"
        self.web_root = web_root
        self.config = workdir / "pitchwired.jsonc"
        settings = {
            "token_dir": str(self.token_dir),
            "log_file": str(self.log_file),
            "session_dir": str(workdir / "sessions"),
            "web_root": str(self.web_root),
            "queue_frames": QUEUE_FRAMES,
            "slow_client_s": SLOW_CLIENT_S,
            "request_burst": REQUEST_BURST,
            "requests_per_s": REQUESTS_PER_S,
        }
        self.config.write_text("// protocol_live_test.py\n" + json.dumps(settings, indent=2) + "\n", encoding="utf-8")
        self.proc = None
        self.port = None
        self.supervisor_token = None
        self.lab_token = None
        self.stdout_lines = []

    started = []

    async def start(self):
        Daemon.started.append(self)
        self.stderr = open(self.dir / "stderr.txt", "wb")
        self.proc = await asyncio.create_subprocess_exec(
            str(self.exe), "--input", "demo", "--port", "0", "--config", str(self.config),
            stdin=asyncio.subprocess.DEVNULL, stdout=asyncio.subprocess.PIPE, stderr=self.stderr)
        deadline = time.monotonic() + 15.0
        while len(self.stdout_lines) < 3 and time.monotonic() < deadline:
            try:
                line = await asyncio.wait_for(self.proc.stdout.readline(), deadline - time.monotonic())
            except asyncio.TimeoutError:
                break
            if not line:
                break
            self.stdout_lines.append(line.decode("utf-8", "replace").rstrip("\n"))
        text = "\n".join(self.stdout_lines)
        live = re.search(r"^pitchwired: live page http://127\.0\.0\.1:(\d+)/$", text, re.MULTILINE)
        sup = re.search(r"^pitchwired: supervisor page http://127\.0\.0\.1:(\d+)/\?token=([0-9a-f]{32})$", text, re.MULTILINE)
        wsl = re.search(r"^pitchwired: WebSocket ws://127\.0\.0\.1:(\d+)/ws", text, re.MULTILINE)
        ok = bool(live and sup and wsl and live.group(1) == sup.group(1) == wsl.group(1))
        if ok:
            self.port = int(live.group(1))
            self.supervisor_token = sup.group(2)
            asyncio.ensure_future(self._drain())
            try:
                self.lab_token = (self.token_dir / "lab.token").read_text(encoding="utf-8").strip()
                on_disk = (self.token_dir / "supervisor.token").read_text(encoding="utf-8").strip()
            except OSError as e:
                return check("daemon started, tokens in token_dir", False, "config.h token_dir", str(e))
            ok = re.fullmatch(r"[0-9a-f]{32}", self.lab_token or "") and on_disk == self.supervisor_token
        return check("daemon started, printed its URLs, tokens in token_dir", ok, "main.cpp, config.h token_dir",
                     f"port {self.port}" if ok else f"stdout {text!r}; stderr: {self.stderr_tail()}")

    async def _drain(self):
        while self.proc and self.proc.returncode is None:
            line = await self.proc.stdout.readline()
            if not line:
                return
            self.stdout_lines.append(line.decode("utf-8", "replace").rstrip("\n"))

    def stderr_tail(self, n=12):
        try:
            lines = (self.dir / "stderr.txt").read_text(encoding="utf-8", errors="replace").splitlines()
        except OSError:
            return ""
        return " | ".join(lines[-n:])

    def log_text(self):
        try:
            return self.log_file.read_text(encoding="utf-8", errors="replace")
        except OSError:
            return ""

    @property
    def ws_url(self):
        return f"ws://127.0.0.1:{self.port}/ws"

    async def kill(self):
        if self.proc and self.proc.returncode is None:
            self.proc.kill()
            try:
                await asyncio.wait_for(self.proc.wait(), 5)
            except asyncio.TimeoutError:
                pass
        if getattr(self, "stderr", None):
            self.stderr.close()


# ---- WebSocket clients ----------------------------------------------------------------------------------

class Conn:
    """One WebSocket connection. Every message received is kept (and queued for schema validation); seq is
    followed: `gaps` lists (position in msgs, missing count), `seq_errors` any seq that did not increase.
    With pump=True a task reads all the time; otherwise messages are read only by recv() and wait()."""

    all = []

    def __init__(self, name, ws, pump):
        self.name = name
        self.ws = ws
        self.msgs = []
        self.times = []
        self.changed = asyncio.Event()
        self.last_seq = 0
        self.gaps = []
        self.seq_errors = []
        self.not_json = 0
        self.binary = 0
        self.closed = asyncio.Event()
        self.close_code = None
        self.close_reason = None
        self.opened_at = time.monotonic()
        self.closed_at = None
        self.close_cause = ""
        self.pumped = pump
        self.pump = asyncio.ensure_future(self._pump()) if pump else None
        Conn.all.append(self)

    @classmethod
    async def open(cls, daemon, name, query="", subprotocols=("pitchwire.v1",), origin=None, pump=True,
                   rcvbuf=None, **kw):
        sock = None
        if rcvbuf:
            sock = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
            sock.setsockopt(socket.SOL_SOCKET, socket.SO_RCVBUF, rcvbuf)
            sock.setblocking(False)
            await asyncio.wait_for(asyncio.get_running_loop().sock_connect(sock, ("127.0.0.1", daemon.port)), 5)
        ws = await websockets.connect(daemon.ws_url + query, subprotocols=list(subprotocols), origin=origin,
                                      ping_interval=None, open_timeout=5, close_timeout=2, max_size=2 ** 20,
                                      sock=sock, **kw)
        return cls(name, ws, pump)

    def _take(self, data):
        now = time.monotonic()
        if isinstance(data, bytes):
            self.binary += 1
            received.append((self.name, None))
            message = {"type": "<binary>"}
        else:
            received.append((self.name, data))
            try:
                message = json.loads(data)
            except ValueError:
                self.not_json += 1
                found = re.search(r'"seq":(\d+)', data)
                message = {"type": "<not JSON>", "text": data}
                if found:
                    message["seq"] = int(found.group(1))
            if not isinstance(message, dict):
                message = {"type": "<not an object>"}
        seq = message.get("seq")
        if isinstance(seq, int) and not isinstance(seq, bool):
            if seq <= self.last_seq:
                self.seq_errors.append(f"seq {seq} after {self.last_seq}: {short(data, 120)}")
            else:
                if seq != self.last_seq + 1:
                    self.gaps.append((len(self.msgs), seq - self.last_seq - 1))
                self.last_seq = seq
        self.msgs.append(message)
        self.times.append(now)
        self.changed.set()
        return message

    def _mark_closed(self):
        if not self.closed.is_set():
            self.close_code = self.ws.close_code
            self.close_reason = self.ws.close_reason
            self.closed_at = time.monotonic()
            self.closed.set()
            self.changed.set()

    async def _pump(self):
        """Reads until the connection ends (then marks it closed) or until cancelled (then leaves it open)."""
        try:
            async for data in self.ws:
                self._take(data)
        except websockets.ConnectionClosed as e:
            self.close_cause = f"{e}" + (f" ({e.__cause__!r})" if e.__cause__ else "")
        self._mark_closed()

    async def recv(self, timeout):
        """Reads one message (connections without pump). None on timeout or close."""
        try:
            data = await asyncio.wait_for(self.ws.recv(), timeout)
        except asyncio.TimeoutError:
            return None
        except websockets.ConnectionClosed as e:
            self.close_cause = f"{e}" + (f" ({e.__cause__!r})" if e.__cause__ else "")
            self._mark_closed()
            return None
        return self._take(data)

    async def wait(self, pred, timeout=3.0, start=0):
        """The first message at position >= start that satisfies pred, waiting up to timeout; None if none."""
        deadline = time.monotonic() + timeout
        i = start
        while True:
            while i < len(self.msgs):
                if pred(self.msgs[i]):
                    return self.msgs[i]
                i += 1
            remaining = deadline - time.monotonic()
            if remaining <= 0 or self.closed.is_set():
                return None
            if self.pump is None:
                await self.recv(remaining)
                continue
            self.changed.clear()
            try:
                await asyncio.wait_for(self.changed.wait(), remaining)
            except asyncio.TimeoutError:
                pass

    async def collect(self, seconds):
        """Reads (or lets the pump read) for `seconds`; returns the position where it started."""
        start = len(self.msgs)
        if self.pump is None and not self.closed.is_set():
            # One reading task for the whole time (cheaper per message than recv() with a timeout each, which
            # matters for a client catching up); cancelling websockets' recv loses no message.
            reader = asyncio.ensure_future(self._pump())
            await asyncio.wait({reader}, timeout=seconds)
            if not reader.done():
                reader.cancel()
                await asyncio.gather(reader, return_exceptions=True)
        elif self.pump is not None:
            await asyncio.sleep(seconds)
        return start

    async def send(self, message):
        text = message if isinstance(message, (str, bytes)) else json.dumps(message)
        try:
            await asyncio.wait_for(self.ws.send(text), 5)
            return True
        except (websockets.ConnectionClosed, asyncio.TimeoutError):
            return False

    async def request(self, message, timeout=3.0):
        """Sends a request and returns its answer (ack, pong or error with the same id), or None."""
        start = len(self.msgs)
        await self.send(message)
        return await self.wait(lambda m: m.get("type") in ("ack", "pong", "error") and m.get("id") == message["id"],
                               timeout, start)

    async def next_error(self, text, timeout=3.0):
        start = len(self.msgs)
        await self.send(text)
        return await self.wait(lambda m: m.get("type") == "error", timeout, start)

    async def wait_closed(self, timeout):
        if self.pump is None:
            deadline = time.monotonic() + timeout
            while not self.closed.is_set() and time.monotonic() < deadline:
                await self.recv(deadline - time.monotonic())
        else:
            try:
                await asyncio.wait_for(self.closed.wait(), timeout)
            except asyncio.TimeoutError:
                pass
        return self.closed.is_set()

    async def close(self):
        try:
            await asyncio.wait_for(self.ws.close(), 3)
        except (asyncio.TimeoutError, websockets.WebSocketException, OSError):
            pass
        if self.pump is not None:
            try:
                await asyncio.wait_for(self.closed.wait(), 3)
            except asyncio.TimeoutError:
                self.pump.cancel()
        self._mark_closed()

    def of_type(self, kind, start=0):
        return [m for m in self.msgs[start:] if m.get("type") == kind]

    def events(self, kind, start=0):
        return [m for m in self.msgs[start:] if m.get("type") == "event" and m.get("kind") == kind]


async def handshake_status(daemon, query="", subprotocols=("pitchwire.v1",), origin=None):
    """HTTP status of a WebSocket handshake: 101 when it was accepted (the connection is then closed)."""
    try:
        ws = await websockets.connect(daemon.ws_url + query, subprotocols=list(subprotocols) if subprotocols else None,
                                      origin=origin, ping_interval=None, open_timeout=5, close_timeout=1)
    except websockets.InvalidStatusCode as e:
        return e.status_code
    except (websockets.InvalidHandshake, OSError, asyncio.TimeoutError) as e:
        return f"handshake failed: {e!r}"
    try:
        first = await asyncio.wait_for(ws.recv(), 3)
        received.append(("handshake probe", first))
    except (asyncio.TimeoutError, websockets.ConnectionClosed):
        pass
    await ws.close()
    return 101


async def raw_http(daemon, method, target, host="default", headers=(), version="HTTP/1.1", timeout=4.0):
    """One request on a fresh TCP connection, written byte for byte (no normalisation of the target).
    Returns (status, headers as a lower-case dict, body); status None when the daemon sent no response."""
    if host == "default":
        host = f"127.0.0.1:{daemon.port}"
    lines = [f"{method} {target} {version}"]
    if host is not None:
        lines.append(f"Host: {host}")
    names = {k.lower() for k, _ in headers}
    lines += [f"{k}: {v}" for k, v in headers]
    if "connection" not in names:
        lines.append("Connection: close")
    request = ("\r\n".join(lines) + "\r\n\r\n").encode("latin-1")
    reader, writer = await asyncio.wait_for(asyncio.open_connection("127.0.0.1", daemon.port), timeout)
    try:
        writer.write(request)
        await writer.drain()
        try:
            head = await asyncio.wait_for(reader.readuntil(b"\r\n\r\n"), timeout)
        except (asyncio.IncompleteReadError, ConnectionError):
            return None, {}, b""
        head_lines = head.decode("latin-1").split("\r\n")
        status = int(head_lines[0].split()[1])
        fields = {}
        for line in head_lines[1:]:
            if ":" in line:
                k, v = line.split(":", 1)
                fields[k.strip().lower()] = v.strip()
        body = b""
        if status != 101 and method != "HEAD":
            if "content-length" in fields:
                body = await asyncio.wait_for(reader.readexactly(int(fields["content-length"])), timeout)
            else:
                body = await asyncio.wait_for(reader.read(), timeout)
        return status, fields, body
    finally:
        writer.close()
        try:
            await asyncio.wait_for(writer.wait_closed(), 2)
        except (asyncio.TimeoutError, ConnectionError):
            pass


def upgrade_headers(origin=None, protocol="pitchwire.v1"):
    h = [("Upgrade", "websocket"), ("Connection", "Upgrade"),
         ("Sec-WebSocket-Key", base64.b64encode(os.urandom(16)).decode()), ("Sec-WebSocket-Version", "13")]
    if protocol:
        h.append(("Sec-WebSocket-Protocol", protocol))
    if origin:
        h.append(("Origin", origin))
    return h


# ---- shared state of the run ----------------------------------------------------------------------------

class Ctx:
    def __init__(self, daemon):
        self.daemon = daemon
        self.hello = None
        self.monitor = None
        self.phases = {}  # name -> (start, end) in time.monotonic()

    @property
    def hop_s(self):
        return self.hello["hop_ms"] / 1000.0

    async def open(self, name, **kw):
        return await Conn.open(self.daemon, name, **kw)

    async def hello_of(self, conn, timeout=3.0):
        return await conn.wait(lambda m: True, timeout)


def index_steps(frames):
    return [b["index"] - a["index"] for a, b in zip(frames, frames[1:])]


def seq_contiguous(conn, start=0, end=None):
    """No seq gap among msgs[start:end] (a gap recorded at position p concerns msgs[p-1] -> msgs[p])."""
    end = len(conn.msgs) if end is None else end
    return [(p, n) for p, n in conn.gaps if start < p < end]


# ---- the checks -----------------------------------------------------------------------------------------

async def test_hello_and_roles(ctx):
    d = ctx.daemon
    ref_conn = "docs/protocol.md Connection"
    observer = await ctx.open("observer")
    hello = await ctx.hello_of(observer)
    ctx.hello = hello
    check("hello is the first message, seq 1", hello and hello.get("type") == "hello" and hello.get("seq") == 1,
          "docs/protocol.md: the daemon sends hello first; seq from 1", short(hello))
    if not hello or hello.get("type") != "hello":
        return False
    check("subprotocol pitchwire.v1 negotiated", observer.ws.subprotocol == "pitchwire.v1",
          "RFC 6455 §4.2.2 Sec-WebSocket-Protocol; " + ref_conn, f"got {observer.ws.subprotocol!r}")
    check("hello without a token: role observer", hello.get("role") == "observer", ref_conn, hello.get("role"))
    check("hello: protocol 1, hop 5 ms, settle 60 ms, range 50..1400 Hz, the four frame fields, no band, no exercise",
          hello.get("protocol") == 1 and hello.get("hop_ms") == 5.0 and hello.get("settle_ms") == 60.0
          and hello.get("f0_range_hz") == {"min": 50.0, "max": 1400.0}
          and hello.get("fields") == ["f0_hz", "voicing", "confidence", "level_dbfs"]
          and hello.get("bands") == [] and hello.get("exercise") is None,
          "docs/protocol.md hello; config.h defaults", short(hello, 400))
    names = [p.get("name") for p in hello.get("presets", [])]
    check("hello.presets: the shipped presets in the file's order, with their labels",
          names == ["sustained_vowel", "pitch_glide", "reading", "conversation"]
          and all(p.get("label") for p in hello.get("presets", [])),
          "docs/protocol.md hello; config/exercises.jsonc", short(hello.get("presets")))
    limit = hello.get("limits", {}).get("max_message_bytes")
    check("hello.limits.max_message_bytes is the default 16384", limit == 16384,
          "docs/protocol.md Connection (16384 by default); config.h max_message_bytes", f"got {limit}")

    ways = [("supervisor token in ?token=", dict(query=f"?token={d.supervisor_token}"), "supervisor"),
            ("supervisor token as subprotocol pitchwire.token.<hex>",
             dict(subprotocols=("pitchwire.v1", f"pitchwire.token.{d.supervisor_token}")), "supervisor"),
            ("lab token in ?token=", dict(query=f"?token={d.lab_token}"), "lab"),
            ("lab token as subprotocol pitchwire.token.<hex>",
             dict(subprotocols=("pitchwire.v1", f"pitchwire.token.{d.lab_token}")), "lab")]
    conns = {}
    for label, kw, role in ways:
        c = await ctx.open(f"{role} ({label})", **kw)
        h = await ctx.hello_of(c)
        check(f"hello with the {label}: role {role}", h and h.get("type") == "hello" and h.get("role") == role
              and c.ws.subprotocol == "pitchwire.v1", "server.cpp tokens; " + ref_conn,
              f"role {h.get('role') if h else None}, subprotocol {c.ws.subprotocol!r}")
        conns.setdefault(role, c)
    ctx.observer = observer
    ctx.supervisor = conns["supervisor"]
    ctx.lab = conns["lab"]
    return True


async def test_handshake_refusals(ctx):
    d = ctx.daemon
    port = d.port
    wrong = "0" * 32 if d.supervisor_token != "0" * 32 else "1" * 32
    cases = [
        ("a wrong token in ?token= is refused with 403", dict(query=f"?token={wrong}"), 403),
        ("a wrong token as subprotocol entry is refused with 403",
         dict(subprotocols=("pitchwire.v1", f"pitchwire.token.{wrong}")), 403),
        ("a token one digit short is refused with 403", dict(query=f"?token={d.supervisor_token[:-1]}"), 403),
        ("Origin http://evil.example is refused with 403", dict(origin="http://evil.example"), 403),
        ("Origin null is refused with 403", dict(origin="null"), 403),
    ]
    for label, kw, expected in cases:
        status = await handshake_status(d, **kw)
        check(label, status == expected, "docs/protocol.md Connection; RFC 6455 §4.2.2 (403 Forbidden)", f"got {status}")
    for label, protocols in [("no subprotocol", ()), ("only pitchwire.v2", ("pitchwire.v2",))]:
        status = await handshake_status(d, subprotocols=protocols)
        check(f"a client offering {label} is refused", isinstance(status, int) and 400 <= status < 500,
              "docs/protocol.md Connection: a client that does not offer pitchwire.v1 is refused", f"got {status}")
    own = await ctx.open("own origin", origin=f"http://127.0.0.1:{port}")
    h = await ctx.hello_of(own)
    check("the daemon's own Origin http://127.0.0.1:PORT is accepted", h and h.get("type") == "hello",
          "server.cpp allowed origins", short(h))
    await own.close()

    # Host: DNS rebinding. Plain GET and the upgrade alike.
    ref = "DNS rebinding: Host must name this server (server.cpp host_allowed)"
    for host, expected in [(f"evil.example:{port}", 403), ("127.0.0.1", 403), ("127.0.0.1:1", 403),
                           ("evil.example", 403), (f"localhost:{port}", 200), (f"[::1]:{port}", 200),
                           (f"LocalHost:{port}", 200)]:
        status, _, body = await raw_http(d, "GET", "/", host=host)
        ok = status == expected and (expected == 200 or b"<html" not in body.lower())
        check(f"GET / with Host {host!r} -> {expected}", ok, ref, f"got {status}")
    status, _, _ = await raw_http(d, "GET", "/", host=None)
    check("GET / without Host is refused", isinstance(status, int) and 400 <= status < 500,
          ref + "; RFC 9112 §3.2", f"got {status}")
    for host, expected in [(f"evil.example:{port}", 403), (f"localhost:{port}", 101), (f"127.0.0.1:{port + 1}", 403)]:
        status, _, _ = await raw_http(d, "GET", "/ws", host=host, headers=upgrade_headers())
        check(f"WebSocket upgrade with Host {host!r} -> {expected}", status == expected, ref, f"got {status}")
    status, _, _ = await raw_http(d, "GET", "/ws", headers=upgrade_headers(origin="http://evil.example"))
    check("raw upgrade with Origin http://evil.example -> 403", status == 403, "server.cpp origin_allowed", f"got {status}")
    status, _, _ = await raw_http(d, "GET", "/ws", headers=upgrade_headers(origin=f"http://localhost:{port}"))
    check("raw upgrade with Origin http://localhost:PORT -> 101", status == 101, "server.cpp origin_allowed", f"got {status}")
    status, _, _ = await raw_http(d, "GET", "/other", headers=upgrade_headers())
    check("an upgrade to a path other than /ws is refused", isinstance(status, int) and 400 <= status < 500,
          "docs/protocol.md Connection: path /ws", f"got {status}")


async def test_static_files(ctx):
    d = ctx.daemon
    status, fields, body = await raw_http(d, "GET", "/")
    index = (d.web_root / "index.html").read_bytes()
    check("GET / serves the live page as text/html", status == 200 and fields.get("content-type", "").startswith("text/html")
          and body == index, "server.cpp serve_file; clients/web/index.html",
          f"status {status}, content-type {fields.get('content-type')!r}, {len(body)} bytes")
    status, fields, _ = await raw_http(d, "GET", "/live.js")
    check("GET /live.js is text/javascript", status == 200 and fields.get("content-type", "").startswith("text/javascript"),
          "server.cpp mime_type", f"status {status}, {fields.get('content-type')!r}")
    status, fields, body = await raw_http(d, "HEAD", "/")
    check("HEAD / gives the headers of GET / without a body", status == 200
          and fields.get("content-length") == str(len(index)), "RFC 9110 §9.3.2",
          f"status {status}, content-length {fields.get('content-length')}")
    status, _, _ = await raw_http(d, "GET", "/no-such-file.html")
    check("GET of a missing file -> 404", status == 404, "RFC 9110 §15.5.5", f"got {status}")
    for target in ["/../../../../../../../../etc/passwd", "/%2e%2e/%2e%2e/%2e%2e/%2e%2e/%2e%2e/%2e%2e/etc/passwd",
                   "/..%2f..%2f..%2f..%2f..%2f..%2fetc%2fpasswd", "/%2e%2e%2f%2e%2e%2f%2e%2e%2f%2e%2e%2fetc%2fpasswd",
                   "/.%2e/.%2e/.%2e/.%2e/.%2e/.%2e/etc/passwd", "/%2fetc%2fpasswd", "//etc/passwd",
                   "/..%5c..%5c..%5c..%5cetc%5cpasswd", "/live.js/../../../../../../etc/passwd",
                   "/%252e%252e/%252e%252e/etc/passwd"]:
        status, _, body = await raw_http(d, "GET", target)
        check(f"GET {target} stays in the web root (400 or 404)", status in (400, 404) and b"root:" not in body,
              "server.cpp decode_path/serve_file: no way out of web_root", f"got {status}, {len(body)} bytes")
    status, fields, _ = await raw_http(d, "POST", "/", headers=[("Content-Length", "0")])
    check("POST / -> 405", status == 405, "RFC 9110 §15.5.6 Method Not Allowed", f"got {status}")
    check("the 405 response names the allowed methods in Allow", "allow" in fields,
          "RFC 9110 §15.5.6: the origin server MUST generate an Allow header field in a 405 response",
          f"headers {sorted(fields)}")


async def test_subscriptions(ctx):
    """Several subscriptions side by side, on fresh connections, about 1.5 s each."""
    hop_s = ctx.hop_s
    lag = round(ctx.hello["settle_ms"] / ctx.hello["hop_ms"])
    idle = await ctx.open("idle, then hop")
    a = await ctx.open("every 4")
    b = await ctx.open("fps 60")
    s = await ctx.open("settled")
    for c in (idle, a, b, s):
        await ctx.hello_of(c)

    async def subscribe(conn, request):
        return await conn.request(request)

    # No frames before subscribe; stats all the same.
    start_idle = len(idle.msgs)
    acks = await asyncio.gather(
        subscribe(a, {"type": "subscribe", "id": "s-every4", "rate": {"every": 4}, "fields": ["f0_hz", "level_dbfs"]}),
        subscribe(b, {"type": "subscribe", "id": "s-fps60", "rate": {"fps": 60}, "fields": []}),
        subscribe(s, {"type": "subscribe", "id": "s-settled", "rate": {"every": 2}, "fields": ["f0_hz"], "settled": True}))
    await asyncio.sleep(1.3)
    before = idle.msgs[start_idle:]
    check("no frame or settled before subscribe", not [m for m in before if m.get("type") in ("frame", "settled")],
          "docs/protocol.md Connection: frames flow only after the client's subscribe",
          f"{len(before)} messages: {sorted({m.get('type') for m in before})}")
    stats = [m for m in before if m.get("type") == "stats"]
    check("stats arrive without subscribe", len(stats) >= 1,
          "docs/protocol.md Connection: statistics go to every connection", f"{len(stats)} stats in 1.3 s")

    ack_hop = await subscribe(idle, {"type": "subscribe", "id": "s-hop", "rate": "hop"})
    idle_from = len(idle.msgs)
    await asyncio.sleep(1.0)
    a_mid = len(a.msgs)
    ack_5 = await subscribe(a, {"type": "subscribe", "id": "s-every5", "rate": {"every": 5}, "fields": ["voicing"]})
    await asyncio.sleep(0.6)

    # "hop": every index, every field.
    expect = {"every": 1, "fps": 200.0, "fields": ["f0_hz", "voicing", "confidence", "level_dbfs"], "settled": False}
    check("subscribe \"hop\": ack with every 1, fps 200, all fields", ack_hop and ack_hop.get("type") == "ack"
          and ack_hop.get("request") == "subscribe" and ack_hop.get("result") == expect,
          "docs/protocol.md subscribe and ack", short(ack_hop))
    frames = idle.of_type("frame", idle_from)
    steps = index_steps(frames)
    check("\"hop\": every index, in order", len(frames) >= 100 and all(x == 1 for x in steps),
          "docs/protocol.md subscribe: rate \"hop\" (every frame)",
          f"{len(frames)} frames, steps {sorted(set(steps))}")
    keys = {frozenset(f) for f in frames}
    check("\"hop\" with default fields: every frame field present", keys == {frozenset(
        ["type", "seq", "index", "time_s", "f0_hz", "voicing", "confidence", "level_dbfs"])},
        "docs/protocol.md subscribe: fields default all", str([sorted(k) for k in keys][:2]))
    dt = [round((f2["time_s"] - f1["time_s"]) / (f2["index"] - f1["index"]), 6) for f1, f2 in zip(frames, frames[1:])]
    check("time_s advances by hop_ms per index", dt and all(abs(x - hop_s) < 2e-6 for x in dt),
          "docs/protocol.md frame: time_s on the audio clock; hello.hop_ms", f"steps {sorted(set(dt))[:4]}")
    check("\"hop\": seq contiguous", not seq_contiguous(idle), "docs/protocol.md Conventions: seq", str(idle.gaps[:3]))

    # {"every": 4}, then changed to {"every": 5}.
    ack4 = acks[0]
    check("subscribe {\"every\": 4}: ack every 4, fps 50, the fields asked for", ack4 and ack4.get("result") ==
          {"every": 4, "fps": 50.0, "fields": ["f0_hz", "level_dbfs"], "settled": False},
          "docs/protocol.md subscribe and ack", short(ack4))
    frames4 = [m for m in a.msgs[:a_mid] if m.get("type") == "frame"]
    check("{\"every\": 4}: only indices that are multiples of 4, none skipped", len(frames4) >= 30
          and all(f["index"] % 4 == 0 for f in frames4) and all(x == 4 for x in index_steps(frames4)),
          "docs/protocol.md subscribe: frames whose index is a multiple of n",
          f"{len(frames4)} frames, steps {sorted(set(index_steps(frames4)))}")
    check("fields [\"f0_hz\", \"level_dbfs\"]: only those besides type, seq, index, time_s",
          {frozenset(f) for f in frames4} == {frozenset(["type", "seq", "index", "time_s", "f0_hz", "level_dbfs"])},
          "docs/protocol.md frame: the others only when subscribed", str({tuple(sorted(f)) for f in frames4}))
    pos5 = next((i for i, m in enumerate(a.msgs) if m is ack_5), None)
    after5 = [m for m in a.msgs[pos5 + 1:] if m.get("type") == "frame"] if pos5 is not None else []
    check("a second subscribe changes the rate and fields: after its ack only multiples of 5 with voicing",
          ack_5 and ack_5.get("result", {}).get("every") == 5 and len(after5) >= 10
          and all(f["index"] % 5 == 0 and set(f) == {"type", "seq", "index", "time_s", "voicing"} for f in after5),
          "docs/protocol.md subscribe: start, or change", f"{len(after5)} frames after the ack; {short(ack_5)}")

    # {"fps": 60} with fields [].
    ack60 = acks[1]
    check("subscribe {\"fps\": 60}: ack every 4, fps 50 (5 ms hops)", ack60 and ack60.get("result") ==
          {"every": 4, "fps": 50.0, "fields": [], "settled": False},
          "docs/protocol.md subscribe: {\"fps\": 60} gives n = 4, 50 frames per second", short(ack60))
    frames60 = b.of_type("frame")
    check("{\"fps\": 60}: indices multiples of 4, none skipped", len(frames60) >= 30
          and all(f["index"] % 4 == 0 for f in frames60) and all(x == 4 for x in index_steps(frames60)),
          "docs/protocol.md subscribe", f"{len(frames60)} frames, steps {sorted(set(index_steps(frames60)))}")
    check("fields []: only type, seq, index and time_s", frames60 and all(set(f) == {"type", "seq", "index", "time_s"}
                                                                      for f in frames60),
          "docs/protocol.md subscribe: [] sends only index and time_s", short(frames60[0] if frames60 else None))
    lo = max(frames4[0]["index"], frames60[0]["index"]) if frames4 and frames60 else 0
    hi = min(frames4[-1]["index"], frames60[-1]["index"]) if frames4 and frames60 else -1
    same4 = {f["index"] for f in frames4 if lo <= f["index"] <= hi}
    same60 = {f["index"] for f in frames60 if lo <= f["index"] <= hi}
    check("connections with the same n get the same frames", hi > lo and same4 == same60,
          "docs/protocol.md subscribe", f"indices {lo}..{hi}: {len(same4)} and {len(same60)}")

    # Settled corrections, every 2.
    ack_s = acks[2]
    check("subscribe with settled: ack settled true", ack_s and ack_s.get("result", {}).get("settled") is True,
          "docs/protocol.md subscribe", short(ack_s))
    seen = {}
    last_frame = None
    first_frame = None
    lags, unseen_after_first, before_first, time_mismatch, pairs = [], [], [], [], 0
    for m in s.msgs:
        if m.get("type") == "frame":
            seen[m["index"]] = m["time_s"]
            last_frame = m["index"]
            if first_frame is None:
                first_frame = m["index"]
        elif m.get("type") == "settled":
            if first_frame is None or m["index"] < first_frame:
                before_first.append(m["index"])
                continue
            if m["index"] not in seen:
                unseen_after_first.append(m["index"])
                continue
            pairs += 1
            lags.append(last_frame - m["index"])
            if seen[m["index"]] != m["time_s"]:
                time_mismatch.append((m["index"], seen[m["index"]], m["time_s"]))
    settled = s.of_type("settled")
    check("settled corrections arrive, for the subscribed indices only", len(settled) >= 100
          and all(m["index"] % 2 == 0 for m in settled), "docs/protocol.md settled: for the same indices as their frames",
          f"{len(settled)} settled")
    check("each settled index from the connection's first frame on was sent as a frame earlier",
          pairs >= 100 and not unseen_after_first, "docs/protocol.md settled: the settled value of an earlier frame",
          f"{pairs} pairs; not seen: {unseen_after_first[:5]}")
    check("no settled for indices before the connection's first frame", not before_first,
          "docs/protocol.md settled: the settled value of an earlier frame with the same index",
          f"first frame index {first_frame}; settled for earlier indices: {before_first[:14]}")
    # The settled value comes settle_ms after the frame's full analysis window; a live value may be
    # published up to 12 ms earlier than that (docs/estimator.md, early live value): up to 3 hops more.
    early_hops = math.ceil(12.0 / 5.0)
    check(f"settled arrives settle_ms after its frame: {lag} to {lag + early_hops} hops (index lag, not wall time)",
          lags and all(lag <= x <= lag + early_hops for x in lags),
          "docs/protocol.md settled; hello.settle_ms / hello.hop_ms; docs/estimator.md early live value",
          f"lags {sorted(set(lags))}")
    check("settled time_s equals the time_s of the frame with the same index", pairs and not time_mismatch,
          "docs/protocol.md settled", str(time_mismatch[:3]))
    check("settled subscription: seq contiguous (the client keeps up)", not s.gaps, "docs/protocol.md Conventions: seq",
          str(s.gaps[:3]))
    for c in (a, b):
        check(f"{c.name}: seq contiguous", not c.gaps, "docs/protocol.md Conventions: seq", str(c.gaps[:3]))
    for c in (idle, a, b, s):
        await c.close()


async def test_requests(ctx):
    mon, sup, lab, obs = ctx.monitor, ctx.supervisor, ctx.lab, ctx.observer
    ref = "docs/protocol.md"

    pong = await obs.request({"type": "ping", "id": "p-1"})
    last = mon.of_type("frame")[-1]["time_s"] if mon.of_type("frame") else None
    check("ping -> pong with the same id", pong and pong.get("type") == "pong" and pong.get("id") == "p-1",
          ref + " ping, pong", short(pong))
    check("pong time_s is on the audio clock (near the latest frame)", pong and last is not None
          and abs(pong.get("time_s", -1e9) - last) < 1.0, ref + " pong", f"pong {pong and pong.get('time_s')}, frame {last}")

    # mark
    m0 = len(mon.msgs)
    data = {"trial": 12, "condition": "loud", "nested": {"list": [1, 2.5, "x"]}}
    ack = await lab.request({"type": "mark", "id": "m-1", "label": "trial 12 onset", "data": data})
    check("mark from lab -> ack", ack and ack.get("type") == "ack" and ack.get("request") == "mark", ref + " mark", short(ack))
    marker = await mon.wait(lambda m: m.get("type") == "event" and m.get("kind") == "marker", 3, m0)
    check("the marker event reaches an observer with id, label and data as sent", marker and
          {k: v for k, v in marker["payload"].items() if k not in ("sample", "wall")} ==
          {"id": "m-1", "label": "trial 12 onset", "data": data}, ref + " mark and event marker", short(marker))
    check("the marker is stamped with its input sample index (time_s x 16 kHz) and the wall clock",
          marker and marker["payload"].get("sample") == round(marker["time_s"] * 16000)
          and str(marker["payload"].get("wall", "")).endswith("Z"), ref + " event marker", short(marker))
    ack2 = await sup.request({"type": "mark", "id": "m-2", "label": "no data"})
    check("mark from supervisor -> ack", ack2 and ack2.get("type") == "ack", ref + " mark: lab and supervisor", short(ack2))
    err = await obs.request({"type": "mark", "id": "m-3", "label": "not allowed"})
    check("mark from observer -> error forbidden", err and err.get("type") == "error" and err.get("code") == "forbidden",
          ref + " Connection: roles", short(err))

    # bands
    m0, s0 = len(mon.msgs), len(lab.msgs)
    ack = await sup.request({"type": "set_band", "id": "b-1", "name": "target", "low": "A3", "high": "E4"})
    check("set_band A3..E4 from supervisor -> ack", ack and ack.get("type") == "ack" and ack.get("request") == "set_band",
          ref + " set_band", short(ack))
    ev = await mon.wait(lambda m: m.get("type") == "event" and m.get("kind") == "band_changed", 3, m0)
    band = next((x for x in (ev or {}).get("payload", {}).get("bands", []) if x.get("name") == "target"), None)
    check("band_changed on an observer with the limits in Hz: A3 = 220.0, E4 = 329.63 (A4 = 440 Hz)",
          ev and ev["payload"].get("name") == "target" and band and abs(band["low_hz"] - 220.0) < 0.01
          and abs(band["high_hz"] - 329.63) < 0.01, "docs/protocol.md set_band; ISO 16 (A4 = 440 Hz)", short(ev))
    ev_lab = await lab.wait(lambda m: m.get("type") == "event" and m.get("kind") == "band_changed", 3, s0)
    check("band_changed reaches every connection (lab too)", ev_lab is not None, ref + " set_band: every connection", "")
    check("band_changed says who made the change: by supervisor", ev and ev.get("by") == "supervisor",
          "docs/protocol.md event: by", short(ev))
    late = await ctx.open("late observer")
    h = await ctx.hello_of(late)
    check("a new connection's hello lists the band", h and [x.get("name") for x in h.get("bands", [])] == ["target"]
          and abs(h["bands"][0]["low_hz"] - 220.0) < 0.01, ref + " hello.bands", short(h and h.get("bands")))
    await late.close()
    for who, conn in (("observer", obs), ("lab", lab)):
        err = await conn.request({"type": "set_band", "id": f"b-{who}", "name": "x", "low": 100, "high": 200})
        check(f"set_band from {who} -> forbidden", err and err.get("code") == "forbidden", ref + " Connection: roles", short(err))
    for label, req, code in [
        ("a limit that is no note name", {"low": "H3", "high": "E4"}, "bad_note"),
        ("a limit below the search range (A0 = 27.5 Hz)", {"low": "A0", "high": "E4"}, "bad_band"),
        ("low not below high", {"low": "E4", "high": "A3"}, "bad_band")]:
        err = await sup.request({"type": "set_band", "id": "b-bad", "name": "bad", **req})
        check(f"set_band with {label} -> {code}", err and err.get("code") == code and err.get("id") == "b-bad",
              ref + " set_band and error codes", short(err))
    # A band spanning the whole search range: every voiced frame is inside it, so its share of voiced time
    # is 1 by construction, and the demo voice (speech with pauses) makes its state cross.
    m0 = len(mon.msgs)
    ack = await sup.request({"type": "set_band", "id": "b-2", "name": "whole", "low": 50, "high": 1400})
    check("set_band 50..1400 Hz -> ack", ack and ack.get("type") == "ack", ref + " set_band", short(ack))
    ev = await mon.wait(lambda m: m.get("type") == "event" and m.get("kind") == "band_crossing"
                        and m["payload"].get("name") == "whole", 6, m0)
    check("band_crossing for the new band within 6 s: to inside (held states start unvoiced, and every voiced "
          "frame is inside), dated no later than its confirmation",
          ev and ev["payload"]["from"] in ("below", "inside", "above", "unvoiced")
          and ev["payload"]["to"] == "inside" and ev["payload"]["since_s"] <= ev["time_s"],
          "docs/protocol.md event band_crossing; docs/measures.md Band state", short(ev))
    st = await mon.wait(lambda m: m.get("type") == "stats" and any(b.get("name") == "whole" and b.get("inside_fraction")
                                                                    is not None for b in m.get("bands", [])), 6, m0)
    whole = next((b for b in (st or {}).get("bands", []) if b.get("name") == "whole"), None)
    check("stats list the bands in the order set, and the whole range holds every voiced frame (share 1.0)",
          st and [b["name"] for b in st["bands"]] == ["target", "whole"] and whole["inside_fraction"] == 1.0,
          "docs/protocol.md stats.bands; by construction", short(st and st.get("bands")))
    m0 = len(mon.msgs)
    await sup.request({"type": "clear_band", "id": "c-0", "name": "whole"})
    await mon.wait(lambda m: m.get("type") == "event" and m.get("kind") == "band_changed"
                   and m["payload"].get("name") == "whole", 3, m0)
    m0 = len(mon.msgs)
    ack = await sup.request({"type": "clear_band", "id": "c-1", "name": "target"})
    ev = await mon.wait(lambda m: m.get("type") == "event" and m.get("kind") == "band_changed", 3, m0)
    check("clear_band -> ack and band_changed with no band left", ack and ack.get("type") == "ack" and ev
          and ev["payload"] == {"name": "target", "bands": []}, ref + " clear_band", f"{short(ack)} {short(ev)}")
    err = await sup.request({"type": "clear_band", "id": "c-2", "name": "target"})
    check("clear_band of an unknown band -> unknown_band", err and err.get("code") == "unknown_band", ref + " clear_band",
          short(err))

    # exercises
    err = await sup.request({"type": "start_exercise", "id": "x-0", "preset": "no_such_preset"})
    check("start_exercise with an unknown preset -> unknown_preset", err and err.get("code") == "unknown_preset",
          ref + " start_exercise", short(err))
    err = await obs.request({"type": "start_exercise", "id": "x-obs", "preset": "sustained_vowel"})
    check("start_exercise from observer -> forbidden", err and err.get("code") == "forbidden", ref + " roles", short(err))
    m0 = len(mon.msgs)
    ack = await sup.request({"type": "start_exercise", "id": "x-1", "preset": "sustained_vowel", "label": "Vowel, comfortable pitch"})
    ev = await mon.wait(lambda m: m.get("type") == "event" and m.get("kind") == "exercise_started", 3, m0)
    check("start_exercise sustained_vowel -> ack and exercise_started", ack and ack.get("type") == "ack" and ev
          and ev["payload"].get("preset") == "sustained_vowel" and ev["payload"].get("label") == "Vowel, comfortable pitch",
          ref + " start_exercise", short(ev))
    bev = await mon.wait(lambda m: m.get("type") == "event" and m.get("kind") == "band_changed"
                         and m["payload"].get("name") == "target", 3, m0)
    target = next((b for b in (bev or {}).get("payload", {}).get("bands", []) if b.get("name") == "target"), None)
    check("the preset sets its band, by supervisor: target -1st..+1st around 100 Hz = 94.387..105.946 Hz",
          bev and bev.get("by") == "supervisor" and target and abs(target["low_hz"] - 94.387) < 0.01
          and abs(target["high_hz"] - 105.946) < 0.01,
          "config/exercises.jsonc; 100 * 2^(+-1/12) (equal temperament, common practice)", short(bev))
    late = await ctx.open("late observer 2")
    h = await ctx.hello_of(late)
    check("a new connection's hello shows the running exercise", h and (h.get("exercise") or {}).get("preset") == "sustained_vowel",
          ref + " hello.exercise", short(h and h.get("exercise")))
    await late.close()
    err = await sup.request({"type": "start_exercise", "id": "x-2", "preset": "reading"})
    check("a second start_exercise -> exercise_running", err and err.get("code") == "exercise_running",
          ref + " start_exercise", short(err))
    await asyncio.sleep(0.6)
    m0 = len(mon.msgs)
    ack = await sup.request({"type": "end_exercise", "id": "x-3"})
    ev = await mon.wait(lambda m: m.get("type") == "event" and m.get("kind") == "exercise_ended", 3, m0)
    summary = (ev or {}).get("payload", {}).get("summary")
    started = (ev or {}).get("payload", {}).get("started_s")
    check("end_exercise -> ack and exercise_ended with a summary", ack and ack.get("type") == "ack" and ev
          and isinstance(summary, dict) and summary, ref + " end_exercise", short(ev, 300))
    if isinstance(summary, dict) and "duration_s" in summary and started is not None:
        check("the summary's duration_s matches the exercise's time on the audio clock",
              abs(summary["duration_s"] - (ev["time_s"] - started)) < 0.05 and summary["duration_s"] > 0.3,
              "docs/measures.md; event time_s", short(summary))
        # The demo voice's own frames: the summary's numbers must agree with each other by their definitions.
        d, st, vs = summary["duration_s"], summary.get("settled_s", -1), summary.get("voiced_s", -1)
        check("settled_s: the frames from the start, short of the end by at most the settle lag (~80 ms + a hop)",
              d - 0.15 <= st <= d + 0.006 and 0 <= vs <= st + 1e-9, "docs/measures.md 'Which frames count'", short(summary))
        if vs > 0 and summary.get("f0_min_hz") and summary.get("f0_max_hz"):
            lo, hi, ref_hz = summary["f0_min_hz"], summary["f0_max_hz"], summary.get("reference_hz")
            check("cycle dose lies between min F0 x voiced time and max F0 x voiced time (sum of F0 x hop)",
                  lo * vs - 0.1 <= summary["cycle_dose"] <= hi * vs + 0.1, "Titze, Svec & Popolo 2003", short(summary))
            check("min <= p5 <= median <= p95 <= max, and each semitone value is 12 log2(f / reference_hz)",
                  lo <= summary["f0_p5_hz"] <= summary["f0_p50_hz"] <= summary["f0_p95_hz"] <= hi and ref_hz
                  and all(abs(summary[f"f0_{k}_st"] - 12 * math.log2(summary[f"f0_{k}_hz"] / ref_hz)) < 0.002
                          for k in ("min", "p5", "p50", "p95", "max")),
                  "docs/measures.md", short(summary))
    err = await sup.request({"type": "end_exercise", "id": "x-4"})
    check("end_exercise again -> no_exercise", err and err.get("code") == "no_exercise", ref + " end_exercise", short(err))

    # the reference pitch
    err = await obs.request({"type": "set_reference", "id": "r-obs", "reference": "G3"})
    check("set_reference from observer -> forbidden", err and err.get("code") == "forbidden", ref + " roles", short(err))
    m0 = len(mon.msgs)
    ack = await sup.request({"type": "set_reference", "id": "r-1", "reference": "G3"})
    ev = await mon.wait(lambda m: m.get("type") == "event" and m.get("kind") == "reference_changed", 3, m0)
    check("set_reference G3 -> ack and reference_changed 195.998 Hz by supervisor (G3 = 440 * 2^(-14/12))",
          ack and ack.get("type") == "ack" and ev and abs(ev["payload"]["reference_hz"] - 195.998) < 0.001
          and ev.get("by") == "supervisor", "docs/protocol.md set_reference; ISO 16 (A4 = 440 Hz)", short(ev))
    late = await ctx.open("late observer 3")
    h = await ctx.hello_of(late)
    check("a new connection's hello shows the new reference", h and abs(h.get("reference_hz", 0) - 195.998) < 0.001,
          ref + " hello.reference_hz", short(h and h.get("reference_hz")))
    await late.close()
    m0 = len(mon.msgs)
    await sup.request({"type": "start_exercise", "id": "x-5", "preset": "sustained_vowel"})
    bev = await mon.wait(lambda m: m.get("type") == "event" and m.get("kind") == "band_changed"
                         and m["payload"].get("name") == "target", 3, m0)
    target = next((b for b in (bev or {}).get("payload", {}).get("bands", []) if b.get("name") == "target"), None)
    check("a preset started after set_reference follows it: -1st..+1st around 195.998 Hz = 184.997..207.652 Hz",
          target and abs(target["low_hz"] - 184.997) < 0.01 and abs(target["high_hz"] - 207.652) < 0.01,
          "config/exercises.jsonc; 195.998 * 2^(+-1/12)", short(bev))
    await sup.request({"type": "end_exercise", "id": "x-6"})
    err = await sup.request({"type": "set_reference", "id": "r-2", "reference": "A0"})
    check("set_reference below the search range -> bad_band", err and err.get("code") == "bad_band", ref + " set_reference",
          short(err))


async def test_bad_input(ctx):
    ref = "docs/protocol.md error codes"
    c = await ctx.open("bad input")
    h = await ctx.hello_of(c)
    limit = h["limits"]["max_message_bytes"]
    cases = [
        ("malformed JSON", '{"type":"ping","id":', "bad_json", None),
        ("JSON that is not an object", "[1,2,3]", "not_an_object", None),
        ("no type", '{"id":"t-0"}', "missing_field", None),
        ("an unknown type", '{"type":"dance","id":"u-1"}', "unknown_type", None),
        ("a string for a boolean", '{"type":"subscribe","id":"w-1","settled":"yes"}', "wrong_type", "w-1"),
        ("a fraction for an integer", '{"type":"subscribe","id":"w-2","rate":{"every":2.5}}', "wrong_type", "w-2"),
        ("a number for the id", '{"type":"ping","id":7}', "wrong_type", None),
        ("an unknown field", '{"type":"ping","id":"f-1","extra":true}', "unknown_field", "f-1"),
        ("an unknown field in rate", '{"type":"subscribe","id":"f-2","rate":{"every":2,"phase":1}}', "unknown_field", "f-2"),
        ("every 0", '{"type":"subscribe","id":"r-1","rate":{"every":0}}', "out_of_range", "r-1"),
        ("an unknown frame field", '{"type":"subscribe","id":"r-2","fields":["pitch"]}', "out_of_range", "r-2"),
        ("a mark without label", '{"type":"mark","id":"m-9"}', "missing_field", "m-9"),
    ]
    for label, text, code, rid in cases:
        err = await c.next_error(text)
        ok = err is not None and err.get("code") == code and (rid is None or err.get("id") == rid)
        check(f"{label} -> {code}" + (f" with id {rid}" if rid else ""), ok, ref, short(err))
    pong = await c.request({"type": "ping", "id": "still-open"})
    check("the connection stays usable after refused requests", pong and pong.get("type") == "pong", ref, short(pong))

    # Size: exactly the limit is read; above it too_large; above four times it the connection is failed.
    body = '{"type":"ping","id":"exact"}'
    exact = body + " " * (limit - len(body))
    start = len(c.msgs)
    await c.send(exact)
    pong = await c.wait(lambda m: m.get("id") == "exact", 3, start)
    check(f"a message of exactly max_message_bytes ({limit}) is read", pong and pong.get("type") == "pong",
          "docs/protocol.md Connection: hello.limits.max_message_bytes", short(pong))
    big = '{"type":"mark","id":"big","label":"' + "x" * limit + '"}'
    err = await c.next_error(big)
    check(f"a message longer than max_message_bytes ({len(big)} bytes) -> too_large, connection open",
          err and err.get("code") == "too_large" and not c.closed.is_set(),
          "docs/protocol.md Connection: longer ones get too_large", short(err))
    pong = await c.request({"type": "ping", "id": "after-big"})
    check("the connection stays usable after too_large", pong and pong.get("type") == "pong", ref, short(pong))
    await c.close()

    huge = await ctx.open("oversize")
    await ctx.hello_of(huge)
    await huge.send('{"type":"ping","id":"huge","pad":"' + "y" * (4 * limit + 16) + '"}')
    closed = await huge.wait_closed(5)
    check("a message over four times max_message_bytes closes the connection with 1009",
          closed and huge.close_code == 1009,
          "RFC 6455 §7.4.1 close code 1009 (message too big); docs/protocol.md Connection",
          f"code {huge.close_code} {huge.close_reason!r}")

    binary = await ctx.open("binary")
    await ctx.hello_of(binary)
    await binary.send(b'{"type":"ping","id":"bin"}')
    closed = await binary.wait_closed(5)
    check("a binary message closes the connection with 1003", closed and binary.close_code == 1003,
          "RFC 6455 §7.4.1 close code 1003 (unsupported data); docs/protocol.md Connection",
          f"code {binary.close_code} {binary.close_reason!r}")

    # A flood of pings: the burst is served, then rate_limited, then the connection is closed with 1008.
    flood = await ctx.open("flood")
    await ctx.hello_of(flood)
    t0 = time.monotonic()
    sent = 0
    for i in range(4000):
        if flood.closed.is_set() or not await flood.send({"type": "ping", "id": f"f{i}"}):
            break
        sent += 1
        if i % 100 == 99:
            await asyncio.sleep(0)
    closed = await flood.wait_closed(5)
    elapsed = time.monotonic() - t0
    pongs = flood.of_type("pong")
    limited = [m for m in flood.of_type("error") if m.get("code") == "rate_limited"]
    others = [m for m in flood.of_type("error") if m.get("code") != "rate_limited"]
    # rate_limited is decided before a message is parsed (so that malformed messages pay too): it carries
    # no id (docs/protocol.md, error).
    check("a flood of pings: the burst is answered, then rate_limited errors (without id: not parsed)",
          limited and all("id" not in m for m in limited) and not others
          and 1 <= len(pongs) <= REQUEST_BURST + REQUESTS_PER_S * elapsed + 1,
          "docs/protocol.md error rate_limited; config request_burst 40, requests_per_s 20",
          f"{sent} sent, {len(pongs)} pongs, {len(limited)} rate_limited in {elapsed:.2f} s")
    check("the flood is closed with 1008 after 100 refused requests in a row", closed and flood.close_code == 1008
          and "refused" in (flood.close_reason or ""),
          "RFC 6455 §7.4.1 close code 1008 (policy violation); docs/protocol.md Connection",
          f"code {flood.close_code} {flood.close_reason!r}")


async def test_slow_clients(ctx):
    """Clients that do not keep up, side by side (about 10 s)."""
    full = {"type": "subscribe", "id": "s-full", "rate": "hop", "settled": True}

    async def stalled(n, seconds):
        # Stops reading altogether, then comes back: by then the daemon has given up on it.
        c = await ctx.open(f"stalled {n}", pump=False, rcvbuf=SMALL_RCVBUF, max_queue=1, read_limit=1024)
        await c.recv(3)
        await c.send(full)
        await asyncio.sleep(seconds)
        await c.wait_closed(6)
        return c

    async def intermittent(n, delay):
        # Stops reading for a while (long enough to fill the kernel buffers and drop), then catches up; again.
        await asyncio.sleep(delay)
        c = await ctx.open(f"intermittent {n}", pump=False, rcvbuf=SMALL_RCVBUF, max_queue=1, read_limit=1024)
        await c.recv(3)
        await c.send(full)
        await c.collect(0.5)
        pings = []
        c.buffered = []  # messages read after each stall before its first gap: what the buffers held
        stall = 1.7
        for cycle in range(5):
            pid = f"stall-{cycle}"
            await c.send({"type": "ping", "id": pid})  # answered while the client does not read: never dropped
            pings.append(pid)
            await asyncio.sleep(stall)
            gaps_before, start = len(c.gaps), len(c.msgs)
            await c.collect(1.0)
            if len(c.gaps) > gaps_before:
                c.buffered.append(c.gaps[gaps_before][0] - start)
            if c.closed.is_set() or (cycle >= 1 and c.gaps):
                break
            if not c.gaps:
                stall += 0.3
        # Keep reading until every dropped frame has been reported (the report follows the catching up).
        deadline = time.monotonic() + 4.0
        while not c.closed.is_set() and time.monotonic() < deadline:
            await c.collect(0.25)
            missing = sum(k for _, k in c.gaps)
            reported = sum(m["payload"]["count"] for m in c.events("dropped_frames"))
            if missing and missing == reported:
                break
        await c.collect(0.3)
        return c, pings

    start = time.monotonic()
    *stalls, (inter1, pings1), (inter2, pings2) = await asyncio.gather(
        stalled(1, 5.5), stalled(2, 6.5), intermittent(1, 0.0), intermittent(2, 0.4))
    ctx.phases["slow clients"] = (start, time.monotonic())

    ref_slow = f"docs/protocol.md Connection; server.h: behind for longer than slow_client_s ({SLOW_CLIENT_S:g} s) -> 1008"
    for stall in stalls:
        check(f"a client that stops reading ({stall.name}) is disconnected by the daemon",
              stall.closed.is_set() and stall.close_code in (1008, 1006),
              ref_slow + " (1006 when the close frame could not get past the unread data)",
              f"code {stall.close_code} {stall.close_reason!r}, {len(stall.msgs)} messages")
    if any(s.close_code == 1006 for s in stalls):
        print("NOTE: a stalled client that saw no close frame (1006) was shut without one: the daemon's close frame "
              "waits behind the message it was writing, and the socket is shut kCloseGrace (0.5 s) later", flush=True)
    for c, pings in ((inter1, pings1), (inter2, pings2)):
        check_intermittent(c, pings, ref_slow)
    for conn in stalls + [inter1, inter2]:
        check(f"{conn.name}: every message is JSON and seq only increases", not conn.not_json and not conn.seq_errors,
              "docs/protocol.md Conventions: seq, one more for each message",
              f"{conn.not_json} not JSON; {conn.seq_errors[:2]}")
    await inter1.close()
    await inter2.close()


def check_intermittent(c, pings, ref_slow):
    ref_drop = "docs/protocol.md Conventions: a gap in seq means dropped messages, only frame and settled, dropped_frames tells how many"
    name = c.name
    # A message that arrives damaged (not JSON, or a seq that does not increase) upsets the counts below.
    damaged = c.not_json + len(c.seq_errors)
    note = f"; {damaged} damaged message(s) on this connection, see below" if damaged else ""
    check(f"{name}: a client that stops now and then is not closed while it catches up in time", not c.closed.is_set(),
          ref_slow, f"code {c.close_code} {c.close_reason!r} {c.close_cause}")
    missing = sum(n for _, n in c.gaps)
    drops = c.events("dropped_frames")
    reported = sum(m["payload"]["count"] for m in drops)
    check(f"{name}: it sees gaps in seq and dropped_frames events", missing > 0 and drops, ref_drop,
          f"{len(c.gaps)} gaps, {missing} seq values missing, {len(drops)} dropped_frames events; "
          f"messages buffered before the first gap of a stall: {getattr(c, 'buffered', [])}")
    check(f"{name}: the dropped_frames counts add up to the missing seq values once it has caught up",
          missing == reported, ref_drop, f"missing {missing}, reported {reported}{note}")
    # Each report counts drops made before it was queued, so it never reports more than went missing before it;
    # frames queued before a report and dropped after it are counted by the next report.
    over = []
    cum = 0
    for pos, m in enumerate(c.msgs):
        if m.get("type") == "event" and m.get("kind") == "dropped_frames":
            cum += m["payload"]["count"]
            before = sum(n for p, n in c.gaps if p <= pos)
            if cum > before:
                over.append((m["seq"], cum, before))
    check(f"{name}: no dropped_frames report counts more than the seq values missing before it", not over, ref_drop,
          f"{over[:3]}{note}")
    # Which messages went missing: frame indices and settled indices skipped must account for every seq gap.
    frames = c.of_type("frame")
    settled = c.of_type("settled")
    lost_frames = sum(x - 1 for x in index_steps(frames) if x > 1)
    lost_settled = sum(x - 1 for x in index_steps(settled) if x > 1)
    check(f"{name}: only frame and settled messages were dropped (skipped indices account for every missing seq)",
          lost_frames + lost_settled == missing and all(x >= 1 for x in index_steps(frames) + index_steps(settled)),
          ref_drop, f"frames skipped {lost_frames}, settled skipped {lost_settled}, seq missing {missing}{note}")
    pongs = {m.get("id") for m in c.of_type("pong")}
    check(f"{name}: pongs asked for while not reading all arrive", set(pings) <= pongs,
          "docs/protocol.md: only frame and settled are ever dropped", f"asked {pings}, got {sorted(pongs)}")
    stats = c.of_type("stats")
    steps = [round(b["time_s"] - a["time_s"], 6) for a, b in zip(stats, stats[1:])]
    check(f"{name}: no stats dropped (consecutive stats 0.5 s apart)",
          len(stats) >= 4 and all(abs(x - 0.5) < 1e-3 for x in steps),
          "docs/protocol.md: only frame and settled are ever dropped; config stats_interval_s 0.5",
          f"{len(stats)} stats, steps {sorted(set(steps))}")


def check_monitor(ctx, phase):
    if phase not in ctx.phases:
        return
    mon = ctx.monitor
    t0, t1 = ctx.phases[phase]
    idx = [i for i, t in enumerate(mon.times) if t0 <= t <= t1 and mon.msgs[i].get("type") == "frame"]
    frames = [mon.msgs[i] for i in idx]
    times = [mon.times[i] for i in idx]
    gaps = seq_contiguous(mon, idx[0], idx[-1] + 1) if idx else []
    steps = index_steps(frames)
    waits = [b - a for a, b in zip(times, times[1:])]
    advance = (frames[-1]["index"] - frames[0]["index"]) * ctx.hop_s if len(frames) > 1 else 0.0
    check(f"during {phase}: a subscribed client keeps receiving every frame (seq contiguous, index steps of 4)",
          len(frames) >= 30 and not gaps and all(x == 4 for x in steps),
          "docs/protocol.md: drops are per connection; server.h bounded queues",
          f"{len(frames)} frames in {t1 - t0:.1f} s, gaps {gaps[:3]}, steps {sorted(set(steps))}")
    check(f"during {phase}: the index advances steadily", waits and max(waits) < 0.75
          and advance > 0.5 * (times[-1] - times[0]),
          "audio clock in real time (demo source)",
          f"longest wait {max(waits) if waits else 0:.3f} s, {advance:.2f} s of audio in {times[-1] - times[0]:.2f} s"
          if times else "no frames")


def check_voice_and_stats(ctx):
    mon = ctx.monitor
    lo, hi = ctx.hello["f0_range_hz"]["min"], ctx.hello["f0_range_hz"]["max"]
    frames = mon.of_type("frame")
    voiced = [f for f in frames if f.get("f0_hz") is not None]
    unvoiced = [f for f in frames if f.get("f0_hz") is None]
    f0 = [f["f0_hz"] for f in voiced]
    check("the demo voice gives voiced frames with F0 within the search range",
          len(voiced) > 50 and all(lo <= x <= hi for x in f0), "docs/protocol.md frame; hello.f0_range_hz",
          f"{len(voiced)} voiced of {len(frames)}, F0 {min(f0) if f0 else None}..{max(f0) if f0 else None} Hz")
    check("and unvoiced frames with f0_hz null", len(unvoiced) > 20, "docs/protocol.md: F0 null when unvoiced",
          f"{len(unvoiced)} unvoiced")
    check("voicing above 0.5 exactly when f0_hz is a number", all(f["voicing"] > 0.5 for f in voiced)
          and all(f["voicing"] <= 0.5 for f in unvoiced), "docs/protocol.md frame: voiced above 0.5", "")
    check("confidence 0 when unvoiced", all(f["confidence"] == 0 for f in unvoiced),
          "docs/protocol.md frame: confidence 0 when unvoiced", "")
    stats = mon.of_type("stats")
    steps = [round(b["time_s"] - a["time_s"], 6) for a, b in zip(stats, stats[1:])]
    bad = [s for s in stats if not (0 <= s["voiced_fraction"] <= 1 and s["window_s"] <= 5.0 + 1e-9 and
           (s["f0_p50_hz"] is None or s["f0_p5_hz"] <= s["f0_p50_hz"] <= s["f0_p95_hz"]))]
    check("stats every 0.5 s of audio, percentiles in order, window at most 5 s", len(stats) >= 10
          and all(abs(x - 0.5) < 1e-3 for x in steps) and not bad,
          "docs/protocol.md stats; config stats_interval_s 0.5, stats_window_s 5",
          f"{len(stats)} stats, steps {sorted(set(steps))[:4]}, bad {short(bad[:1])}")
    now = time.monotonic()
    lacking = [c.name for c in Conn.all if c.pumped and ((c.closed_at or now) - c.opened_at) >= 2.0
               and not c.of_type("stats")]
    long_lived = [c for c in Conn.all if c.pumped and ((c.closed_at or now) - c.opened_at) >= 2.0]
    check("every connection open for 2 s or more received stats, subscribed or not", long_lived and not lacking,
          "docs/protocol.md Connection: statistics go to every connection",
          f"{len(long_lived)} connections; without stats: {lacking}")
    check("the monitor lost nothing in the whole run", not mon.gaps and not mon.seq_errors,
          "docs/protocol.md Conventions: seq", f"{mon.gaps[:3]} {mon.seq_errors[:2]}")


async def test_sigterm(ctx):
    d = ctx.daemon
    busy = await ctx.open("subscribed at SIGTERM")
    await ctx.hello_of(busy)
    await busy.request({"type": "subscribe", "id": "s-last", "settled": True})
    await asyncio.sleep(0.3)
    open_conns = [c for c in Conn.all if c.pumped and not c.closed.is_set()]
    t0 = time.monotonic()
    d.proc.send_signal(signal.SIGTERM)
    try:
        code = await asyncio.wait_for(d.proc.wait(), 1.5)
    except asyncio.TimeoutError:
        code = None
    took = time.monotonic() - t0
    await asyncio.gather(*(c.wait_closed(max(0.1, 1.6 - (time.monotonic() - t0))) for c in open_conns))
    wrong = [(c.name, c.close_code, c.close_reason) for c in open_conns if c.close_code != 1001]
    check("SIGTERM: every client receives close code 1001", open_conns and not wrong,
          "RFC 6455 §7.4.1 close code 1001 (going away); docs/protocol.md Connection",
          f"{len(open_conns)} clients; other codes: {wrong[:4]}")
    late = [c.name for c in open_conns if c.closed_at is None or c.closed_at - t0 > 1.5]
    check("SIGTERM: the clients are closed within 1.5 s", not late, "server.h: stop() returns within about a second",
          f"late: {late}")
    check("SIGTERM: the daemon exits 0 within 1.5 s", code == 0, "main.cpp: SIGTERM stops cleanly",
          f"exit {code} after {took:.2f} s")


async def test_missing_web_root(exe, workdir):
    """A second daemon whose web_root does not exist: it must serve nothing, least of all files elsewhere."""
    d = Daemon(exe, workdir, workdir / "no-such-folder")
    if not await d.start():
        return
    ref = "server.cpp serve_file: only files inside web_root"
    status, _, _ = await raw_http(d, "GET", "/")
    check("web_root missing: GET / -> 404", status == 404, ref, f"got {status}")
    for label, target, secret in [
            ("//etc/passwd", "//etc/passwd", b"root:"),
            ("/<token_dir>/supervisor.token", "/" + str(d.token_dir / "supervisor.token"), d.supervisor_token.encode()),
            ("/<token_dir>/lab.token", "/" + str(d.token_dir / "lab.token"), d.lab_token.encode())]:
        status, _, body = await raw_http(d, "GET", target)
        check(f"web_root missing: GET {label} serves nothing", status in (400, 404) and secret not in body, ref,
              f"GET {target}: {status}, {len(body)} bytes" + (", the file's content" if secret in body else ""))
    d.proc.send_signal(signal.SIGTERM)
    try:
        code = await asyncio.wait_for(d.proc.wait(), 3)
    except asyncio.TimeoutError:
        code = None
    check("web_root missing: the daemon exits 0 on SIGTERM", code == 0, "main.cpp", f"exit {code}")


def validate_all(schema_dir):
    store = {}
    for path in sorted(schema_dir.glob("*.json")):
        store[path.resolve().as_uri()] = json.loads(path.read_text(encoding="utf-8"))

    def validator(name):
        uri = (schema_dir / name).resolve().as_uri()
        return jsonschema.Draft7Validator(store[uri], resolver=jsonschema.RefResolver(base_uri=uri, referrer=store[uri],
                                                                                      store=store))
    union = validator("server_message.json")
    by_type = {}
    failures = []
    for conn, text in received:
        if text is None:
            failures.append(f"{conn}: a binary message")
            continue
        try:
            message = json.loads(text)
        except ValueError as e:
            failures.append(f"{conn}: not JSON ({e}): {short(repr(text), 200)}")
            continue
        if union.is_valid(message):
            continue
        kind = message.get("type") if isinstance(message, dict) else None
        reason = "matches no message type"
        if isinstance(kind, str) and (schema_dir / f"{kind}.json").is_file():
            v = by_type.setdefault(kind, validator(f"{kind}.json"))
            error = next(iter(v.iter_errors(message)), None)
            if error is not None:
                reason = f"{'/'.join(map(str, error.absolute_path)) or '(root)'}: {error.message[:200]}"
        failures.append(f"{conn}: {reason}: {short(text, 200)}")
    check(f"every message received validates against server_message.json ({len(received)} messages)",
          received and not failures, "protocol/schema/server_message.json (draft-07)",
          f"{len(failures)} invalid" + (": " + " || ".join(failures[:4]) if failures else ""))
    return len(received)


async def guarded(name, coroutine):
    """Runs one test; an exception (a refused handshake, a closed connection) is a FAIL, not the end of the run."""
    try:
        return await coroutine
    except Exception as e:  # noqa: BLE001 -- any failure of the step is reported as such
        check(f"{name} ran to the end", False, "protocol_live_test.py", f"{type(e).__name__}: {e}")
        return None


def guarded_sync(name, function, *args):
    try:
        return function(*args)
    except Exception as e:  # noqa: BLE001 -- any failure of the step is reported as such
        check(f"{name} ran to the end", False, "protocol_live_test.py", f"{type(e).__name__}: {e}")
        return None


async def run(args, workdir):
    source = pathlib.Path(args.source).resolve()
    exe = pathlib.Path(args.daemon).resolve()
    daemon = Daemon(exe, workdir / "main", source / "clients" / "web")
    ctx = Ctx(daemon)
    try:
        if not await daemon.start():
            return
        if not await guarded("test_hello_and_roles", test_hello_and_roles(ctx)):
            return
        ctx.monitor = await ctx.open("monitor")
        await ctx.hello_of(ctx.monitor)
        ack = await ctx.monitor.request({"type": "subscribe", "id": "s-monitor", "rate": {"every": 4}})
        check("monitor subscribed", ack and ack.get("type") == "ack", "docs/protocol.md subscribe", short(ack))
        await guarded("test_handshake_refusals", test_handshake_refusals(ctx))
        await guarded("test_static_files", test_static_files(ctx))
        await guarded("test_subscriptions", test_subscriptions(ctx))
        await guarded("test_requests", test_requests(ctx))
        start = time.monotonic()
        await guarded("test_bad_input", test_bad_input(ctx))
        await asyncio.sleep(1.0)
        ctx.phases["bad input and the flood"] = (start, time.monotonic())
        await guarded("test_slow_clients", test_slow_clients(ctx))
        guarded_sync("check_monitor", check_monitor, ctx, "bad input and the flood")
        guarded_sync("check_monitor", check_monitor, ctx, "slow clients")
        guarded_sync("check_voice_and_stats", check_voice_and_stats, ctx)
        first = [c.name for c in Conn.all if not c.msgs or c.msgs[0].get("type") != "hello" or c.msgs[0].get("seq") != 1]
        check(f"every connection's first message is hello with seq 1 ({len(Conn.all)} connections)", not first,
              "docs/protocol.md: hello first on every connection", str(first[:4]))
        await guarded("test_sigterm", test_sigterm(ctx))
        log = daemon.log_text()
        check("the log names the slow client it closed", "stayed behind for more than" in log,
              "server.cpp push_frame log line", "")
        await guarded("test_missing_web_root", test_missing_web_root(exe, workdir / "no-web-root"))
    finally:
        for d in Daemon.started:
            await d.kill()
        for c in Conn.all:
            if c.pump is not None and not c.pump.done():
                c.pump.cancel()


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--daemon", required=True, help="the pitchwired program")
    parser.add_argument("--schemas", required=True, help="the folder protocol/schema")
    parser.add_argument("--source", required=True, help="the repository (for clients/web)")
    parser.add_argument("--keep", action="store_true", help="keep the temporary folder (config, log, stderr)")
    args = parser.parse_args()
    t0 = time.monotonic()
    workdir = pathlib.Path(tempfile.mkdtemp(prefix="pitchwire-protocol-live-"))
    try:
        try:
            asyncio.run(asyncio.wait_for(run(args, workdir), TOTAL_TIMEOUT_S))
        except asyncio.TimeoutError:
            check("the test finished in time", False, f"{TOTAL_TIMEOUT_S:g} s", "a step hung")
        count = validate_all(pathlib.Path(args.schemas))
        print(f"validated {count} messages from {len(Conn.all)} connections against server_message.json", flush=True)
    finally:
        if args.keep:
            print(f"kept {workdir}")
        else:
            import shutil
            shutil.rmtree(workdir, ignore_errors=True)
    failed = [name for name, ok in results if not ok]
    print(f"{len(results) - len(failed)} of {len(results)} checks passed in {time.monotonic() - t0:.1f} s", flush=True)
    if failed:
        print("failed: " + "; ".join(failed), flush=True)
    return 1 if failed else 0


if __name__ == "__main__":
    sys.exit(main())
