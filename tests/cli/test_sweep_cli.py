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
    assert out.count("\n  ") >= 4 and "Lift slope" in out and "no stall within the sweep" in out
    # NACA 2412: zero-lift angle about −2° (thin-airfoil theory gives −2.08°; common practice for this section)
    zero_lift = float(out.split("Zero-lift angle ")[1].split(" ± ")[0])
    assert -3.5 < zero_lift < -1.0


def test_real_board_needs_confirmation(capsys, monkeypatch):
    monkeypatch.setattr("sys.stdin.isatty", lambda: False)
    assert main(["sweep", "--rig", RIG, "--port", "/dev/taprig-none"]) == 1
    assert "confirm with --yes" in capsys.readouterr().err


def exit_code(argv) -> int:
    """The command line's exit code, whether argparse refused it (SystemExit) or the command returned."""
    try:
        return main([str(a) for a in argv])
    except SystemExit as exc:
        return exc.code


@pytest.mark.parametrize("args, message", [
    (["--step-deg", "0"], "argument --step-deg: expected a finite number > 0, got '0'"),
    (["--step-deg", "-2"], "argument --step-deg: expected a finite number > 0, got '-2'"),
    (["--step-deg", "nan"], "argument --step-deg"),
    (["--to-deg", "inf"], "argument --to-deg"),
    (["--average", "0"], "argument --average"),
    (["--settle", "-1"], "argument --settle"),
    (["--fan", "nan"], "argument --fan"),
    (["--rate", "-5"], "argument --rate"),
    (["--from-deg", "30", "--to-deg", "40"], "at least 3 angles within the servo's limits"),
    (["--step-deg", "1e-12"], "more than 1000 angles"),
    (["--fan", "5"], "--fan 5 is outside the fan's range"),
])
def test_bad_values_are_a_bad_command_line_refused_before_anything_opens(tmp_path, capsys, args, message):
    # DEVELOPERS.md, Habits: an option value out of range is exit 2, whatever is on disk
    assert exit_code(["sweep", "--rig", RIG, "--port", FAST, "-o", tmp_path / "s.taprig", *args]) == 2
    err = capsys.readouterr().err
    assert message in err and "Traceback" not in err
    assert not (tmp_path / "s.taprig").exists()


def test_demo_refuses_bad_values_the_same_way(tmp_path, capsys):
    assert exit_code(["demo", "--fast", "--step-deg", "-2", "-o", tmp_path / "d.taprig"]) == 2
    assert "argument --step-deg" in capsys.readouterr().err


@pytest.mark.parametrize("name, hint", [("run.csv", "run.taprig"), ("run", "run.taprig"), ("run.db", "run.taprig")])
def test_a_session_is_written_only_under_its_own_suffix(tmp_path, capsys, name, hint):
    out = tmp_path / name
    code = exit_code(["record", "--rig", RIG, "--port", FAST, "--duration", "0.5", "--no-dashboard", "-o", out])
    err = capsys.readouterr().err
    assert code == 2 and hint in err and "Traceback" not in err
    assert not out.exists() and not (tmp_path / hint).exists()


def test_a_sweep_without_flow_stops_and_says_why(tmp_path, capsys):
    # Compressed time with the simulated watchdog on: the host's wall-clock heartbeat cannot keep up, the board
    # trips to safe values and the fan stops; the sweep must stop with the reason, not print points of no flow.
    code = main(["sweep", "--rig", RIG, "--port", "sim://?seed=2&speed=max", "--from-deg", "0", "--to-deg", "4",
                 "-o", str(tmp_path / "s.taprig")])
    captured = capsys.readouterr()
    assert code == 1 and "watchdog tripped" in captured.err and "check the fan" not in captured.err
    assert "Lift slope" not in captured.out


def test_an_unforeseen_error_still_ends_safe_and_closed(tmp_path, capsys, monkeypatch):
    # A defect in the middle of a sweep: the one shutdown path runs before the "internal error" line (exit 3).
    from taprig.cli.commands import sweep as sweep_command
    from taprig.session.store import SessionReader

    def broken(point, kind):
        raise RuntimeError("a defect while printing a row")

    monkeypatch.setattr(sweep_command, "point_line", broken)
    out = tmp_path / "s.taprig"
    code = main(["sweep", "--rig", RIG, "--port", FAST, "--from-deg", "-2", "--to-deg", "4", "--settle", "0.3",
                 "--average", "0.3", "--no-dashboard", "-o", str(out)])
    assert code == 3 and "internal error" in capsys.readouterr().err
    assert not (tmp_path / "s.taprig-wal").exists() and not (tmp_path / "s.taprig-shm").exists()
    with SessionReader(out) as r:
        shutdown = [e for e in r.events() if e.kind == "shutdown"]
        assert r.meta["stop_reason"] == "internal error"
    assert len(shutdown) == 1 and all(a["acknowledged"] for a in shutdown[0].data["actuators"])
