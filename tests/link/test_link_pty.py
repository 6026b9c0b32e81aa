"""The link against a fake board on a real pseudo-terminal: open, handshake, commands, heartbeat, unplug, replug."""

from __future__ import annotations

import os
import queue
import sys
import threading
import time

import pytest
from link_fakedevice import Behaviour, FakeDevice, make_description

from taprig.link import (
    CommandRefusedError, CommandTimeoutError, HandshakeTimeoutError, LinkEventKind, open_port,
)
from taprig.protocol import Describe, Heartbeat, RawBlock, ReplyCode, SetActuator, Stop, StreamDecoder

pytestmark = pytest.mark.skipif(sys.platform == "win32", reason="needs POSIX pseudo-terminals (os.openpty)")


class Events:
    """Collects link events and lets a test wait for one kind (no sleeps)."""

    def __init__(self):
        self.items = []
        self.cond = threading.Condition()

    def __call__(self, event):
        with self.cond:
            self.items.append(event)
            self.cond.notify_all()

    def wait(self, kind, count=1, timeout=5.0):
        with self.cond:
            ok = self.cond.wait_for(lambda: len(self.kinds(kind)) >= count, timeout)
        assert ok, f"no {kind.value} event within {timeout} s; got {[e.kind.value for e in self.items]}"
        return self.kinds(kind)[count - 1]

    def kinds(self, kind):
        return [e for e in self.items if e.kind is kind]


def wait_until(predicate, timeout=5.0, what="condition"):
    """Check a cheap predicate every 10 ms; fail naming ``what`` if it is still false after ``timeout`` [s]."""
    tick = threading.Event()
    deadline = time.monotonic() + timeout
    while not predicate():
        assert time.monotonic() < deadline, f"{what} not reached within {timeout} s"
        tick.wait(0.01)


def test_open_by_path_handshakes_and_reports_connected(ptys, devices, links):
    pty = ptys()
    device = devices(pty)
    link = links(pty.path)
    events = Events()
    link.subscribe(on_event=events)
    description = link.open()
    assert description == device.description
    assert events.wait(LinkEventKind.CONNECTED).port == pty.path
    assert isinstance(device.of_type(Describe)[0].msg, Describe)
    assert link.connected


def boots_on_open(*devices):
    """An opener that starts each waiting device once a port is open, as a board reset by DTR on open does.

    (Opening flushes the input, so a banner printed before the open would never be seen.) ``opener.waiting``
    takes more devices later, for replugs.
    """
    def opener(path):
        port = open_port(path)
        while opener.waiting:
            opener.waiting.pop(0).start()
        return port

    opener.waiting = list(devices)
    return opener


def test_handshake_survives_boot_text_and_a_slow_firmware(ptys, devices, links):
    # A board reset by the open prints a banner with no delimiter, so the first DESCRIPTION it sends is glued
    # to the banner and lost; the re-sent DESCRIBE gets the next one through.
    pty = ptys()
    banner = b"ets Jun  8 2016 00:22:57\r\nrst:0x1 (POWERON_RESET),boot:0x13\r\nwaiting for download\r\n"
    device = devices(pty, start=False, behaviour=Behaviour(boot_text=banner, ignore_describes=1))
    link = links(pty.path, opener=boots_on_open(device))
    assert link.open().uid == device.description.uid
    assert len(device.of_type(Describe)) >= 2
    counters = link.counters
    assert counters.framing_errors + counters.crc_errors >= 1  # the banner run (PROTOCOL.md §5)


def test_handshake_timeout_reports_what_it_saw_and_releases_the_port(ptys, devices, links):
    pty = ptys()
    device = devices(pty, start=False,
                     behaviour=Behaviour(answer=False, boot_text=b"rst:0x1 (POWERON_RESET) bootloader v2\r\n"))
    link = links(pty.path, handshake_timeout_s=0.5, opener=boots_on_open(device))
    t0 = time.monotonic()
    with pytest.raises(HandshakeTimeoutError) as caught:
        link.open()
    assert time.monotonic() - t0 < 0.5 + 3.0  # the stated timeout, plus generous slack: it must not hang
    message = str(caught.value)
    assert "no DESCRIPTION" in message and pty.path in message
    assert "POWERON_RESET" in message and "bytes" in message
    open_port(pty.path).close()  # nothing left holding the port


