"""The ``sim://`` pyserial port: opened like a real one, read in whole chunks, faults surfacing as on real hardware."""

from __future__ import annotations

import time

import pytest
import serial

import taprig.link  # noqa: F401  (registers the sim:// handler with pyserial)
from taprig.protocol import Describe, Description, Heartbeat, RawBlock, Start, StreamDecoder, encode_message
from taprig.sim import RIG_ENVIRONMENT_VARIABLE, SimOptions, parse_sim_url, to_query, with_rig

from .conftest import RIGS


class PortHost:
    """A minimal host on a pyserial port: command, read what is waiting, decode."""

    def __init__(self, port):
        self.port = port
        self.decoder = StreamDecoder()
        self.items: list = []
        self._seq = 0

    def send(self, msg) -> None:
        self.port.write(encode_message(msg, self._seq))
        self._seq += 1

    def read_until(self, predicate, timeout: float = 10.0) -> None:
        """Read chunks until ``predicate(items)`` holds (or fail after ``timeout`` s of wall time)."""
        end = time.monotonic() + timeout
        while not predicate(self.items):
            assert time.monotonic() < end, "the simulated board did not send what was expected in time"
            self.items += self.decoder.feed(self.port.read(max(1, self.port.in_waiting)))

    def scans(self) -> int:
        return sum(i.n_scans for i in self.items if isinstance(i, RawBlock))


@pytest.fixture
def in_repo(monkeypatch):
    monkeypatch.chdir(RIGS.parent)


def test_opens_by_url_and_streams_valid_frames(in_repo):
    port = serial.serial_for_url("sim://rigs/cambered-balance.toml?seed=1", timeout=0.5)
    try:
        h = PortHost(port)
        h.send(Describe(1))
        h.read_until(lambda items: any(isinstance(i, Description) for i in items))
        h.send(Start(2, 1000.0, 0x1FF, 0))
        h.read_until(lambda items: h.scans() >= 200)
        c = h.decoder.counters
        assert c.frames > 10 and c.crc_errors == c.framing_errors == c.gaps == c.scans_lost == 0
    finally:
        port.close()


def test_compressed_time_hands_out_whole_chunks(in_repo):
    port = serial.serial_for_url("sim://rigs/bench-64.toml?speed=max&watchdog_ms=0", timeout=1.0)
    try:
        h = PortHost(port)
        h.send(Start(1, 2000.0, (1 << 64) - 1, 0))
        chunk = port.read(1 << 20)
        assert len(chunk) == 1 << 20  # a large read is served at once, many frames per call
        h.items += h.decoder.feed(chunk)
        assert h.scans() > 4000 and h.decoder.counters.crc_errors == 0
        # simulated time ran ahead of the wall clock: over a second of scans in far less than that
        assert port.device.now_ns > 1e9
    finally:
        port.close()


def test_faults_through_the_port_are_counted_exactly(in_repo):
    url = "sim://rigs/bench-64.toml?speed=max&watchdog_ms=0&seed=3&ber=3e-6&burst_rate=2"
    port = serial.serial_for_url(url, timeout=1.0)
    try:
        h = PortHost(port)
        h.send(Start(1, 2000.0, (1 << 64) - 1, 0))
        h.read_until(lambda items: h.scans() > 8000 and not port.device.faults.last_sample_lost)
        while port.device.pending:
            h.items += h.decoder.feed(port.read(port.device.pending))
        c, t = h.decoder.counters, port.device.tally
        assert t.frames_corrupted > 0 and t.bursts > 0
        assert (c.crc_errors + c.framing_errors, c.frames_lost, c.gaps, c.scans_lost) == (
            t.frames_corrupted, t.frames_lost, t.gaps, t.scans_lost)
    finally:
        port.close()


def test_disconnect_raises_like_a_vanished_usb_device(in_repo):
    port = serial.serial_for_url("sim://rigs/cylinder.toml?speed=max&disconnect=0.5&watchdog_ms=0", timeout=1.0)
    h = PortHost(port)
    h.send(Start(1, 100.0, 1, 0))
    with pytest.raises(serial.SerialException):
        for _ in range(1000):
            port.read(4096)
    with pytest.raises(serial.SerialException):
        port.write(encode_message(Heartbeat(0), 5))
    port.close()


def test_stalled_write_times_out_then_recovers(in_repo):
    url = "sim://rigs/cylinder.toml?write_stall=0&write_stall_for=0.3"
    port = serial.serial_for_url(url, timeout=0.1, write_timeout=0.05)
    try:
        with pytest.raises(serial.SerialTimeoutException):
            port.write(encode_message(Describe(1), 0))
        port.write_timeout = None
        port.write(encode_message(Describe(2), 1))  # blocks until the board takes bytes again
        assert port.device.now_ns >= 0.3e9 and port.device.host_frames == 1
    finally:
        port.close()


