#!/usr/bin/python3
"""exercise_e2e_test.py: a supervised exercise through a running pitchwired, checked against values known by
construction.

  exercise_e2e_test.py --daemon PATH/pitchwired

The voice is a file of our own making replayed in real time: a sine at G3 (195.998 Hz, A4 = 440 Hz in equal
temperament, common practice) of amplitude 0.5, whose level is 20*log10(0.5) = -6.02 dBFS (AES17: a
full-scale sine is 0 dBFS). The daemon runs with a calibration offset of 90 dB and a time dose limit of 2 s.
As the supervisor, the test sets the reference to G3, starts the sustained_vowel preset (its band "target"
is the reference +-1 semitone), lets it run about 3 s and ends it. Checks:

- hello carries the calibration offset; stats carry level_mean_db_spl = level_mean_dbfs + 90, and
  level_mean_dbfs = -6.02 dB within 0.1 dB;
- the session's doses in stats: cycle dose = 195.998 x time dose (a steady voice: Titze, Svec & Popolo
  2003), and one dose_limit event (voiced_s, limit 2) once 2 s of voicing have passed;
- the preset's band is decoded around the reference: G3 x 2^(+-1/12);
- the exercise summary: duration on the audio clock, voiced_fraction near 1, median F0 = 195.998 Hz within
  2 cents, p5-p95 range and SD under 0.05 semitone, cycle dose = F0 x voiced time within 1 %, every voiced
  frame inside the band, the preset's measures; who ended it (supervisor);
- the exercise's file in the session folder (private, 0600) holds the same summary, and the session log
  holds the exercise and dose events;
- a second exercise left running when the daemon gets SIGTERM is ended by the daemon (no `by`): its summary
  reaches the connection before the close, and its file is written.
"""
import argparse
import asyncio
import json
import math
import os
import signal
import stat
import struct
import sys
import tempfile
import time
import wave
from pathlib import Path

import websockets

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "support"))
from pitchwired_process import check, finish, start, token, write_config  # noqa: E402

G3 = 440.0 * 2 ** (-14 / 12)  # 195.998 Hz
AMPLITUDE = 0.5
RATE = 16000
SPL_OFFSET = 90.0
DOSE_LIMIT_S = 2.0



def write_tone(path, seconds):
    frames = bytearray()
    for i in range(int(seconds * RATE)):
        frames += struct.pack("<h", round(32767 * AMPLITUDE * math.sin(2 * math.pi * G3 * i / RATE)))
    with wave.open(str(path), "wb") as w:
        w.setnchannels(1)
        w.setsampwidth(2)
        w.setframerate(RATE)
        w.writeframes(bytes(frames))


class Conn:
    """One WebSocket connection that keeps every message it receives."""

    def __init__(self, ws):
        self.ws, self.messages, self.task = ws, [], None

    async def pump(self):
        try:
            async for raw in self.ws:
                self.messages.append(json.loads(raw))
        except websockets.ConnectionClosed:
            pass

    async def wait(self, pred, timeout, start=0):
        end = time.monotonic() + timeout
        while time.monotonic() < end:
            for m in self.messages[start:]:
                if pred(m):
                    return m
            await asyncio.sleep(0.02)
        return None

    async def request(self, msg, timeout=3.0):
        start = len(self.messages)
        await self.ws.send(json.dumps(msg))
        return await self.wait(lambda m: m.get("id") == msg["id"] and m.get("type") in ("ack", "error"), timeout, start)