def test_handshake_timeout_with_silence_says_nothing_arrived(ptys, devices, links):
    pty = ptys()
    devices(pty, behaviour=Behaviour(answer=False))
    with pytest.raises(HandshakeTimeoutError, match="nothing arrived"):
        links(pty.path, handshake_timeout_s=0.3).open()


def test_commands_get_their_own_request_ids(ptys, devices, links):
    pty = ptys()
    device = devices(pty)
    link = links(pty.path)
    link.open()
    first = link.set_actuator(1, 0.25)
    second = link.command(SetActuator(req=0, actuator_id=1, value=0.5))
    sent = [r.msg for r in device.of_type(SetActuator)]
    assert [m.req for m in sent] == [first.req, second.req]
    assert first.req != second.req and 0 not in (first.req, second.req)
    assert [m.value for m in sent] == [0.25, 0.5]
    assert first.code is ReplyCode.OK


def test_refused_command_raises_with_the_code_and_detail(ptys, devices, links):
    pty = ptys()
    devices(pty)
    link = links(pty.path)
    link.open()
    with pytest.raises(CommandRefusedError, match="OUT_OF_RANGE") as caught:
        link.set_actuator(1, 2.0)
    assert caught.value.code is ReplyCode.OUT_OF_RANGE
    assert "outside" in caught.value.detail


def test_unanswered_command_times_out(ptys, devices, links):
    pty = ptys()
    devices(pty, behaviour=Behaviour(silent=(Stop,)))
    link = links(pty.path)
    link.open()
    with pytest.raises(CommandTimeoutError, match=r"Stop \(req \d+\) within 0.2 s"):
        link.stop_stream(timeout=0.2)


def test_heartbeat_keeps_pace_with_the_watchdog_and_host_seq_counts_up(ptys, devices, links):
    pty = ptys()
    device = devices(pty, description=make_description(heartbeat_timeout_ms=200))
    link = links(pty.path)
    link.open()
    assert device.wait_for(lambda got: sum(isinstance(r.msg, Heartbeat) for r in got) >= 8, timeout=5.0)
    beats = [r.t for r in device.of_type(Heartbeat)]
    mean_gap = (beats[-1] - beats[0]) / (len(beats) - 1)
    # Sent every 200/4 = 50 ms (PROTOCOL.md §4); generous bounds: never flooding, never near the watchdog time.
    assert 0.02 < mean_gap < 0.2
    counters = device.host_counters  # the board's view of the host's sequence numbers
    assert (counters.gaps, counters.duplicates, counters.late) == (0, 0, 0)


def test_chunks_carry_raw_bytes_host_time_and_decoded_blocks(ptys, devices, links):
    pty = ptys()
    device = devices(pty)
    link = links(pty.path)
    chunks = queue.Queue()
    link.subscribe(on_chunk=lambda chunk, t, items: chunks.put((chunk, t, items)))
    link.open()
    link.start_stream(1000.0)
    replay = StreamDecoder()
    blocks = []
    deadline = time.monotonic() + 5.0
    while sum(b.n_scans for b in blocks) < 20 and time.monotonic() < deadline:
        chunk, host_time_ns, items = chunks.get(timeout=5.0)
        assert abs(host_time_ns - time.time_ns()) < 60e9  # wall-clock ns, not a monotonic count
        replay.feed(chunk)  # the raw bytes alone are enough to decode the same stream again
        blocks += [item for item in items if isinstance(item, RawBlock)]
    link.stop_stream()
    scans = RawBlock.concat(blocks)
    assert scans.channels == (0, 1, 2, 3)
    # The fake board sends scan index * 10 + channel index (fakedevice.py).
    assert (scans.counts[:, 2] == scans.scan_index * 10 + 2).all()
    assert link.byte_rate() > 0 and link.bytes_received >= replay.counters.bytes
    assert device.frames_sent >= link.counters.frames


def _stream_then_unplug(link, device):
    """Stream a little, stop, wait until the host has every frame, then pull the plug."""
    link.start_stream(1000.0)
    wait_until(lambda: link.counters.frames >= 10, what="10 frames")
    link.stop_stream()
    wait_until(lambda: link.counters.frames == device.frames_sent, what="all frames before the unplug")
    device.unplug()


