#!/usr/bin/python3
"""session_record_test.py: the session record of a running pitchwired, killed with SIGKILL and restarted.

  session_record_test.py --daemon PATH/pitchwired

Starts `pitchwired --input demo` with a session folder of its own, subscribes to settled frames over the
protocol, adds a marker as a lab client, then kills the daemon with SIGKILL after a few seconds. Checks
(docs/sessions.md): one private session folder (0700, files 0600); the log holds the settled frames up to at
most one second before the last one a client received (the recorder flushes at least every second), and the
marker; no summary yet. Then starts the daemon again and stops it with SIGTERM: the killed session gets its
summary (closed "recovered", its frames counted from its log), the new one a summary of its own (closed
"stopped"). The first run also keeps its input audio (--record-audio --audio-consent): audio.wav is private
and, although the daemon was killed, a readable WAV that reaches to within a second of the last frame a
client received; the second run, without the flags, keeps no audio.
"""
import argparse
import asyncio
import json
import os
import signal
import stat
import sys
import tempfile
import time
import wave
from pathlib import Path

import websockets

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "support"))
from pitchwired_process import check, finish, start, token, write_config  # noqa: E402



async def listen(port, lab_token, seconds):
    """Subscribes to settled frames, adds a marker as a lab client; returns the last settled time received."""
    last = None
    async with websockets.connect(f"ws://127.0.0.1:{port}/ws", subprotocols=["pitchwire.v1"],
                                  origin=f"http://127.0.0.1:{port}") as ws, \
            websockets.connect(f"ws://127.0.0.1:{port}/ws?token={lab_token}", subprotocols=["pitchwire.v1"],
                               origin=f"http://127.0.0.1:{port}") as lab:
        await ws.send(json.dumps({"type": "subscribe", "id": "s1", "settled": True}))
        await lab.send(json.dumps({"type": "mark", "id": "m1", "label": "probe tone 1"}))
        end = time.monotonic() + seconds
        while time.monotonic() < end:
            try:
                msg = json.loads(await asyncio.wait_for(ws.recv(), 0.5))
            except asyncio.TimeoutError:
                continue
            if msg.get("type") == "settled":
                last = msg["time_s"]
    return last


def read_log(path):
    lines, torn = [], 0
    for raw in path.read_text(encoding="utf-8").splitlines():
        try:
            lines.append(json.loads(raw))
        except json.JSONDecodeError:
            torn += 1
    return lines, torn


