"""The reference firmware as a live board: under a real MicroPython (the WebAssembly port, run by node) on a
pseudo-terminal with simulated sensors (live/run_live.py), recorded by ``taprig record`` in another process and
reset by the host. Skipped without node and the npm package (``bash tools/ensure-micropython``)."""

import os
import selectors
import shutil
import subprocess
import sys
import time
from pathlib import Path

import pytest
import serial
from taprig.protocol import Description, Reply, ReplyCode, Reset, StreamDecoder, encode_message
from taprig.session.api import open_session

LIVE = Path(__file__).resolve().parents[1] / "live"
MODULES = os.environ.get("TAPRIG_MICROPYTHON_NODE_MODULES")

pytestmark = [
    pytest.mark.skipif(os.name != "posix", reason="pseudo-terminals are POSIX only"),
    pytest.mark.skipif(not MODULES or shutil.which("node") is None,
                       reason="set TAPRIG_MICROPYTHON_NODE_MODULES (and have node) to run the live board"),
]


@pytest.fixture
def live_board(tmp_path):
    """run_live.py started; yields the device path; stopped (by its pid) after the test."""
    env = dict(os.environ, TAPRIG_RUNTIME_DIR=str(tmp_path / "run"))
    proc = subprocess.Popen([sys.executable, str(LIVE / "run_live.py"), "--seconds", "120"], env=env,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        with selectors.DefaultSelector() as sel:
            sel.register(proc.stdout, selectors.EVENT_READ)
            assert sel.select(60.0), "run_live.py printed no path"
        yield proc.stdout.readline().strip()
    finally:
        proc.terminate()
        try:
            proc.wait(timeout=15)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait(timeout=15)
        proc.stdout.close()
        proc.stderr.close()


def test_taprig_record_takes_the_live_board_then_a_reset_reboots_it(live_board, tmp_path):
    out = tmp_path / "live.taprig"
    done = subprocess.run([sys.executable, "-m", "taprig", "record", "--rig", str(LIVE / "makerspace-4tap.toml"),
                           "--port", live_board, "--duration", "2", "--rate", "100", "--quiet", "-o", str(out)],
                          capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    with open_session(out) as session:
        counters = session.counters
        assert session.meta["rig_id"] == "makerspace-4tap"
        assert "taprig-ref" in session.meta["device_description"]
    # every frame arrives whole and in order; scans the WebAssembly board could not take in time on a busy
    # machine are the firmware's overruns, which the host sees as scans_lost (firmware README), not as damage
    assert counters["crc_errors"] == counters["framing_errors"] == counters["gaps"] == counters["frames_lost"] == 0
    assert session_scans(out) > 20
    # RESET: OK, then the board boots again: a DESCRIPTION with the BOOT flag and seq 0 (PROTOCOL.md §3)
    port = serial.Serial(live_board, timeout=0.2)
    try:
        decoder, items = StreamDecoder(), []
        port.write(encode_message(Reset(req=7), 0))
        deadline = time.monotonic() + 30.0
        while not (decoder.counters.resets and any(isinstance(i, Description) for i in items)):
            assert time.monotonic() < deadline, f"no reboot after RESET: {items[-5:]}"
            items += decoder.feed(port.read(max(1, port.in_waiting)))
    finally:
        port.close()
    assert Reply(7, ReplyCode.OK, "") in items
    assert decoder.counters.crc_errors == 0


def session_scans(path) -> int:
    with open_session(path) as session:
        return session.summary()["scans"]
