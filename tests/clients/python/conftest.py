"""Fixtures of the tests of the Python client (clients/python): a pitchwired on its demo voice.

  python3 -m pytest -p no:cacheprovider tests/clients/python --pitchwired build/daemon/pitchwired

The daemon comes from --pitchwired, else the environment variable PITCHWIRED, else build/daemon/pitchwired
of this checkout. It runs `--input demo --port 0 --config <tmp>/pitchwired.jsonc` with tokens, log and no
session record in a temporary folder of its own, and is stopped with SIGTERM at the end (its exit code must
be 0). The demo voice is rendered at 16 kHz (daemon/src/paced_source.cpp, kDemoRateHz).
"""

import json
import os
import re
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

HERE = Path(__file__).resolve().parent
REPO = HERE.parents[2]
sys.path.insert(0, str(REPO / "clients" / "python"))

DEMO_RATE_HZ = 16000


def pytest_addoption(parser):
    parser.addoption("--pitchwired", default=os.environ.get("PITCHWIRED"),
                     help="path of the pitchwired to test (default: $PITCHWIRED, else build/daemon/pitchwired)")


class Daemon:
    """One pitchwired process on the demo voice; start() again after stop() keeps the port when asked."""

    def __init__(self, exe, workdir):
        self.exe, self.workdir = str(exe), Path(workdir)
        self.workdir.mkdir(parents=True, exist_ok=True)
        self.config = self.workdir / "pitchwired.jsonc"
        self.config.write_text(json.dumps({
            "token_dir": str(self.workdir / "tokens"), "log_file": str(self.workdir / "pitchwired.log"),
            "record_sessions": False}), encoding="utf-8")
        self.proc, self.port, self.runs = None, None, 0

    def start(self, port=0, timeout_s=15.0):
        self.runs += 1
        out = self.workdir / f"stdout.{self.runs}"
        err = self.workdir / f"stderr.{self.runs}"
        with open(out, "w") as o, open(err, "w") as e:
            self.proc = subprocess.Popen([self.exe, "--input", "demo", "--port", str(port), "--config", str(self.config)],
                                         stdin=subprocess.DEVNULL, stdout=o, stderr=e)
        deadline = time.monotonic() + timeout_s
        while time.monotonic() < deadline:
            m = re.search(r"^pitchwired: live page http://127\.0\.0\.1:(\d+)/$", out.read_text(), re.MULTILINE)
            if m:
                self.port = int(m.group(1))
                return self
            if self.proc.poll() is not None:
                break
            time.sleep(0.02)
        self.proc.kill()
        self.proc.wait()
        raise RuntimeError(f"pitchwired did not print its live page within {timeout_s} s: {err.read_text()[-2000:]}")

    def stop(self):
        """SIGTERM; returns the exit code."""
        if self.proc is None or self.proc.poll() is not None:
            return self.proc.returncode if self.proc else None
        self.proc.send_signal(signal.SIGTERM)
        try:
            return self.proc.wait(10)
        except subprocess.TimeoutExpired:
            self.proc.kill()
            self.proc.wait()
            raise

    def token(self, role):
        return (self.workdir / "tokens" / f"{role}.token").read_text(encoding="utf-8").strip()

    @property
    def lab_token(self):
        return self.token("lab")

    @property
    def supervisor_token(self):
        return self.token("supervisor")


def _exe(config):
    exe = config.getoption("--pitchwired") or str(REPO / "build" / "daemon" / "pitchwired")
    if not Path(exe).is_file():
        pytest.exit(f"no pitchwired at {exe}: pass --pitchwired PATH or set PITCHWIRED", returncode=2)
    return exe


@pytest.fixture(scope="session")
def daemon(request, tmp_path_factory):
    d = Daemon(_exe(request.config), tmp_path_factory.mktemp("pitchwired")).start()
    yield d
    assert d.stop() == 0, "pitchwired did not exit cleanly on SIGTERM"


@pytest.fixture
def new_daemon(request, tmp_path_factory):
    """A daemon of the test's own (it may stop and restart it)."""
    made = []

    def make():
        d = Daemon(_exe(request.config), tmp_path_factory.mktemp("pitchwired-own"))
        made.append(d)
        return d
    yield make
    for d in made:
        d.stop()