def test_port_basics(in_repo):
    port = serial.serial_for_url("sim://rigs/cylinder.toml", timeout=0)
    assert port.read(0) == b""
    assert port.in_waiting > 0  # the boot description
    port.reset_input_buffer()
    assert port.in_waiting == 0 and port.read(100) == b""
    port.close()
    with pytest.raises(serial.PortNotOpenError):
        port.read(1)


def test_bare_url_takes_the_rig_from_the_environment(in_repo, monkeypatch, rigs):
    monkeypatch.delenv(RIG_ENVIRONMENT_VARIABLE, raising=False)
    with pytest.raises(serial.SerialException, match="--rig"):
        serial.serial_for_url("sim://?seed=2")
    monkeypatch.setenv(RIG_ENVIRONMENT_VARIABLE, "rigs/cylinder.toml")
    port = serial.serial_for_url("sim://?seed=2", timeout=0)
    assert port.device.rig.id == rigs("cylinder").id and port.device.options.seed == 2
    port.close()


@pytest.mark.parametrize(
    ("query", "words"),
    [("colour=red", ["colour", "seed"]), ("ber=2", ["ber", "[0, 1]"]), ("speed=-1", ["speed"]),
     ("reset=a", ["reset"]), ("lag=maybe", ["lag"])],
)
def test_bad_options_name_the_option(in_repo, query, words):
    with pytest.raises(serial.SerialException) as err:
        serial.serial_for_url(f"sim://rigs/cylinder.toml?{query}")
    assert all(w in str(err.value) for w in words)


def test_missing_rig_file_is_a_clear_error(in_repo):
    with pytest.raises(serial.SerialException, match="nothere.toml"):
        serial.serial_for_url("sim://rigs/nothere.toml")


def test_url_helpers_round_trip():
    options = SimOptions(seed=4, speed=float("inf"), ber=1e-6, reset=(1.0, 2.5), lag=False)
    target = parse_sim_url(f"sim://rigs/x.toml?{to_query(options)}")
    assert target.rig_path == "rigs/x.toml" and target.options == options
    assert with_rig("sim://?seed=4", "rigs/y.toml") == "sim://rigs/y.toml?seed=4"
    assert with_rig("sim://rigs/z.toml", "rigs/y.toml") == "sim://rigs/z.toml"
    assert with_rig("/dev/ttyACM0", "rigs/y.toml") == "/dev/ttyACM0"
    assert parse_sim_url("sim:///abs/path/rig.toml").rig_path == "/abs/path/rig.toml"


@pytest.mark.parametrize("folder", ["lab#2", "which?", "50%", "my rigs", "%23 a?b#c"])
def test_rig_paths_with_url_characters_survive_the_url(tmp_path, monkeypatch, folder):
    # '#' would start a fragment, '?' the query, '%' an escape and a space is not allowed in a URL (RFC 3986 §2):
    # the path is quoted on the way in and unquoted by the parser, so the loader gets the very file name.
    (tmp_path / folder).mkdir()
    rig = tmp_path / folder / "rig.toml"
    rig.write_bytes((RIGS / "cylinder.toml").read_bytes())
    monkeypatch.chdir(tmp_path)
    for path in (f"{folder}/rig.toml", rig.as_posix()):
        url = with_rig("sim://?seed=3", path)
        target = parse_sim_url(url)
        assert target.rig_path == path and target.options.seed == 3
        port = serial.serial_for_url(url, timeout=0.5)
        try:
            h = PortHost(port)
            h.send(Describe(1))
            h.read_until(lambda items: any(isinstance(i, Description) for i in items))
        finally:
            port.close()


def test_every_option_is_documented():
    from dataclasses import fields

    text = (RIGS.parent / "docs" / "simulator.md").read_text(encoding="utf-8")
    missing = [f.name for f in fields(SimOptions) if f"| `{f.name}` |" not in text]
    assert missing == []


def test_stalled_write_in_compressed_time_waits_in_simulated_time(in_repo):
    url = "sim://rigs/cylinder.toml?speed=max&write_stall=0&write_stall_for=2"
    port = serial.serial_for_url(url, timeout=0.1, write_timeout=0.5)
    try:
        with pytest.raises(serial.SerialTimeoutException):
            port.write(encode_message(Describe(1), 0))  # 0.5 s of simulated waiting: still stalled
        port.write_timeout = None
        port.write(encode_message(Describe(2), 1))
        assert port.device.now_ns == 2_000_000_000 and port.device.host_frames == 1
    finally:
        port.close()
