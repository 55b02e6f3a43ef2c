#!/usr/bin/env python3
"""jack_live.py: pitchwired end to end through a real sound server, and its latency.

Starts a JACK server of its own (dummy driver: no sound hardware, a real JACK graph and real-time periods),
a JACK client that plays a synthetic vowel of known F0 (pitchwire_jack_player), and
`pitchwired --input device:jack/<player>`, which captures the player's output port through RtAudio. A real
WebSocket client (Debian's python3-websockets) subscribes and reads frames.

  jack_live.py check   PITCHWIRED PLAYER       end-to-end test (ctest): frames match the played F0
  jack_live.py latency PITCHWIRED PLAYER [--steps N] [--check]
                                               latency benchmark: F0 steps, time from the step's first
                                               sample entering JACK's buffer to the first frame within
                                               50 cents of the new F0 reaching the client; p50/p95/p99

Both clocks are CLOCK_MONOTONIC: the player stamps each step with std::chrono::steady_clock when the JACK
process callback that writes the step's first sample begins, and this script stamps each frame with
time.monotonic_ns() when the WebSocket read completes.
"""
import argparse
import asyncio
import fcntl
import json
import math
import os
import re
import shutil
import signal
import statistics
import subprocess
import sys
import tempfile
import threading
import time

import websockets

RATE = 48000
PERIOD = 256


def cents(f, ref):
    """1200 * log2(f / ref): cents (common practice)."""
    return 1200.0 * math.log2(f / ref)


class Processes:
    """Starts the JACK server, the player and the daemon; stops all of them at the end."""

    def __init__(self, tmp):
        self.tmp = tmp
        self.procs = []
        self.env = dict(os.environ)
        # A server name of our own, so that a desktop's JACK server (if any) is neither used nor disturbed.
        self.env["JACK_DEFAULT_SERVER"] = f"pitchwire-live-{os.getpid()}"
        self.env["JACK_NO_AUDIO_RESERVATION"] = "1"
        self.env["XDG_STATE_HOME"] = os.path.join(tmp, "state")
        self.env["XDG_CONFIG_HOME"] = os.path.join(tmp, "config")

    def start(self, args, name, stdout=subprocess.DEVNULL):
        log = open(os.path.join(self.tmp, name + ".log"), "w")
        p = subprocess.Popen(args, env=self.env, stdout=stdout, stderr=log, text=True)
        self.procs.append(p)
        return p

    def log(self, name):
        with open(os.path.join(self.tmp, name + ".log")) as f:
            return f.read()[-3000:]

    def stop_all(self):
        for p in reversed(self.procs):
            if p.poll() is None:
                p.send_signal(signal.SIGTERM)
                try:
                    p.wait(timeout=5)
                except subprocess.TimeoutExpired:
                    p.kill()
                    p.wait()


def wait_for(predicate, timeout, what):
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if predicate():
            return
        time.sleep(0.05)
    raise RuntimeError(f"timed out after {timeout} s waiting for {what}")


def jack_ports(env):
    r = subprocess.run(["jack_lsp"], env=env, capture_output=True, text=True, timeout=10)
    return r.stdout.split() if r.returncode == 0 else []


def take_jack_lock(timeout=120):
    """Waits for the lock that the JACK tests share (tests/daemon/jack_fixture.h): libjack names a client's
    socket after the client only, so two JACK servers with clients at once on one machine clash. Held until
    this process exits."""
    fd = os.open(f"/tmp/pitchwire-jack-tests-{os.getuid()}.lock", os.O_RDWR | os.O_CREAT, 0o600)
    deadline = time.monotonic() + timeout
    while True:
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
            return fd
        except BlockingIOError:
            if time.monotonic() > deadline:
                raise RuntimeError("another JACK test held the lock for more than 120 s")
            time.sleep(0.1)


def start_all(procs, pitchwired, player, player_args):
    take_jack_lock()
    jackd = shutil.which("jackd")
    if not jackd:
        raise RuntimeError("jackd not found: install Debian's jackd2")
    procs.start([jackd, "--no-realtime", "-d", "dummy", "-r", str(RATE), "-p", str(PERIOD)], "jackd")
    wait_for(lambda: "system:capture_1" in jack_ports(procs.env), 20, "the JACK server")
    player_proc = procs.start([player, "--name", "pw_voice"] + player_args, "player", stdout=subprocess.PIPE)
    wait_for(lambda: "pw_voice:out" in jack_ports(procs.env), 20, "the player's port")
    config = os.path.join(procs.tmp, "pitchwired.jsonc")
    with open(config, "w") as f:
        json.dump({"token_dir": os.path.join(procs.tmp, "tokens"), "log_file": os.path.join(procs.tmp, "pw.log"),
                   "sample_rate_hz": RATE, "buffer_frames": PERIOD}, f)
    daemon = procs.start([pitchwired, "--input", "device:jack/pw_voice", "--port", "0", "--config", config],
                         "pitchwired", stdout=subprocess.PIPE)
    url = None
    deadline = time.monotonic() + 30
    while time.monotonic() < deadline and url is None:
        line = daemon.stdout.readline()
        if not line:
            if daemon.poll() is not None:
                raise RuntimeError("pitchwired exited: " + procs.log("pitchwired"))
            continue
        m = re.search(r"WebSocket (ws://\S+)", line)
        if m:
            url = m.group(1)
    if url is None:
        raise RuntimeError("pitchwired printed no WebSocket URL: " + procs.log("pitchwired"))
    return url, player_proc


