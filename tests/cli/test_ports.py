"""``taprig ports``: the listing, the empty case and the JSON form (the port list is faked where it matters), and
the simulated boards of running ``taprig sim`` processes (real processes on real pseudo-terminals)."""

from __future__ import annotations

import json
import os
import selectors
import subprocess
import sys
from pathlib import Path

import pytest
from serial.tools import list_ports_common

from taprig.cli import main
from taprig.sim import registry

RIG = Path(__file__).resolve().parents[2] / "rigs" / "cambered-balance.toml"


@pytest.fixture(autouse=True)
def own_registry(tmp_path, monkeypatch):
    """Each test sees only the simulators it starts."""
    monkeypatch.setenv(registry.ENV, str(tmp_path / "run"))
    return tmp_path / "run"


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


@pytest.mark.skipif(os.name != "posix", reason="pseudo-terminals are POSIX only")
def test_a_running_simulator_is_listed_until_it_stops(monkeypatch, capsys, own_registry):
    monkeypatch.setattr("serial.tools.list_ports.comports", lambda *a, **k: [])
    env = {**os.environ, registry.ENV: str(own_registry)}
    proc = subprocess.Popen([sys.executable, "-m", "taprig", "sim", "--rig", str(RIG), "--seconds", "60"],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env)
    try:
        with selectors.DefaultSelector() as sel:
            sel.register(proc.stdout, selectors.EVENT_READ)
            assert sel.select(30.0), "taprig sim printed no path"
        path = proc.stdout.readline().strip()
        assert main(["ports"]) == 0
        out = capsys.readouterr().out
        assert out.startswith("no serial ports found")
        row = next(line for line in out.splitlines() if line.startswith(path))
        assert "cambered-balance" in row and str(proc.pid) in row
        assert main(["ports", "--json"]) == 0
        (listed,) = json.loads(capsys.readouterr().out)
        assert listed["device"] == path and listed["simulated"] is True and listed["rig_id"] == "cambered-balance"
    finally:
        proc.terminate()
        proc.wait(timeout=10)
        proc.stdout.close()
        proc.stderr.close()
    assert main(["ports"]) == 0
    out = capsys.readouterr().out
    assert path not in out and "no simulated boards running" in out and "prints its path" in out
    assert list((own_registry / "sims").glob("*.json")) == []  # the simulator removed its entry on SIGTERM


def test_a_stale_entry_is_not_listed_and_is_removed(monkeypatch, capsys, own_registry):
    monkeypatch.setattr("serial.tools.list_ports.comports", lambda *a, **k: [])
    done = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"], capture_output=True, text=True)
    dead = int(done.stdout)  # a process that has exited (killed simulators leave such entries)
    folder = own_registry / "sims"
    folder.mkdir(parents=True)
    entry = registry.SimEntry("/dev/pts/999", "cylinder-13tap", str(RIG), dead, 0.0)
    (folder / f"{dead}.json").write_text(json.dumps(entry.as_dict()))
    assert registry.running() == []
    assert not (folder / f"{dead}.json").exists()