def test_unplug_and_replug_on_the_same_path(tmp_path, ptys, devices, links):
    # A udev-style symlink (/dev/serial/by-id/...) keeps the path across replugs; the pty behind it changes.
    first = ptys()
    alias = tmp_path / "ttyBOARD"
    alias.symlink_to(first.path)
    device = devices(first, start=False)
    opener = boots_on_open(device)
    link = links(str(alias), opener=opener)
    events = Events()
    link.subscribe(on_event=events)
    link.open()
    first.release_slave()
    _stream_then_unplug(link, device)
    lost = events.wait(LinkEventKind.LOST)
    assert not link.connected and lost.detail.split(":")[0] in ("SerialException", "OSError")
    events.wait(LinkEventKind.RETRY)  # nothing there yet: the link backs off and tries again

    second = ptys()
    alias.unlink()
    alias.symlink_to(second.path)
    reborn = devices(second, start=False, behaviour=Behaviour(boot_description=True))  # rebooted: BOOT, seq 0
    opener.waiting.append(reborn)
    restored = events.wait(LinkEventKind.RESTORED)
    assert restored.gap.start_ns == lost.host_time_ns and restored.gap.end_ns > restored.gap.start_ns
    assert restored.gap.bytes_lost is None and link.gaps == [restored.gap]

    link.set_actuator(1, 0.5)  # the session goes on
    wait_until(lambda: link.counters.frames == device.frames_sent + reborn.frames_sent, what="every frame counted")
    counters = link.counters
    assert counters.resets == 1 and counters.gaps == 0
    assert counters.framing_errors == 0 and counters.crc_errors == 0


def test_replug_on_a_new_path_found_by_usb_identity(monkeypatch, ptys, devices, links):
    from serial.tools import list_ports_common

    first = ptys()
    ports = []

    def usb_port(path):
        info = list_ports_common.ListPortInfo(path, skip_link_detection=True)
        info.vid, info.pid, info.serial_number = 0x2E8A, 0x000A, "E66038B7137F5A2E"
        return info

    ports.append(usb_port(first.path))
    monkeypatch.setattr("serial.tools.list_ports.comports", lambda *a, **k: list(ports))
    device = devices(first)
    link = links(first.path)
    events = Events()
    link.subscribe(on_event=events)
    link.open()
    first.release_slave()
    _stream_then_unplug(link, device)
    ports.clear()
    events.wait(LinkEventKind.RETRY)

    second = ptys()
    ports.append(usb_port(second.path))
    # Firmware kept running through a USB glitch: no reboot, but 7 frames went out while unplugged.
    reborn = devices(second, behaviour=Behaviour(first_seq=device._seq + 7))
    restored = events.wait(LinkEventKind.RESTORED)
    assert restored.port == second.path and first.path in restored.detail
    link.set_actuator(1, 0.5)
    wait_until(lambda: link.counters.frames == device.frames_sent + reborn.frames_sent, what="every frame counted")
    counters = link.counters
    assert (counters.gaps, counters.frames_lost, counters.resets) == (1, 7, 0)


def test_a_different_board_on_the_path_is_not_taken_for_the_lost_one(tmp_path, ptys, devices, links):
    first = ptys()
    alias = tmp_path / "ttyBOARD"
    alias.symlink_to(first.path)
    device = devices(first)
    link = links(str(alias), handshake_timeout_s=0.5)
    events = Events()
    link.subscribe(on_event=events)
    link.open()
    first.release_slave()
    device.unplug()
    events.wait(LinkEventKind.LOST)

    stranger_pty = ptys()
    alias.unlink()
    alias.symlink_to(stranger_pty.path)
    stranger = devices(stranger_pty, start=False, description=make_description(uid="OTHER-BOARD"))
    stranger._streaming = True  # already streaming when it appears: its bytes must not reach the record
    received_before = link.bytes_received
    chunks = []
    link.subscribe(on_chunk=lambda chunk, host_ns, items: chunks.append(items))
    stranger.start()
    wait_until(lambda: sum("different board" in e.detail for e in events.kinds(LinkEventKind.RETRY)) >= 2,
               what="retries naming the wrong board")
    assert not events.kinds(LinkEventKind.RESTORED)
    assert chunks == [] and link.bytes_received == received_before and link.counters.frames == device.frames_sent
    assert link.other_board_bytes > 0

    stranger.stop()
    right_pty = ptys()
    alias.unlink()
    alias.symlink_to(right_pty.path)
    devices(right_pty)
    events.wait(LinkEventKind.RESTORED)


