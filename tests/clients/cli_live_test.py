#!/usr/bin/python3
"""cli_live_test.py: the terminal commands (`pitchwire watch`, `tail`, `mark`, `band`, `exercise`,
`reference`) against a running pitchwired on the demo voice.

  cli_live_test.py --daemon PATH/pitchwired --pitchwire PATH/pitchwire

`watch` runs under a pseudo-terminal of a set size (the screen output is checked as a terminal shows it:
width, colour or none, the full-screen view) and with its output in a pipe. Supervisor and lab commands run
with the token files the daemon wrote; without a token, or with a wrong one, they fail with a clear message.
A daemon that is not there is a clear one-line error.
"""
import argparse
import fcntl
import json
import os
import pty
import re
import select
import signal
import socket
import struct
import subprocess
import sys
import tempfile
import termios
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "support"))
from pitchwired_process import check, finish, start, write_config  # noqa: E402

ANSI = re.compile(r"\x1b\[[0-9;?]*[A-Za-z]")




def free_port():
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def run(cmd, env=None, timeout=20):
    return subprocess.run(cmd, capture_output=True, text=True, timeout=timeout, env=env)


def run_pty(cmd, cols, rows=24, env=None, seconds=None):
    """Runs cmd with its stdout on a pseudo-terminal of cols x rows; returns everything it wrote."""
    pid, fd = pty.fork()
    if pid == 0:
        os.execve(cmd[0], cmd, env or os.environ)
    fcntl.ioctl(fd, termios.TIOCSWINSZ, struct.pack("HHHH", rows, cols, 0, 0))
    out = b""
    end = time.monotonic() + (seconds or 10) + 5
    while time.monotonic() < end:
        r, _, _ = select.select([fd], [], [], 0.2)
        if not r:
            continue
        try:
            chunk = os.read(fd, 65536)
        except OSError:
            break
        if not chunk:
            break
        out += chunk
    try:
        os.kill(pid, signal.SIGKILL)
    except ProcessLookupError:
        pass
    _, status = os.waitpid(pid, 0)
    os.close(fd)
    return out.decode("utf-8", errors="replace"), os.waitstatus_to_exitcode(status)


