"""``taprig live`` ends the one way every run ends, whatever ends it: a signal (Ctrl-C, SIGTERM, SIGHUP) sends every
actuator to its safe value with the replies awaited, and a recording started from the page is closed cleanly."""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import urllib.request
from pathlib import Path

import pytest

from taprig.session.store import SessionReader

RIG = Path(__file__).resolve().parents[2] / "rigs" / "naca0012-20tap.toml"


def post(base: str, key: str, action: str, body: dict | None = None) -> dict:
    req = urllib.request.Request(f"{base}/api/live/{action}", data=json.dumps(body or {}).encode(), method="POST",
                                 headers={"Content-Type": "application/json", "X-Taprig-Key": key})
    with urllib.request.urlopen(req, timeout=30) as resp:
        return json.loads(resp.read())


@pytest.mark.parametrize("sig, code, words", [(signal.SIGINT, 0, "Ctrl-C"), (signal.SIGTERM, 143, "SIGTERM"),
                                              (signal.SIGHUP, 129, "SIGHUP")])
def test_every_signal_ends_the_run_safe_and_the_recording_closed(tmp_path, sig, code, words):
    proc = subprocess.Popen([sys.executable, "-m", "taprig", "live", "--rig", str(RIG), "--port",
                             "sim://?seed=3&speed=4&watchdog_ms=0", "--no-browser", "--http-port", "0", "--quiet",
                             "--sessions", str(tmp_path)], stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            start_new_session=True, cwd=tmp_path)
    try:
        url = proc.stdout.readline().split(": ", 1)[1].strip()
        base, key = url.split("/?key=")
        path = post(base, key, "record-start")["path"]
        post(base, key, "setpoint", {"actuator": "fan", "value": 0.6})
        post(base, key, "setpoint", {"actuator": "alpha", "value": 5})
        os.killpg(proc.pid, sig)
        out, err = proc.communicate(timeout=60)
    finally:
        if proc.poll() is None:
            os.killpg(proc.pid, signal.SIGKILL)
    assert proc.returncode == code, err
    assert words in err and "fan 0 duty acknowledged" in err and "alpha 0 deg acknowledged" in err
    assert "Traceback" not in err and f"the recording in progress was closed: {path}" in out
    session = Path(path)
    assert not Path(f"{session}-wal").exists() and not Path(f"{session}-shm").exists()
    with SessionReader(session) as reader:
        ends = [e.data for e in reader.events() if e.kind == "shutdown"]
        assert reader.meta.get("stopped_utc") and len(ends) == 1