def test_close_during_reconnection_returns_and_stops_every_thread(ptys, devices, links):
    pty = ptys()
    device = devices(pty)
    link = links(pty.path)
    events = Events()
    link.subscribe(on_event=events)
    link.open()
    pty.release_slave()
    device.unplug()
    events.wait(LinkEventKind.LOST)
    link.close(timeout=2.0)
    assert not link.running
    assert events.kinds(LinkEventKind.CLOSED)


def test_second_opener_is_told_the_port_is_busy_and_by_whom(ptys, tmp_path):
    import subprocess

    from taprig.link import PortBusyError

    pty = ptys()
    holder = subprocess.Popen(
        [sys.executable, "-c", "import serial, sys; p = serial.Serial(sys.argv[1], exclusive=True); "
                               "print('ready', flush=True); sys.stdin.read()", pty.path],
        stdin=subprocess.PIPE, stdout=subprocess.PIPE, text=True)
    try:
        assert holder.stdout.readline().strip() == "ready"
        with pytest.raises(PortBusyError, match="busy") as caught:
            open_port(pty.path)
        if sys.platform.startswith("linux"):
            assert f"pid {holder.pid}" in str(caught.value)
    finally:
        holder.stdin.close()
        holder.wait(5)


def test_missing_port_lists_the_ports_present():
    from taprig.link import PortNotFoundError

    with pytest.raises(PortNotFoundError, match=r"no serial port /dev/ttyTAPRIG_NOPE; (ports present|no serial)"):
        open_port("/dev/ttyTAPRIG_NOPE")


def test_a_regular_file_is_not_a_serial_device(tmp_path):
    from taprig.link import NotSerialDeviceError

    path = tmp_path / "capture.bin"
    path.write_bytes(b"\x00")
    with pytest.raises(NotSerialDeviceError, match="not a serial device"):
        open_port(str(path))
    os.remove(path)


def test_fake_device_helper_round_trip(ptys):
    # The helper itself: a DESCRIBE written to the slave comes back as DESCRIPTION + REPLY.
    pty = ptys()
    device = FakeDevice(pty).start()
    try:
        port = open_port(pty.path)
        from taprig.protocol import encode_message

        port.write(encode_message(Describe(req=9), 0))
        decoder = StreamDecoder()
        got = []
        deadline = time.monotonic() + 3.0
        while len(got) < 2 and time.monotonic() < deadline:
            got += decoder.feed(port.read(max(1, port.in_waiting)))
        port.close()
        assert got[0] == device.description and got[1].req == 9
    finally:
        device.stop()



def test_a_reboot_during_an_outage_is_a_reset_even_when_its_boot_frame_is_not_seen(tmp_path, ptys, devices, links):
    # Reopening the port flushes what the board sent while the host was away, its BOOT frame among them: the
    # sequence going back after the outage is then the only sign, and it is counted as a reset, not as late frames.
    first = ptys()
    alias = tmp_path / "ttyBOARD"
    alias.symlink_to(first.path)
    device = devices(first)
    link = links(str(alias))
    events = Events()
    link.subscribe(on_event=events)
    link.open()
    first.release_slave()
    _stream_then_unplug(link, device)
    events.wait(LinkEventKind.LOST)
    second = ptys()
    alias.unlink()
    alias.symlink_to(second.path)
    reborn = devices(second)  # seq starts at 0 again, no BOOT frame seen
    events.wait(LinkEventKind.RESTORED)
    link.start_stream(1000.0)
    wait_until(lambda: link.counters.frames >= device.frames_sent + 10, what="10 frames after the replug")
    link.stop_stream()
    wait_until(lambda: link.counters.frames == device.frames_sent + reborn.frames_sent, what="every frame counted")
    counters = link.counters
    assert (counters.resets, counters.late, counters.gaps, counters.duplicates) == (1, 0, 0, 0)
    assert len(events.kinds(LinkEventKind.RESET)) == 1
