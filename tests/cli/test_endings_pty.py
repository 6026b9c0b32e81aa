"""Every way a sweep ends, end to end: `taprig sim` in its own process on a pseudo-terminal (real time), `taprig
sweep` in another, and what the board received (the simulator's own command log), what the session holds and
what the operator was told.

The endings: the host frozen (SIGSTOP) past the board's watchdog, a board reset, a pulled cable, SIGINT, SIGTERM,
SIGHUP and two SIGINTs a few milliseconds apart. The rule checked on each (README, Safety): once the board has
gone safe or the run is ending, it receives no value other than a safe one; the run ends with every actuator at
its safe value (acknowledged when the link is up), the session is closed cleanly and says how the run ended.
"""

from __future__ import annotations

import itertools
import json
import math
import os
import queue
import re
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path

import pytest

from taprig.rig import load_rig
from taprig.session.store import SessionReader

pytestmark = pytest.mark.skipif(os.name != "posix", reason="pseudo-terminals and signals are POSIX")

ROOT = Path(__file__).resolve().parents[2]
RIG = ROOT / "rigs" / "naca0012-20tap.toml"
TAPRIG = [sys.executable, "-m", "taprig"]
POINT = re.compile(r"^\s*-?\d+\.\d\s+\d+\.\d")  # a row of the sweep table: α, q, ...


class Lines:
    """The lines of a child's pipe, read on a thread so a test can wait for one with a timeout."""

    def __init__(self, stream):
        self._queue: queue.Queue = queue.Queue()
        self.seen: list[str] = []
        self._thread = threading.Thread(target=self._read, args=(stream,), daemon=True)
        self._thread.start()

    def _read(self, stream) -> None:
        for line in stream:
            self._queue.put(line)
        self._queue.put(None)

    def wait_for(self, pattern: str | re.Pattern, timeout: float = 60.0) -> str:
        pattern = re.compile(pattern) if isinstance(pattern, str) else pattern
        deadline = time.monotonic() + timeout
        while True:
            try:
                line = self._queue.get(timeout=max(0.0, deadline - time.monotonic()))
            except queue.Empty:
                raise AssertionError(f"no line matching {pattern.pattern!r} within {timeout} s: {self.seen}") from None
            if line is None:
                raise AssertionError(f"the stream ended without {pattern.pattern!r}: {self.seen}")
            self.seen.append(line)
            if pattern.search(line):
                return line

    def text(self) -> str:
        """Everything, once the child has ended."""
        self._thread.join(30)
        while True:
            try:
                line = self._queue.get_nowait()
            except queue.Empty:
                break
            if line is not None:
                self.seen.append(line)
        return "".join(self.seen)


_BENCHES = itertools.count()