async def session(port, token, proc):
    url = f"ws://127.0.0.1:{port}/ws"
    kw = {"subprotocols": ["pitchwire.v1"], "origin": f"http://127.0.0.1:{port}"}
    async with websockets.connect(f"{url}?token={token}", **kw) as ws:
        sup = Conn(ws)
        sup.task = asyncio.create_task(sup.pump())
        hello = await sup.wait(lambda m: m.get("type") == "hello", 3)
        check("hello carries the calibration offset (spl_offset_db 90)", hello and hello.get("spl_offset_db") == SPL_OFFSET,
              str(hello and hello.get("spl_offset_db")))
        await asyncio.sleep(0.6)  # past the tone's onset
        ack = await sup.request({"type": "set_reference", "id": "r1", "reference": "G3"})
        check("set_reference G3 -> ack", ack and ack.get("type") == "ack", str(ack))
        mark = len(sup.messages)
        ack = await sup.request({"type": "start_exercise", "id": "x1", "preset": "sustained_vowel", "label": "G3 tone"})
        started = await sup.wait(lambda m: m.get("type") == "event" and m.get("kind") == "exercise_started", 3, mark)
        band = await sup.wait(lambda m: m.get("type") == "event" and m.get("kind") == "band_changed", 3, mark)
        check("start_exercise -> ack and exercise_started", ack and ack.get("type") == "ack" and started is not None, str(ack))
        bands = (band or {}).get("payload", {}).get("bands", [])
        target = [b for b in bands if b.get("name") == "target"]
        check("the preset's band is G3 +-1 semitone (reference G3)", len(target) == 1
              and abs(target[0]["low_hz"] - G3 * 2 ** (-1 / 12)) < 0.01 and abs(target[0]["high_hz"] - G3 * 2 ** (1 / 12)) < 0.01,
              str(target))
        await asyncio.sleep(3.0)
        mark = len(sup.messages)
        ack = await sup.request({"type": "end_exercise", "id": "x2"})
        ended = await sup.wait(lambda m: m.get("type") == "event" and m.get("kind") == "exercise_ended", 3, mark)
        check("end_exercise -> ack and exercise_ended by the supervisor", ack and ack.get("type") == "ack" and ended
              and ended.get("by") == "supervisor", str(ended)[:200])
        await asyncio.sleep(0.7)  # one more stats message
        # A second exercise is still running when the daemon is told to stop: the daemon ends it (no `by`)
        # and its summary reaches the connection before the close.
        mark = len(sup.messages)
        await sup.request({"type": "start_exercise", "id": "x3", "preset": "reading"})
        await asyncio.sleep(0.5)
        proc.send_signal(signal.SIGTERM)
        at_stop = await sup.wait(lambda m: m.get("type") == "event" and m.get("kind") == "exercise_ended", 5, mark)
        check("an exercise running at SIGTERM is ended by the daemon (no `by`) and its summary sent before the close",
              at_stop is not None and at_stop["payload"]["preset"] == "reading" and "by" not in at_stop
              and at_stop["payload"]["summary"].get("voiced_s", 0) > 0.3, str(at_stop)[:200])
        await asyncio.wait_for(sup.task, 5)
        return sup.messages, started, ended


def cents(a, b):
    return 1200 * math.log2(a / b)


def check_stats(messages):
    stats = [m for m in messages if m.get("type") == "stats"]
    full = [s for s in stats if s["time_s"] > 2.4 and s["voiced_fraction"] > 0.99]
    check("stats over more than 2.4 s of voice arrived", len(full) >= 2, f"{len(stats)} stats, {len(full)} of them")
    for s in full[-2:]:
        check(f"stats at {s['time_s']:.2f} s: level_mean_dbfs = 20 log10(0.5) = -6.02 dBFS within 0.1 dB (AES17)",
              s["level_mean_dbfs"] is not None and abs(s["level_mean_dbfs"] - 20 * math.log10(AMPLITUDE)) < 0.1,
              str(s["level_mean_dbfs"]))
        check(f"stats at {s['time_s']:.2f} s: dB SPL = dBFS + 90 (calibration offset), mean and max",
              s["level_mean_db_spl"] is not None and abs(s["level_mean_db_spl"] - s["level_mean_dbfs"] - SPL_OFFSET) < 0.011
              and abs(s["level_max_db_spl"] - s["level_max_dbfs"] - SPL_OFFSET) < 0.011,
              f"{s['level_mean_db_spl']} {s['level_mean_dbfs']}")
        check(f"stats at {s['time_s']:.2f} s: semitones re the reference set (G3): median 0 within 0.02",
              s["reference_hz"] is not None and abs(s["reference_hz"] - G3) < 0.001 and abs(s["f0_p50_st"]) < 0.02,
              f"{s['reference_hz']} {s['f0_p50_st']}")
        dose, voiced = s["session_cycle_dose"], s["session_voiced_s"]
        check(f"stats at {s['time_s']:.2f} s: session cycle dose = 195.998 Hz x time dose within 0.5 %",
              voiced > 2 and abs(dose - G3 * voiced) < 0.005 * G3 * voiced, f"{dose} cycles, {voiced} s")
        check(f"stats at {s['time_s']:.2f} s: the time dose is the voiced time of the run (voice from its start)",
              abs(voiced - s["time_s"]) < 0.1, f"{voiced} s voiced at {s['time_s']} s")
    limits = [m for m in messages if m.get("type") == "event" and m.get("kind") == "dose_limit"]
    check("one dose_limit event (voiced_s, limit 2 s) when 2 s of voicing had passed",
          len(limits) == 1 and limits[0]["payload"]["measure"] == "voiced_s" and limits[0]["payload"]["limit"] == DOSE_LIMIT_S
          and abs(limits[0]["time_s"] - DOSE_LIMIT_S) < 0.1, str(limits))


