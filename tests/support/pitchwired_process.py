"""pitchwired_process.py: what the Python end-to-end tests share: a check list that counts failures, and a
pitchwired started on its own port with its files (tokens, log, session records) in a temporary folder.

Used by tests/daemon/session_record_test.py, tests/daemon/exercise_e2e_test.py and
tests/clients/cli_live_test.py (each puts tests/support on sys.path).
"""
import json
import re
import subprocess
import time
from pathlib import Path

failures = []


def check(name, ok, detail=""):
    """Prints PASS or FAIL with the detail; a FAIL is remembered in `failures`."""
    print(("PASS: " if ok else "FAIL: ") + name + (f" -- {detail}" if detail else ""))
    if not ok:
        failures.append(name)
    return ok


def finish():
    """The exit code of a test script: 0 when every check passed."""
    print("PASS" if not failures else f"{len(failures)} check(s) failed")
    return 0 if not failures else 1


def write_config(folder, **settings):
    """A configuration file that keeps the daemon's tokens, log and session records in `folder`."""
    folder = Path(folder)
    config = folder / "pitchwired.jsonc"
    base = {"token_dir": str(folder / "tokens"), "log_file": str(folder / "pitchwired.log"),
            "session_dir": str(folder / "sessions")}
    base.update(settings)
    config.write_text(json.dumps(base), encoding="utf-8")
    return config


def token(folder, role):
    """The token the daemon wrote for `role` (supervisor or lab) in the folder's token_dir."""
    return (Path(folder) / "tokens" / f"{role}.token").read_text(encoding="utf-8").strip()


def start(exe, config, source="demo", extra=(), stderr=subprocess.DEVNULL):
    """Starts pitchwired on a free port; returns (process, port) once it has printed its live page URL."""
    proc = subprocess.Popen([exe, "--input", source, "--port", "0", "--config", str(config), *extra],
                            stdin=subprocess.DEVNULL, stdout=subprocess.PIPE, stderr=stderr, text=True)
    deadline = time.monotonic() + 15
    while time.monotonic() < deadline:
        line = proc.stdout.readline()
        if not line:
            break
        m = re.match(r"pitchwired: live page http://127\.0\.0\.1:(\d+)/", line)
        if m:
            return proc, int(m.group(1))
    proc.kill()
    raise RuntimeError("pitchwired did not print its live page URL within 15 s")