class Bench:
    """A simulated board in its own process, logging every command it receives."""

    def __init__(self, tmp_path: Path):
        self.log = tmp_path / "board-commands.jsonl"
        # A seed of its own, so its uid (sim-<rig>-<seed>) is its own: after a pulled cable the host must not take
        # another test's board, on a pseudo-terminal that reused the freed path, for the same one.
        seed = str(3 + os.getpid() % 10_000 * 1000 + next(_BENCHES))
        self.proc = subprocess.Popen([*TAPRIG, "sim", "--rig", str(RIG), "--seconds", "120", "--seed", seed,
                                      "--command-log", str(self.log)],
                                     stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
        self.err = Lines(self.proc.stderr)
        self.path = self.proc.stdout.readline().strip()
        if not self.path.startswith("/dev/"):
            self.proc.kill()
            pytest.fail(f"taprig sim printed no device path: {self.path!r}")

    def received(self) -> list[dict]:
        """The board's own record: each command (all but heartbeats) and each time it made itself safe."""
        return [json.loads(line) for line in self.log.read_text().splitlines()]

    def close(self) -> None:
        if self.proc.poll() is None:
            self.proc.kill()
        self.proc.wait(10)


@pytest.fixture
def bench(tmp_path):
    b = Bench(tmp_path)
    yield b
    b.close()


def start_sweep(bench: Bench, out: Path):
    proc = subprocess.Popen([*TAPRIG, "sweep", "--rig", str(RIG), "--port", bench.path, "--yes",
                             "--from-deg", "-4", "--to-deg", "14", "--step-deg", "2", "--settle", "0.3",
                             "--average", "0.3", "--fan", "0.5", "--spin-up", "2", "--no-zero", "-o", str(out)],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, cwd=ROOT)
    return proc, Lines(proc.stdout), Lines(proc.stderr)


def safe_values() -> dict[int, float]:
    """Each actuator's id and safe value in the board's unit (as the board receives it)."""
    return {a.id: a.to_device(a.safe) for a in load_rig(RIG).actuators}


def moves_after(received: list[dict], index: int) -> list[dict]:
    """Commands after ``index`` that set an actuator to anything but its safe value and that the board took (one it
    refused in its safe hold after a watchdog trip, PROTOCOL.md §4, moved nothing)."""
    safe = safe_values()
    return [c for c in received[index + 1:] if c.get("command") == "SetActuator"
            and abs(c["value"] - safe[c["actuator_id"]]) > 1e-6 and c.get("reply") != "BUSY"]


def assert_ends_with_safe_values(received: list[dict]) -> None:
    """The board's last commands: every actuator to its safe value, the fan first, then STOP."""
    commands = [c for c in received if "command" in c]
    safe = safe_values()
    fan = next(a.id for a in load_rig(RIG).actuators if a.kind.name == "FAN")
    tail = commands[-(len(safe) + 1):]
    assert [c["command"] for c in tail] == ["SetActuator"] * len(safe) + ["Stop"], tail
    assert tail[0]["actuator_id"] == fan
    assert {c["actuator_id"]: c["value"] for c in tail[:-1]} == pytest.approx(safe)


def assert_closed_cleanly(out: Path) -> dict:
    """No -wal or -shm left; the session is sound, stopped, and its shutdown event says what happened."""
    assert out.exists()
    assert not Path(f"{out}-wal").exists() and not Path(f"{out}-shm").exists()
    with SessionReader(out) as r:
        assert r.integrity_check() == "ok"
        assert "stopped_utc" in r.meta and "counters" in r.meta
        events = r.events()
        points = r.points()
    shutdown = [e for e in events if e.kind == "shutdown"]
    assert len(shutdown) == 1 and events[-1].kind == "shutdown"
    return {"shutdown": shutdown[0].data, "kinds": [e.kind for e in events], "points": points,
            "meta_reason": r.meta.get("stop_reason")}


def setpoints_after_halt(out: Path) -> list:
    """Setpoints the host sent (not refused, not the board's own) other than safe values, after it noted a halt."""
    safe = {a.name: a.safe for a in load_rig(RIG).actuators}
    with SessionReader(out) as r:
        events = r.events()
    halt = next(i for i, e in enumerate(events) if e.kind == "halt")
    return [e for e in events[halt + 1:] if e.kind == "setpoint" and not e.data.get("refused")
            and e.data.get("by") != "board" and not math.isclose(e.data["value"], safe[e.data["actuator"]])]


def assert_plain(err: str) -> None:
    """What the operator reads: no traceback, no names of program parts."""
    assert "Traceback" not in err
    assert not re.search(r"\b(SetActuator|LinkDownError|SerialException|AcquisitionError|OSError)\b", err), err


def test_a_frozen_host_stops_the_sweep_with_the_true_cause(tmp_path, bench):
    out = tmp_path / "frozen.taprig"
    proc, stdout, stderr = start_sweep(bench, out)
    try:
        stdout.wait_for(POINT)
        os.kill(proc.pid, signal.SIGSTOP)  # the host freezes: no heartbeat reaches the board
        bench.err.wait_for("watchdog")  # the board's watchdog trips while the host is frozen
        os.kill(proc.pid, signal.SIGCONT)
        code = proc.wait(60)
    finally:
        os.kill(proc.pid, signal.SIGCONT) if proc.poll() is None else None
    err, printed = stderr.text(), stdout.text()
    assert code == 1, err
    assert "watchdog" in err and "check the fan" not in err and "Lift slope" not in printed
    assert_plain(err)
    received = bench.received()
    trip = next(i for i, c in enumerate(received) if c.get("event") == "watchdog")
    assert moves_after(received, trip) == []  # nothing moved after the board went safe
    assert setpoints_after_halt(out) == []
    assert_ends_with_safe_values(received)
    session = assert_closed_cleanly(out)
    assert "halt" in session["kinds"] and "watchdog" in session["shutdown"]["halt_reason"]
    rows = [line for line in printed.splitlines() if POINT.match(line)]
    assert len(session["points"]) == len(rows) >= 1  # the points taken are kept, each one shown
    q = [p.data["q_pa"] for p in session["points"]]
    assert min(q) > 0.8 * max(q)  # no point of a fan running down was accepted


@pytest.mark.parametrize("action, event, words", [
    (signal.SIGUSR1, "reset", "the board restarted"),
    (signal.SIGUSR2, None, "link to the board"),
], ids=["reset", "unplugged"])
def test_a_reset_or_a_pulled_cable_stops_the_sweep(tmp_path, bench, action, event, words):
    out = tmp_path / "halt.taprig"
    proc, stdout, stderr = start_sweep(bench, out)
    stdout.wait_for(POINT)
    bench.proc.send_signal(action)
    code = proc.wait(60)
    err, printed = stderr.text(), stdout.text()
    assert code == 1, err
    assert words in err and "Lift slope" not in printed
    assert_plain(err)
    received = bench.received()
    session = assert_closed_cleanly(out)
    assert "halt" in session["kinds"]
    assert setpoints_after_halt(out) == []  # once the host knew, it sent nothing but safe values
    if event == "reset":
        boot = next(i for i, c in enumerate(received) if c.get("event") == "reset")
        # A setpoint sent before the reboot's news reached the host may still arrive after it: at most that one.
        assert len(moves_after(received, boot)) <= 1
        assert_ends_with_safe_values(received)
        assert all(a["acknowledged"] for a in session["shutdown"]["actuators"])
    else:  # nothing could be sent: the operator is told the board's watchdog does it, and when
        assert "watchdog" in err and "within 1000 ms" in err
        assert session["shutdown"]["link_up"] is False
        assert not any(a["sent"] for a in session["shutdown"]["actuators"])
    assert len(session["points"]) >= 1


@pytest.mark.parametrize("sig", [signal.SIGINT, signal.SIGTERM, signal.SIGHUP], ids=lambda s: s.name)
def test_each_signal_ends_the_sweep_safe(tmp_path, bench, sig):
    out = tmp_path / "signal.taprig"
    proc, stdout, stderr = start_sweep(bench, out)
    stdout.wait_for(POINT)
    proc.send_signal(sig)
    code = proc.wait(60)
    err = stderr.text()
    stdout.text()
    assert code == 128 + sig, err
    assert_plain(err)
    received = bench.received()
    assert_ends_with_safe_values(received)
    session = assert_closed_cleanly(out)
    assert all(a["acknowledged"] for a in session["shutdown"]["actuators"])
    assert sig.name in session["shutdown"]["reason"] and sig.name in session["meta_reason"]
    assert "stop_requested" in session["kinds"]
    # the record's last setpoints are the safe values the board acknowledged
    with SessionReader(out) as r:
        last = {}
        for e in r.events():
            if e.kind == "setpoint":
                last[e.data["actuator"]] = e.data["value"]
    assert last == {a.name: a.safe for a in load_rig(RIG).actuators}


@pytest.mark.parametrize("gap_s", [0.001, 0.1])
def test_a_second_ctrl_c_does_not_break_the_shutdown(tmp_path, bench, gap_s):
    out = tmp_path / "twice.taprig"
    proc, stdout, stderr = start_sweep(bench, out)
    stdout.wait_for(POINT)
    proc.send_signal(signal.SIGINT)
    time.sleep(gap_s)  # the scenario itself: a second Ctrl-C this long after the first (not a wait for a result)
    proc.send_signal(signal.SIGINT)
    code = proc.wait(60)
    err = stderr.text()
    stdout.text()
    assert code == 130, err
    if gap_s >= 0.1:  # 1 ms apart the kernel may merge the two into one delivery (signals do not queue)
        assert "already stopping" in err
    assert_plain(err)
    assert_ends_with_safe_values(bench.received())
    session = assert_closed_cleanly(out)
    assert all(a["acknowledged"] for a in session["shutdown"]["actuators"])
