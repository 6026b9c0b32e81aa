"""`taprig sweep` and `taprig demo` from the command line (simulated board in compressed time)."""

from __future__ import annotations

from pathlib import Path

import pytest

from taprig.cli import main

ROOT = Path(__file__).resolve().parents[2]
RIG = str(ROOT / "rigs" / "cambered-balance.toml")
FAST = "sim://?seed=2&speed=max&watchdog_ms=0"


def test_sweep_prints_points_and_the_lift_curve(tmp_path, capsys):
    code = main(["sweep", "--rig", RIG, "--port", FAST, "--from-deg", "-2", "--to-deg", "4", "--step-deg", "2",
                 "--settle", "0.5", "--average", "0.5", "-o", str(tmp_path / "s.taprig")])
    captured = capsys.readouterr()
    out = captured.out
    assert code == 0, captured.err
    assert out.count("\n  ") >= 4 and "lift slope" in out and "no stall within the sweep" in out
    # NACA 2412: zero-lift angle about −2° (thin-airfoil theory gives −2.08°; common practice for this section)
    zero_lift = float(out.split("zero lift at ")[1].split("°")[0])
    assert -3.5 < zero_lift < -1.0


def test_real_board_needs_confirmation(capsys, monkeypatch):
    monkeypatch.setattr("sys.stdin.isatty", lambda: False)
    assert main(["sweep", "--rig", RIG, "--port", "/dev/taprig-none"]) == 1
    assert "confirm with --yes" in capsys.readouterr().err


@pytest.mark.parametrize("args, message", [
    (["--step-deg", "0"], "--step-deg must be positive"),
    (["--from-deg", "30", "--to-deg", "40"], "at least 3 angles within the servo's limits"),
])
def test_bad_sweep_ranges(tmp_path, capsys, args, message):
    assert main(["sweep", "--rig", RIG, "--port", FAST, "-o", str(tmp_path / "s.taprig"), *args]) == 1
    assert message in capsys.readouterr().err
    assert not (tmp_path / "s.taprig").exists()  # refused before anything was opened


@pytest.mark.parametrize("args, message", [
    (["--step-deg", "nan"], "--step-deg must be a finite number"),
    (["--to-deg", "inf"], "--to-deg must be a finite number"),
    (["--step-deg", "1e-12"], "more than 1000 angles"),
    (["--average", "0"], "--average must be more than 0 s"),
    (["--settle", "-1"], "--settle must be 0 s or more"),
])
def test_bad_numbers_are_refused_before_anything_opens(tmp_path, capsys, args, message):
    assert main(["sweep", "--rig", RIG, "--port", FAST, "-o", str(tmp_path / "s.taprig"), *args]) == 1
    assert message in capsys.readouterr().err
    assert not (tmp_path / "s.taprig").exists()


def test_a_sweep_without_flow_stops_and_says_why(tmp_path, capsys):
    # Compressed time with the simulated watchdog on: the host's wall-clock heartbeat cannot keep up, the board
    # trips to safe values and the fan stops; the sweep must stop with the reason, not print points of no flow.
    code = main(["sweep", "--rig", RIG, "--port", "sim://?seed=2&speed=max", "--from-deg", "0", "--to-deg", "4",
                 "-o", str(tmp_path / "s.taprig")])
    captured = capsys.readouterr()
    assert code == 1 and "watchdog tripped" in captured.err and "check the fan" not in captured.err
    assert "lift slope" not in captured.out
