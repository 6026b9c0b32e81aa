"""``taprig ports``: the listing, the empty case and the JSON form (the port list is faked where it matters)."""

from __future__ import annotations

import json

from serial.tools import list_ports_common

from taprig.cli import main


def _usb_port(device: str) -> list_ports_common.ListPortInfo:
    info = list_ports_common.ListPortInfo(device, skip_link_detection=True)
    info.vid, info.pid, info.serial_number = 0x2E8A, 0x000A, "E66038B7137F5A2E"
    info.description, info.manufacturer = "Pico - Board CDC", "Raspberry Pi"
    return info


def test_ports_runs_on_this_machine(capsys):
    assert main(["ports"]) == 0
    out = capsys.readouterr().out
    assert out.startswith("device") or out.startswith("no serial ports found")


def test_no_ports_gives_one_clear_line(monkeypatch, capsys):
    monkeypatch.setattr("serial.tools.list_ports.comports", lambda *a, **k: [])
    assert main(["ports"]) == 0
    assert capsys.readouterr().out.strip().startswith("no serial ports found")
    assert main(["ports", "--json"]) == 0
    assert json.loads(capsys.readouterr().out) == []


def test_usb_port_shows_vid_pid_and_serial_number(monkeypatch, capsys):
    monkeypatch.setattr("serial.tools.list_ports.comports", lambda *a, **k: [_usb_port("/dev/ttyACM0")])
    assert main(["ports"]) == 0
    table = capsys.readouterr().out.splitlines()
    assert table[0].split() == ["device", "description", "VID:PID", "serial", "number", "manufacturer"]
    assert table[2].split()[0] == "/dev/ttyACM0"
    assert "2E8A:000A" in table[2] and "E66038B7137F5A2E" in table[2]
    assert main(["ports", "--json"]) == 0
    (port,) = json.loads(capsys.readouterr().out)
    assert port["device"] == "/dev/ttyACM0" and port["vid_pid"] == "2E8A:000A" and port["vid"] == 0x2E8A
    assert port["serial_number"] == "E66038B7137F5A2E"