def mode(path):
    return stat.S_IMODE(os.stat(path).st_mode)


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--daemon", required=True)
    args = ap.parse_args()
    with tempfile.TemporaryDirectory(prefix="pitchwire-session-") as tmp:
        tmp = Path(tmp)
        sessions = tmp / "sessions"
        config = write_config(tmp)
        # A lab token file others could read is not trusted: the daemon makes a new one (docs/daemon.md).
        (tmp / "tokens").mkdir(mode=0o700)
        exposed = "a5" * 16
        (tmp / "tokens" / "lab.token").write_text(exposed + "\n", encoding="utf-8")
        os.chmod(tmp / "tokens" / "lab.token", 0o644)
        proc, port = start(args.daemon, config, extra=["--record-audio", "--audio-consent"])
        try:
            lab_token = token(tmp, "lab")
            last_received = asyncio.run(listen(port, lab_token, 4.0))
        finally:
            proc.send_signal(signal.SIGKILL)
            proc.wait(10)
        check("a token file readable by others was replaced by a new token, private (0600)",
              lab_token != exposed and len(lab_token) == 32 and mode(tmp / "tokens" / "lab.token") == 0o600,
              f"{mode(tmp / 'tokens' / 'lab.token'):o}")
        check("a client received settled frames", last_received is not None and last_received > 2.0, str(last_received))
        folders = sorted(p for p in sessions.iterdir() if p.is_dir())
        if not check("one session folder after the kill", len(folders) == 1, str(folders)):
            return 1
        first = folders[0]
        check("sessions folder and session folder are private (0700)",
              mode(sessions) == 0o700 and mode(first) == 0o700, f"{mode(sessions):o} {mode(first):o}")
        check("log and CSV are private (0600)", mode(first / "session.jsonl") == 0o600 and mode(first / "frames.csv") == 0o600)
        check("no summary yet (killed)", not (first / "summary.json").exists())
        log, torn = read_log(first / "session.jsonl")
        settled = [x for x in log if x.get("type") == "settled"]
        last_logged = max((x["time_s"] for x in settled), default=None)
        check("the log keeps the frames up to at most 1 s before the last one a client received",
              last_logged is not None and last_received is not None and last_logged >= last_received - 1.0,
              f"last logged {last_logged}, last received {last_received}, torn lines {torn}")
        markers = [x for x in log if x.get("type") == "event" and x.get("kind") == "marker"]
        check("the marker is in the log with its wall clock and who added it (by lab)",
              len(markers) == 1 and markers[0]["payload"]["label"] == "probe tone 1" and "wall" in markers[0]
              and markers[0].get("by") == "lab", str(markers))
        if markers:
            pl = markers[0]["payload"]
            check("the marker is stamped with the input sample index of its time (16 kHz demo voice) and the wall clock",
                  pl.get("sample") == round(markers[0]["time_s"] * 16000) and isinstance(pl.get("wall"), str)
                  and pl["wall"].endswith("Z"), str(pl))
        check("the log's first line says what it is", log and log[0].get("type") == "session"
              and log[0].get("format") == "pitchwire.session.v1", str(log[:1]))
        audio = first / "audio.wav"
        if check("the input audio is kept (--record-audio --audio-consent), named in the log's first line",
                 audio.exists() and log and log[0].get("audio_file") == "audio.wav", str(log[:1])):
            check("audio.wav is private (0600)", mode(audio) == 0o600, f"{mode(audio):o}")
            try:
                with wave.open(str(audio), "rb") as w:
                    rate, width, channels, frames = w.getframerate(), w.getsampwidth(), w.getnchannels(), w.getnframes()
                    data = w.readframes(frames)
                seconds = frames / rate
                check("audio.wav of the killed run is a readable 24-bit mono WAV at the demo's 16 kHz",
                      (rate, width, channels) == (16000, 3, 1) and len(data) == frames * 3, f"{rate} {width} {channels}")
                check("it reaches to within 1 s of the last frame a client received (header kept up to date)",
                      last_received is not None and seconds >= last_received - 1.0, f"{seconds:.3f} s vs {last_received}")
                check("it holds the voice, not silence", any(b != 0 for b in data[: 3 * 16000 * 2]))
            except (wave.Error, EOFError) as e:
                check("audio.wav of the killed run is readable", False, str(e))

        # Start again: the killed session is closed from its log; the new one gets its own folder.
        proc, port = start(args.daemon, config)
        time.sleep(1.5)
        proc.send_signal(signal.SIGTERM)
        code = proc.wait(10)
        check("restarted daemon stops cleanly on SIGTERM", code == 0, f"exit {code}")
        summary_path = first / "summary.json"
        if check("the killed session now has a summary", summary_path.exists()):
            s = json.loads(summary_path.read_text(encoding="utf-8"))
            check("its summary says it was recovered and counts the frames of its log",
                  s.get("closed") == "recovered" and s.get("frames") == len(settled) and s.get("markers") == 1,
                  f"closed {s.get('closed')}, frames {s.get('frames')} vs {len(settled)} logged, markers {s.get('markers')}")
            check("the summary is private (0600)", mode(summary_path) == 0o600)
        folders = sorted(p for p in sessions.iterdir() if p.is_dir())
        check("the second run has a folder of its own", len(folders) == 2, str(folders))
        if len(folders) == 2:
            second = [f for f in folders if f != first][0]
            s2 = json.loads((second / "summary.json").read_text(encoding="utf-8")) if (second / "summary.json").exists() else {}
            check("the second run's summary says it was stopped", s2.get("closed") == "stopped" and s2.get("frames", 0) > 0,
                  str(s2))
            check("the second run, without --record-audio, keeps no audio", not (second / "audio.wav").exists())
        log_text = (tmp / "pitchwired.log").read_text(encoding="utf-8", errors="replace")
        check("the daemon's log names the session it closed", first.name in log_text and "was not closed" in log_text)
        check("the daemon's log says why it replaced the token", "lab.token: readable by others" in log_text)
    return finish()


if __name__ == "__main__":
    sys.exit(main())