def screen_lines(text):
    """The lines a terminal would show: split on CR and LF, ANSI sequences removed."""
    return [ANSI.sub("", piece) for piece in re.split(r"[\r\n]", text)]


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--daemon", required=True)
    ap.add_argument("--pitchwire", required=True)
    args = ap.parse_args()
    pw = args.pitchwire
    with tempfile.TemporaryDirectory(prefix="pitchwire-cli-") as tmp:
        tmp = Path(tmp)
        proc, port = start(args.daemon, write_config(tmp))
        # No default token files for the commands: HOME and XDG_STATE_HOME point at an empty folder.
        env = dict(os.environ, HOME=str(tmp / "home"), XDG_STATE_HOME=str(tmp / "home" / "state"), TERM="xterm")
        env.pop("NO_COLOR", None)
        env.pop("PITCHWIRE_TOKEN", None)
        sup = ["--port", str(port), "--token-file", str(tmp / "tokens" / "supervisor.token")]
        lab = ["--port", str(port), "--token-file", str(tmp / "tokens" / "lab.token")]
        obs = ["--port", str(port)]
        try:
            # Supervisor commands.
            r = run([pw, "band", "set", "target", "G3", "262", *sup], env)
            ev = json.loads(r.stdout) if r.returncode == 0 else {}
            bands = ev.get("payload", {}).get("bands", [])
            check("band set target G3 262 (supervisor) prints the band_changed event: G3 = 195.998 Hz (A4 = 440 Hz)",
                  r.returncode == 0 and ev.get("by") == "supervisor" and len(bands) == 1
                  and abs(bands[0]["low_hz"] - 195.998) < 0.01 and bands[0]["high_hz"] == 262, r.stdout + r.stderr)
            r = run([pw, "band", "set", "x", "300", "200", *sup], env)
            check("a bad band (low above high) -> exit 3 and the daemon's error code", r.returncode == 3
                  and "bad_band" in r.stderr and r.stderr.count("\n") == 1, r.stderr)
            r = run([pw, "band", "set", "target", "150", "300", *obs], env)
            check("band set without a token -> exit 3, forbidden, and how to give the token",
                  r.returncode == 3 and "forbidden" in r.stderr and "--token-file" in r.stderr, r.stderr)
            r = run([pw, "band", "set", "target", "150", "300", "--port", str(port), "--token", "00" * 16], env)
            check("a wrong token -> exit 1, the daemon refused the token", r.returncode == 1
                  and "refused the token" in r.stderr and r.stderr.count("\n") == 1, r.stderr)
            r = run([pw, "band", "set", "target", *sup], env)
            check("band set with a word missing -> usage error, exit 2", r.returncode == 2 and "band set NAME LOW HIGH" in r.stderr,
                  r.stderr)
            r = run([pw, "reference", "G3", *sup], env)
            ev = json.loads(r.stdout) if r.returncode == 0 else {}
            check("reference G3 -> reference_changed 195.998 Hz", r.returncode == 0
                  and abs(ev.get("payload", {}).get("reference_hz", 0) - 195.998) < 0.001, r.stdout + r.stderr)

            # tail: a marker added meanwhile arrives as a JSON line.
            tail = subprocess.Popen([pw, "tail", "--events", "--count", "1", *obs], stdout=subprocess.PIPE,
                                    stderr=subprocess.PIPE, text=True, env=env)
            time.sleep(0.7)
            r = run([pw, "mark", "trial 7 onset", "--data", '{"trial": 7}', *lab], env)
            marker = json.loads(r.stdout) if r.returncode == 0 else {}
            pl = marker.get("payload", {})
            check("mark (lab) prints the marker event: label, data, by lab, sample = round(time_s x 16000), wall clock",
                  r.returncode == 0 and pl.get("label") == "trial 7 onset" and pl.get("data") == {"trial": 7}
                  and marker.get("by") == "lab" and pl.get("sample") == round(marker["time_s"] * 16000)
                  and str(pl.get("wall", "")).endswith("Z"), r.stdout + r.stderr)
            out, _ = tail.communicate(timeout=10)
            lines = [json.loads(x) for x in out.splitlines() if x.strip()]
            check("tail --events --count 1 prints that marker as one JSON line and stops",
                  tail.returncode == 0 and len(lines) == 1 and lines[0].get("kind") == "marker"
                  and lines[0]["payload"].get("label") == "trial 7 onset", out)
            r = run([pw, "mark", "no token", *obs], env)
            check("mark without a token -> exit 3, forbidden", r.returncode == 3 and "forbidden" in r.stderr, r.stderr)
            r = run([pw, "mark", "x", "--data", "[1,2]", *lab], env)
            check("mark --data that is not a JSON object -> usage error naming it", r.returncode == 2
                  and "--data must be a JSON object" in r.stderr, r.stderr)
            r = run([pw, "tail", "--frames", "--count", "40", *obs], env)
            frames = [json.loads(x) for x in r.stdout.splitlines()]
            idx = [f["index"] for f in frames]
            check("tail --frames --count 40: 40 frame lines with consecutive indexes",
                  r.returncode == 0 and len(frames) == 40 and all(f["type"] == "frame" for f in frames)
                  and idx == list(range(idx[0], idx[0] + 40)), r.stderr)

            r = run([pw, "tail", "--settled", "--count", "20", "--seconds", "10", *obs], env)
            settled = [json.loads(x) for x in r.stdout.splitlines()]
            check("tail --settled --count 20: 20 settled lines, consecutive indexes, no frames",
                  r.returncode == 0 and len(settled) == 20 and all(m["type"] == "settled" for m in settled)
                  and [m["index"] for m in settled] == list(range(settled[0]["index"], settled[0]["index"] + 20)),
                  r.stdout[:300] + r.stderr)

            # watch, output in a pipe: one line per half second, the band in words.
            r = run([pw, "watch", "--seconds", "2.2", *obs], env)
            lines = [x for x in r.stdout.splitlines() if x]
            check("watch into a pipe: a line per 0.5 s, no colour codes, the band and its state in words",
                  r.returncode == 0 and 4 <= len(lines) <= 6 and "\x1b" not in r.stdout
                  and all(re.search(r"target (INSIDE|BELOW|ABOVE|UNVOICED)", x) for x in lines), r.stdout)
            check("watch shows notes with cents and Hz while the demo voice is voiced",
                  any(re.match(r"[A-G]#?\d [+-]\d+ ct  \d+\.\d Hz", x) for x in lines), r.stdout)

            # watch on a terminal 80 columns wide: one line redrawn in place, in colour.
            text, code = run_pty([pw, "watch", "--seconds", "2", *obs], 80, env=env, seconds=2)
            shown = [x for x in screen_lines(text) if x.strip()]
            check("watch on an 80-column terminal: redraws one line in place (carriage returns), exits 0",
                  code == 0 and text.count("\r") >= 10 and shown, repr(text[:200]))
            check("... in colour (the band state coloured), never wider than the terminal",
                  "\x1b[1;32m" in text or "\x1b[1;33m" in text or "\x1b[2m" in text, repr(text[:200]))
            check("... lines fit in 80 columns", all(len(x) <= 80 for x in shown), str(max(map(len, shown), default=0)))
            # A narrow terminal: parts that do not fit are left out whole; nothing wraps.
            text, code = run_pty([pw, "watch", "--seconds", "1.5", *obs], 24, env=env, seconds=1.5)
            shown = [x for x in screen_lines(text) if x.strip()]
            check("watch on a 24-column terminal: every line fits in 24 columns", code == 0 and shown
                  and all(len(x) <= 24 for x in shown), str(shown[:5]))
            # No colour when asked (NO_COLOR, or --no-color).
            text, code = run_pty([pw, "watch", "--seconds", "1.2", *obs], 80, env=dict(env, NO_COLOR="1"), seconds=1.2)
            check("NO_COLOR: no colour codes (only cursor and erase sequences)",
                  code == 0 and not re.search(r"\x1b\[[0-9;]*m", text), repr(text[:120]))
            text, code = run_pty([pw, "watch", "--no-color", "--seconds", "1.2", *obs], 80, env=env, seconds=1.2)
            check("--no-color: no colour codes", code == 0 and not re.search(r"\x1b\[[0-9;]*m", text), repr(text[:120]))
            # The full-screen view.
            text, code = run_pty([pw, "watch", "--full", "--seconds", "2", *obs], 60, 20, env=env, seconds=2)
            last = text.rsplit("\x1b[H", 1)[-1]
            shown = [x for x in screen_lines(last) if x.strip()]
            check("watch --full: redraws from the top left, shows note, level, the band with its limits and state",
                  code == 0 and text.count("\x1b[H") >= 5 and any(x.startswith("Note") for x in shown)
                  and any(x.startswith("Level") for x in shown)
                  and any(re.match(r"Band +target 196\.0-262\.0 Hz +(INSIDE|BELOW|ABOVE|UNVOICED)", x) for x in shown),
                  str(shown))
            check("... every line within 60 columns; the cursor is shown again at the end",
                  all(len(x) <= 60 for x in shown) and "\x1b[?25h" in text[-40:],
                  repr(text[-60:]))
            # Exercises.
            r = run([pw, "exercise", "start", "sustained_vowel", "--label", "Vowel, first try", *sup], env)
            check("exercise start sustained_vowel --label ... -> exercise_started", r.returncode == 0
                  and json.loads(r.stdout or "{}").get("payload", {}).get("label") == "Vowel, first try", r.stdout + r.stderr)
            time.sleep(1.0)
            r = run([pw, "exercise", "end", *sup], env)
            ev = json.loads(r.stdout) if r.returncode == 0 else {}
            check("exercise end -> exercise_ended with its summary", r.returncode == 0
                  and ev.get("kind") == "exercise_ended" and "voiced_s" in ev.get("payload", {}).get("summary", {}),
                  (r.stdout + r.stderr)[:300])
            r = run([pw, "exercise", "start", "no_such_preset", *sup], env)
            check("an unknown preset -> exit 3, unknown_preset", r.returncode == 3 and "unknown_preset" in r.stderr, r.stderr)
        finally:
            proc.send_signal(signal.SIGTERM)
            proc.wait(10)
        # The daemon is gone.
        absent = free_port()
        r = run([pw, "watch", "--port", str(absent), "--seconds", "1"], env)
        check("watch without a daemon: exit 1 and one line saying it cannot connect", r.returncode == 1
              and r.stderr.count("\n") == 1 and f"cannot connect to 127.0.0.1:{absent}" in r.stderr, r.stderr)
        r = run([pw, "band", "clear", "target", "--port", str(absent)], env)
        check("band clear without a daemon: exit 1, cannot connect", r.returncode == 1 and "cannot connect" in r.stderr, r.stderr)
    return finish()


if __name__ == "__main__":
    sys.exit(main())
