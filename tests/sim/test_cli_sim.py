"""``taprig sim --rig RIG`` on a pseudo-terminal: another process opens the printed path and reads valid frames."""

from __future__ import annotations

import os
import selectors
import subprocess
import sys
import time

import pytest
import serial

from taprig.cli import main
from taprig.protocol import Describe, Description, Heartbeat, RawBlock, Start, StreamDecoder, encode_message

from .conftest import RIGS

pytestmark = pytest.mark.skipif(os.name != "posix", reason="pseudo-terminals are POSIX only")


def _first_line(proc: subprocess.Popen, timeout: float) -> str:
    """The first stdout line of ``proc``, waiting at most ``timeout`` s (never a hang)."""
    with selectors.DefaultSelector() as sel:
        sel.register(proc.stdout, selectors.EVENT_READ)
        if not sel.select(timeout):
            raise AssertionError(f"taprig sim printed no path within {timeout} s")
    return proc.stdout.readline().strip()


@pytest.fixture
def sim_process():
    """Start ``taprig sim`` for a rig with extra flags; stopped (by its pid) after the test."""
    started = []

    def start(*flags: str) -> tuple[subprocess.Popen, str]:
        cmd = [sys.executable, "-m", "taprig", "sim", "--rig", str(RIGS / "cambered-balance.toml"), "--seconds", "60"]
        proc = subprocess.Popen([*cmd, *flags], stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
        started.append(proc)
        return proc, _first_line(proc, 30.0)

    yield start
    for proc in started:
        proc.terminate()
        try:
            proc.wait(timeout=10)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait(timeout=10)
        proc.stdout.close()
        proc.stderr.close()


def _read_until(port, decoder, items, predicate, timeout: float = 15.0) -> None:
    end = time.monotonic() + timeout
    while not predicate(items):
        assert time.monotonic() < end, "no expected frames from the pseudo-terminal in time"
        items += decoder.feed(port.read(max(1, port.in_waiting)))


def test_sim_on_a_pty_serves_valid_frames_to_another_process(sim_process):
    proc, path = sim_process("--seed", "4")
    assert path.startswith("/dev/") and os.path.exists(path)
    port = serial.Serial(path, timeout=0.5)
    try:
        decoder, items = StreamDecoder(), []
        port.write(encode_message(Describe(1), 0))
        _read_until(port, decoder, items, lambda it: any(isinstance(i, Description) for i in it))
        port.write(encode_message(Start(2, 1000.0, 0x1FF, 0), 1))
        port.write(encode_message(Heartbeat(3), 2))

        def enough(it):
            return sum(i.n_scans for i in it if isinstance(i, RawBlock)) >= 300

        _read_until(port, decoder, items, enough)
        c = decoder.counters
        assert c.frames > 10 and c.crc_errors == c.framing_errors == c.gaps == c.scans_lost == 0
        assert decoder.description.uid == "sim-cambered-balance-4"
    finally:
        port.close()
    assert proc.poll() is None  # the board outlives a client that closes the port


def test_bad_flag_is_a_usage_error(capsys):
    assert main(["sim", "--rig", str(RIGS / "cylinder.toml"), "--ber", "2"]) == 2
    err = capsys.readouterr().err
    assert "--ber" in err and "[0, 1]" in err and "Traceback" not in err


def test_missing_rig_is_a_user_error(capsys):
    assert main(["sim", "--rig", "no/such/rig.toml"]) == 1
    err = capsys.readouterr().err
    assert "rig.toml" in err and "Traceback" not in err