def check_summary(started, ended):
    payload = ended["payload"]
    s = payload["summary"]
    duration = ended["time_s"] - started["time_s"]
    check("summary duration_s = end - start on the audio clock", abs(s["duration_s"] - duration) < 0.011,
          f"{s['duration_s']} vs {duration:.3f}")
    check("summary: voiced_fraction near 1 (a steady tone; a settle lag's worth of frames at each end)",
          s["voiced_fraction"] > 0.97, str(s["voiced_fraction"]))
    check("summary: median F0 = G3 (195.998 Hz) within 2 cents", abs(cents(s["f0_p50_hz"], G3)) < 2, str(s["f0_p50_hz"]))
    check("summary: min, p5, median, p95 and max within 0.05 semitone of 0 re the reference G3, which it names",
          abs(s["reference_hz"] - G3) < 0.001
          and all(abs(s[f"f0_{k}_st"]) < 0.05 for k in ("min", "p5", "p50", "p95", "max"))
          and abs(cents(s["f0_min_hz"], G3)) < 5 and abs(cents(s["f0_max_hz"], G3)) < 5,
          json.dumps({k: s[k] for k in s if k.endswith("_st") or k.startswith("f0_m") or k == "reference_hz"}))
    check("summary: p5-p95 range and SD under 0.05 semitone (a steady tone)",
          s["f0_range_st"] < 0.05 and s["f0_sd_st"] < 0.05, f"{s['f0_range_st']} {s['f0_sd_st']}")
    check("summary: cycle dose = F0 x voiced time within 1 % (Titze, Svec & Popolo 2003)",
          abs(s["cycle_dose"] - G3 * s["voiced_s"]) < 0.01 * G3 * s["voiced_s"], f"{s['cycle_dose']} vs {G3 * s['voiced_s']:.1f}")
    inside = [b for b in s["bands"] if b["name"] == "target"]
    check("summary: every voiced frame inside the band G3 +-1 semitone", len(inside) == 1 and inside[0]["inside_fraction"] == 1.0,
          str(s["bands"]))
    check("summary: the preset's measures", s["measures"] == ["f0_sd_st", "voiced_s", "inside_fraction"], str(s["measures"]))


def check_record(sessions, ended):
    folders = sorted(p for p in sessions.iterdir() if p.is_dir())
    if not check("one session folder", len(folders) == 1, str(folders)):
        return
    folder = folders[0]
    file = folder / "exercise-01-sustained_vowel.json"
    if check("the exercise's file is in the session folder", file.exists(), str(sorted(os.listdir(folder)))):
        saved = json.loads(file.read_text(encoding="utf-8"))
        check("it is private (0600)", stat.S_IMODE(os.stat(file).st_mode) == 0o600)
        check("it holds the summary that was sent, who ended it and when",
              saved.get("summary") == ended["payload"]["summary"] and saved.get("by") == "supervisor"
              and saved.get("ended_s") == ended["time_s"] and saved.get("label") == "G3 tone", json.dumps(saved)[:200])
    kinds = []
    for raw in (folder / "session.jsonl").read_text(encoding="utf-8").splitlines():
        try:
            line = json.loads(raw)
        except json.JSONDecodeError:
            continue
        if line.get("type") == "event":
            kinds.append(line.get("kind"))
    stopped = folder / "exercise-02-reading.json"
    if check("the exercise ended at stop has its file too", stopped.exists(), str(sorted(os.listdir(folder)))):
        saved = json.loads(stopped.read_text(encoding="utf-8"))
        check("which says no role ended it (the daemon did)", "by" not in saved and saved.get("preset") == "reading", str(saved)[:200])
    check("the session log holds the exercise, reference and dose events",
          all(k in kinds for k in ("reference_changed", "exercise_started", "band_changed", "exercise_ended", "dose_limit")),
          str(kinds))


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--daemon", required=True)
    args = ap.parse_args()
    with tempfile.TemporaryDirectory(prefix="pitchwire-exercise-") as tmp:
        tmp = Path(tmp)
        tone = tmp / "g3.wav"
        write_tone(tone, 12.0)
        sessions = tmp / "sessions"
        config = write_config(tmp, loop=False, spl_offset_db=SPL_OFFSET, dose_limit_voiced_s=DOSE_LIMIT_S)
        proc, port = start(args.daemon, config, source=f"file:{tone}")
        try:
            messages, started, ended = asyncio.run(session(port, token(tmp, "supervisor"), proc))
        finally:
            proc.send_signal(signal.SIGTERM)
            code = proc.wait(10)
        check("the daemon stops cleanly on SIGTERM", code == 0, f"exit {code}")
        if started and ended:
            check_stats(messages)
            check_summary(started, ended)
            check_record(sessions, ended)
    return finish()


if __name__ == "__main__":
    sys.exit(main())
