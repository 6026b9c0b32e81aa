"""End to end through a real pseudo-terminal: `taprig sim` in one process, `taprig record` in another,
then `taprig info --json` and `taprig replay` on the file, as a person would run them."""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
from pathlib import Path

import pytest

pytestmark = pytest.mark.skipif(os.name != "posix", reason="pseudo-terminals are POSIX")

ROOT = Path(__file__).resolve().parents[2]
RIG = ROOT / "rigs" / "naca0012-20tap.toml"
TAPRIG = [sys.executable, "-m", "taprig"]


def start_sim(*flags: str) -> tuple[subprocess.Popen, str]:
    proc = subprocess.Popen([*TAPRIG, "sim", "--rig", str(RIG), "--seconds", "60", *flags],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    line = proc.stdout.readline()  # the simulator prints its device path first
    path = next((word for word in line.split() if word.startswith("/dev/")), None)
    if path is None:
        proc.kill()
        pytest.fail(f"taprig sim printed no device path: {line!r} {proc.stderr.read()}")
    return proc, path


def taprig(*args: str, timeout: float = 60) -> subprocess.CompletedProcess:
    return subprocess.run([*TAPRIG, *args], capture_output=True, text=True, timeout=timeout, cwd=ROOT)


@pytest.fixture
def sim_clean():
    proc, path = start_sim("--seed", "3")
    yield path
    proc.kill()
    proc.wait(10)


def test_record_info_replay_over_a_pty(tmp_path, sim_clean):
    out = tmp_path / "bench.taprig"
    rec = taprig("record", "--rig", str(RIG), "--port", sim_clean, "--duration", "2", "--rate", "200",
                 "-o", str(out), "--quiet")
    assert rec.returncode == 0, rec.stderr
    info = taprig("info", str(out), "--json")
    assert info.returncode == 0, info.stderr
    summary = json.loads(info.stdout)
    assert summary["rig"] == "naca0012-20tap"
    assert summary["gaps"] == 0 and summary["crc_errors"] == 0 and summary["scans_lost"] == 0
    assert summary["scans"] >= 200 and summary["frames"] > 0
    replay = taprig("replay", str(out), "--fast", "--quiet")
    assert replay.returncode == 0, replay.stderr


def test_faulty_link_counts_match_in_the_record(tmp_path):
    proc, path = start_sim("--seed", "4", "--ber", "2e-5", "--burst-rate", "1")
    try:
        out = tmp_path / "noisy.taprig"
        rec = taprig("record", "--rig", str(RIG), "--port", path, "--duration", "3", "--rate", "500",
                     "-o", str(out), "--quiet")
        assert rec.returncode == 0, rec.stderr
    finally:
        proc.kill()
        proc.wait(10)
    summary = json.loads(taprig("info", str(out), "--json").stdout)
    assert summary["crc_errors"] + summary["gaps"] > 0
    assert summary["counters_match"] is True  # decoding the file again gives the live counters


def test_rig_that_does_not_match_the_board(tmp_path, sim_clean):
    rec = taprig("record", "--rig", str(ROOT / "rigs" / "venturi-8.toml"), "--port", sim_clean,
                 "--duration", "1", "-o", str(tmp_path / "x.taprig"))
    assert rec.returncode == 1
    assert "does not match rig 'venturi-8'" in rec.stderr and "Traceback" not in rec.stderr
    # one difference a line, each a short line a person can read
    listed = [line for line in rec.stderr.splitlines() if line.startswith("  - ")]
    assert len(listed) >= 1 and all(len(line) < 300 for line in listed)


def test_missing_port_is_one_line(tmp_path):
    rec = taprig("record", "--rig", str(RIG), "--port", "/dev/taprig-no-such-port", "--duration", "1",
                 "-o", str(tmp_path / "x.taprig"))
    assert rec.returncode == 1 and "Traceback" not in rec.stderr
    assert "/dev/taprig-no-such-port" in rec.stderr


def test_a_run_that_never_started_leaves_no_file(tmp_path):
    out = tmp_path / "x.taprig"
    rec = taprig("record", "--rig", str(RIG), "--port", "/dev/taprig-no-such-port", "-o", str(out))
    assert rec.returncode == 1 and not out.exists()  # so the same command can be run again once fixed


def test_info_on_a_session_being_recorded_says_so(tmp_path, sim_clean):
    out = tmp_path / "live.taprig"
    rec = subprocess.Popen([*TAPRIG, "record", "--rig", str(RIG), "--port", sim_clean, "--duration", "30",
                            "--rate", "200", "--no-dashboard", "-o", str(out)],
                           stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, cwd=ROOT)
    try:
        rec.stderr.readline()  # the first live line: the recording is under way (committed every 250 ms)
        info = taprig("info", str(out))
        assert info.returncode == 0, info.stderr
        assert "being recorded now" in info.stdout and "not stopped cleanly" not in info.stdout
    finally:
        rec.send_signal(signal.SIGTERM)
        rec.wait(30)
    after = taprig("info", str(out))
    assert "being recorded" not in after.stdout and "not stopped cleanly" not in after.stdout