async def read_frames(url, seconds, on_frame):
    async with websockets.connect(url, subprotocols=["pitchwire.v1"], max_size=2**20) as ws:
        hello = json.loads(await asyncio.wait_for(ws.recv(), 10))
        await ws.send(json.dumps({"type": "subscribe", "id": "s", "fields": ["f0_hz"]}))
        deadline = time.monotonic() + seconds
        while time.monotonic() < deadline:
            text = await asyncio.wait_for(ws.recv(), 5)
            t = time.monotonic_ns()
            m = json.loads(text)
            if m["type"] == "frame":
                on_frame(t, m)
        return hello


def check(args):
    f0 = 196.0  # G3
    with tempfile.TemporaryDirectory(prefix="pitchwire-live-") as tmp:
        procs = Processes(tmp)
        try:
            url, _ = start_all(procs, args.pitchwired, args.player, ["--f0", str(f0)])
            frames = []
            hello = asyncio.run(read_frames(url, 3.0, lambda t, m: frames.append(m)))
        finally:
            procs.stop_all()
    failures = []
    if hello["audio"]["sample_rate_hz"] != RATE:
        failures.append(f"hello announces {hello['audio']['sample_rate_hz']} Hz, the JACK server runs at {RATE}")
    # Skip the first 0.3 s of the subscription: the tracker's window and the HMM settle in.
    frames = frames[60:]
    voiced = [m["f0_hz"] for m in frames if m["f0_hz"] is not None]
    within = [f for f in voiced if abs(cents(f, f0)) <= 50.0]  # 50 cents: the RPA tolerance (Chu & Alwan 2009)
    print(f"frames {len(frames)}, voiced {len(voiced)}, within 50 cents of {f0} Hz: {len(within)}")
    if len(frames) < 400:
        failures.append(f"only {len(frames)} frames in 2.7 s (200 per second expected at 5 ms hops)")
    if voiced:
        med = statistics.median(voiced)
        print(f"median F0 {med:.2f} Hz ({cents(med, f0):+.1f} cents)")
        if abs(cents(med, f0)) > 50.0:
            failures.append(f"median F0 {med:.2f} Hz is more than 50 cents from {f0} Hz")
    if len(within) < 0.95 * max(1, len(frames)):
        failures.append(f"{len(within)} of {len(frames)} frames within 50 cents of {f0} Hz (95 % required)")
    for f in failures:
        print("FAIL:", f)
    print("PASS" if not failures else "")
    return 0 if not failures else 1


def latency(args):
    steps_hz = [165.0, 220.0, 147.0, 196.0]  # E3, A3, D3, G3: 3 to 7 semitones apart, no octave relations
    each_s = 0.6
    total_s = args.steps * each_s + 0.5
    events = []
    frames = []
    with tempfile.TemporaryDirectory(prefix="pitchwire-latency-") as tmp:
        procs = Processes(tmp)
        try:
            url, player = start_all(procs, args.pitchwired, args.player,
                                    ["--steps", ",".join(str(f) for f in steps_hz) + f":{each_s}", "--seconds", "3600"])

            def read_steps():
                for line in player.stdout:
                    parts = line.split()
                    if len(parts) == 4 and parts[0] == "step":
                        events.append((int(parts[1]), float(parts[2]), int(parts[3])))

            # The player steps from its start; a thread of its own reads its stamps while the client reads
            # frames (a daemon thread: the player runs until it is stopped below).
            threading.Thread(target=read_steps, daemon=True).start()
            asyncio.run(read_frames(url, total_s, lambda t, m: frames.append((t, m["f0_hz"]))))
        finally:
            procs.stop_all()
    if not frames:
        print("FAIL: no frames")
        return 1
    first_frame_ns = frames[0][0]
    lat_ms = []
    missed = 0
    for i, (index, f0, t_step) in enumerate(events):
        if t_step < first_frame_ns + 200_000_000:  # steps before the subscription settled
            continue
        t_next = events[i + 1][2] if i + 1 < len(events) else None
        if t_next is None:
            continue
        hit = next((t for t, f in frames if t > t_step and (t_next is None or t < t_next)
                    and f is not None and abs(cents(f, f0)) <= 50.0), None)
        if hit is None:
            missed += 1
        else:
            lat_ms.append((hit - t_step) / 1e6)
    if not lat_ms:
        print("FAIL: no step was measured")
        return 1
    lat_ms.sort()

    def pct(p):
        return lat_ms[min(len(lat_ms) - 1, int(round(p * (len(lat_ms) - 1))))]

    print(f"F0 steps measured {len(lat_ms)}, missed {missed}; latency ms p50 {pct(0.5):.1f}  p95 {pct(0.95):.1f}  "
          f"p99 {pct(0.99):.1f}  max {lat_ms[-1]:.1f}  (JACK dummy driver, {RATE} Hz, {PERIOD}-frame periods)")
    if args.check:
        ok = pct(0.95) <= 40.0 and missed == 0
        print("PASS" if ok else "FAIL: p95 above 40 ms or a step never reached")
        return 0 if ok else 1
    return 0


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("mode", choices=["check", "latency"])
    ap.add_argument("pitchwired")
    ap.add_argument("player")
    ap.add_argument("--steps", type=int, default=60, help="F0 steps to measure (latency)")
    ap.add_argument("--check", action="store_true", help="latency: fail unless p95 <= 40 ms")
    args = ap.parse_args()
    try:
        return check(args) if args.mode == "check" else latency(args)
    except RuntimeError as e:
        print("FAIL:", e)
        return 1


if __name__ == "__main__":
    sys.exit(main())
