"""``taprig replay``, ``taprig export``, ``taprig info``: output, exit codes, one-line errors on bad input."""

from __future__ import annotations

import json
import sqlite3
from datetime import datetime, timezone
from pathlib import Path

import pandas as pd
import pytest

from taprig.bench.bench_replay import Setpoint, record_simulated
from taprig.cli import main
from taprig.rig import Calibration, ChannelCalibration, calibration_to_text, load_rig
from taprig.session.store import FORMAT_VERSION
from taprig.sim import SimOptions

RIGS = Path(__file__).resolve().parents[2] / "rigs"
AIRFOIL = RIGS / "naca0012-20tap.toml"
FAN = [Setpoint(0.0, "fan", 0.9)]
QUICK_FAN = dict(fan_rate=0.0, fan_tau=0.1)


@pytest.fixture(scope="module")
def sessions(tmp_path_factory):
    """A clean-link session and a faulty-link one (bit errors, burst drops), with what the simulator injected."""
    base = tmp_path_factory.mktemp("cli")
    clean = base / "clean.taprig"
    record_simulated(AIRFOIL, clean, 2.0, 400.0, SimOptions(seed=2, **QUICK_FAN), FAN)
    faulty = base / "faulty.taprig"
    run = record_simulated(AIRFOIL, faulty, 2.0, 400.0, SimOptions(seed=9, ber=3e-5, burst_rate=2.0, **QUICK_FAN),
                           FAN)
    return clean, faulty, run.tally


def run_cli(capsys, *argv) -> tuple[int, str, str]:
    code = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out, err


def assert_one_line_error(code: int, err: str, *words: str) -> None:
    assert code == 1
    lines = err.strip().splitlines()
    assert len(lines) == 1 and "Traceback" not in err, err
    for word in words:
        assert word in lines[0], (word, lines[0])


@pytest.mark.parametrize("command", ["replay", "export", "info"])
def test_help(capsys, command):
    with pytest.raises(SystemExit) as exit_info:
        main([command, "--help"])
    assert exit_info.value.code == 0
    assert command in capsys.readouterr().out


def test_info_json_on_a_clean_link(capsys, sessions):
    clean, _, _ = sessions
    code, out, _ = run_cli(capsys, "info", clean, "--json")
    info = json.loads(out)
    assert code == 0
    for key in ("rig", "started", "duration_s", "scans", "frames", "crc_errors", "gaps", "scans_lost", "events",
                "points"):
        assert key in info
    assert info["rig"] == "naca0012-20tap" and info["duration_s"] == 2.0 and info["scans"] == 800
    assert info["crc_errors"] == 0 and info["gaps"] == 0 and info["scans_lost"] == 0
    assert info["counters_match"] is True and info["events"] == 1 and info["points"] == 0


def test_info_json_counts_exactly_what_was_injected(capsys, sessions):
    _, faulty, tally = sessions
    code, out, _ = run_cli(capsys, "info", faulty, "--json")
    info = json.loads(out)
    assert code == 0 and tally["frames_corrupted"] > 0 and tally["frames_lost"] > 0
    # the simulator's tally is the truth a receiver must reproduce (taprig.sim.faults.FaultTally)
    assert info["crc_errors"] + info["framing_errors"] == tally["frames_corrupted"]
    assert info["gaps"] == tally["gaps"] and info["frames_lost"] == tally["frames_lost"]
    assert info["scans_lost"] == tally["scans_lost"]
    assert info["counters"] == info["live_counters"]


def test_info_text(capsys, sessions):
    code, out, _ = run_cli(capsys, "info", sessions[0])
    assert code == 0 and "naca0012-20tap" in out and "scans     800" in out


def test_replay_fast_prints_a_line_per_second_and_a_summary(capsys, sessions):
    code, out, err = run_cli(capsys, "replay", sessions[0], "--fast")
    lines = out.strip().splitlines()
    assert code == 0 and err == ""
    assert [line.split()[1] for line in lines[:-1]] == ["0", "1", "2"]
    assert all(" q " in line and " Cl " in line and "crc 0" in line for line in lines[1:-1])
    assert lines[-1].startswith("replayed") and "800 scans" in lines[-1]


def test_replay_paced_with_seek(capsys, sessions):
    code, out, _ = run_cli(capsys, "replay", sessions[0], "--speed", "50", "--seek", "1.5", "--quiet")
    assert code == 0
    assert out.strip().splitlines() == [out.strip()] and "replayed" in out and "800 scans" not in out


def q_of_lines(out: str) -> list[float]:
    return [float(line.split(" q ")[1].split()[0]) for line in out.strip().splitlines()[:-1]]


def test_replay_with_another_calibration(tmp_path, capsys, sessions):
    rig = load_rig(AIRFOIL)
    channels = {}
    for c in rig.channels:
        sensor = rig.sensors[c.sensor]
        channels[c.name] = ChannelCalibration(zero_counts=-sensor.intercept / sensor.slope, gain=1.5)
    cal = tmp_path / "gain.toml"
    cal.write_text(calibration_to_text(Calibration(rig_id=rig.id, date=datetime(2024, 6, 1, tzinfo=timezone.utc),
                                                   channels=channels)))
    code, out, _ = run_cli(capsys, "replay", sessions[0], "--fast", "--calibration", cal)
    assert code == 0 and f"reduced with {cal}" in out
    _, nominal, _ = run_cli(capsys, "replay", sessions[0], "--fast")
    # every gain × 1.5 with the nominal zero: q = K (p0 − p∞) scales by 1.5 (linear in the readings)
    q_cal_lines, q_nominal_lines = q_of_lines(out)[1:], q_of_lines(nominal)[1:]
    assert len(q_cal_lines) == len(q_nominal_lines) >= 2, (out, nominal)  # seconds 1 and 2 of the 2 s session
    for q_cal, q_nominal in zip(q_cal_lines, q_nominal_lines):
        assert q_cal == pytest.approx(1.5 * q_nominal, abs=0.2)


def test_replay_refuses_bad_calibrations(tmp_path, capsys, sessions):
    missing = tmp_path / "nowhere.toml"
    assert_one_line_error(*run_cli(capsys, "replay", sessions[0], "--fast", "--calibration", missing)[::2],
                          str(missing))
    broken = tmp_path / "broken.toml"
    broken.write_text("rig_id = 'naca0012-20tap'\ndate = 'yesterday'\n[channels.p_total]\ngain = -1\n")
    assert_one_line_error(*run_cli(capsys, "replay", sessions[0], "--fast", "--calibration", broken)[::2],
                          str(broken))


def test_speed_and_fast_exclude_each_other(capsys, sessions):
    with pytest.raises(SystemExit) as exit_info:
        main(["replay", str(sessions[0]), "--fast", "--speed", "2"])
    assert exit_info.value.code == 2


def test_export_csv_then_refuse_to_overwrite(tmp_path, capsys, sessions):
    out = tmp_path / "run.csv"
    code, text, _ = run_cli(capsys, "export", sessions[0], "--format", "csv", "-o", out)
    assert code == 0 and "wrote 800 scans" in text
    assert len(pd.read_csv(out)) == 800
    assert_one_line_error(*run_cli(capsys, "export", sessions[0], "--format", "csv", "-o", out)[::2],
                          "already exists", "--force")
    assert run_cli(capsys, "export", sessions[0], "--format", "csv", "-o", out, "--force")[0] == 0


def test_export_parquet_by_suffix_and_partitioned(tmp_path, capsys, sessions):
    assert run_cli(capsys, "export", sessions[0], "-o", tmp_path / "run.parquet")[0] == 0
    assert len(pd.read_parquet(tmp_path / "run.parquet")) == 800
    code, text, _ = run_cli(capsys, "export", *sessions[:2], "--partitioned", tmp_path / "archive")
    assert code == 0 and text.count("wrote") == 2
    assert len(list((tmp_path / "archive" / "scans" / "rig=naca0012-20tap").rglob("*.parquet"))) == 2


def test_export_into_a_missing_or_unwritable_place(tmp_path, capsys, sessions):
    assert_one_line_error(*run_cli(capsys, "export", sessions[0], "-o", tmp_path / "no" / "run.csv")[::2],
                          "no such directory")
    (tmp_path / "plain-file").write_text("x")
    assert_one_line_error(*run_cli(capsys, "export", sessions[0], "-o", tmp_path / "plain-file" / "x.csv")[::2])


def not_a_session(path: Path) -> Path:
    path.write_text("t_s,q_pa\n0,1\n")
    return path


def truncated(path: Path, source: Path) -> Path:
    path.write_bytes(source.read_bytes()[:3000])
    return path


def newer(path: Path, source: Path) -> Path:
    path.write_bytes(source.read_bytes())
    con = sqlite3.connect(path)
    con.execute("UPDATE meta SET value = ? WHERE key = 'format_version'", (str(FORMAT_VERSION + 1),))
    con.commit()
    con.close()
    return path


@pytest.mark.parametrize("command", [["info", "--json"], ["replay", "--fast"], ["export", "-o", "OUT.csv"]])
@pytest.mark.parametrize("kind", ["missing", "not a session", "truncated", "newer"])
def test_bad_session_files_are_one_line_errors(tmp_path, capsys, sessions, command, kind):
    clean = sessions[0]
    path = {"missing": lambda: tmp_path / "gone.taprig",
            "not a session": lambda: not_a_session(tmp_path / "table.csv"),
            "truncated": lambda: truncated(tmp_path / "cut.taprig", clean),
            "newer": lambda: newer(tmp_path / "future.taprig", clean)}[kind]()
    argv = [command[0], path] + [str(tmp_path / a) if a == "OUT.csv" else a for a in command[1:]]
    code, _, err = run_cli(capsys, *argv)
    expected = {"missing": "no such session file", "not a session": "not a taprig session",
                "truncated": "session", "newer": "newer"}[kind]
    assert_one_line_error(code, err, str(path), expected)
    assert not (tmp_path / "OUT.csv").exists()


@pytest.mark.parametrize("command", [["info"], ["replay", "--fast"], ["export", "--format", "csv", "-o", "OUT.csv"]])
def test_a_directory_given_as_the_session_says_so(tmp_path, capsys, command):
    argv = [command[0], tmp_path] + [str(tmp_path / a) if a == "OUT.csv" else a for a in command[1:]]
    assert_one_line_error(*run_cli(capsys, *argv)[::2], str(tmp_path), "is a directory")


@pytest.mark.parametrize("target", ["{s}", "{s}-wal", "{s}-shm", "{d}/../{d_name}/{s_name}", "link.taprig"])
def test_export_never_writes_over_the_session_it_reads(tmp_path, capsys, sessions, target):
    session = tmp_path / "run.taprig"
    session.write_bytes(sessions[0].read_bytes())
    (tmp_path / "link.taprig").symlink_to(session)
    before = session.read_bytes()
    out = target.format(s=session, d=tmp_path, d_name=tmp_path.name, s_name=session.name)
    out = out if out.startswith("/") else str(tmp_path / out)
    code, _, err = run_cli(capsys, "export", session, "--format", "csv", "-o", out, "--force")
    assert_one_line_error(code, err, "is the session being exported")
    assert session.read_bytes() == before
    assert run_cli(capsys, "info", session)[0] == 0


def test_replay_seek_past_the_end_says_so(capsys, sessions):
    # the clean session is 2 s long (record_simulated above)
    code, out, err = run_cli(capsys, "replay", sessions[0], "--fast", "--seek", "100")
    assert_one_line_error(code, err, "seek 100 s is past the end of the session", "nothing to replay")
    assert out == ""


def test_record_to_a_directory_says_it_is_one(tmp_path, capsys):
    code, _, err = run_cli(capsys, "record", "--rig", AIRFOIL, "--port", "sim://", "-o", tmp_path)
    assert_one_line_error(code, err, str(tmp_path), "is a directory")
    assert list(tmp_path.iterdir()) == []


def test_a_rig_file_given_as_the_calibration_says_so(tmp_path, capsys, sessions):
    for command in (["replay", sessions[0], "--fast"], ["export", sessions[0], "-o", tmp_path / "unused.csv"]):
        code, _, err = run_cli(capsys, *command, "--calibration", AIRFOIL)
        assert_one_line_error(code, err, f"{AIRFOIL} is a rig file, not a calibration (taprig calibrate writes one)")
    assert not (tmp_path / "unused.csv").exists()


def test_record_with_a_rig_file_as_the_calibration_says_so(tmp_path, capsys):
    code, _, err = run_cli(capsys, "record", "--rig", AIRFOIL, "--port", "sim://", "-o", tmp_path / "x.taprig",
                           "--calibration", AIRFOIL)
    assert_one_line_error(code, err, "is a rig file, not a calibration")
    assert not (tmp_path / "x.taprig").exists()


@pytest.mark.parametrize("command", [["check"], ["sim", "--rig"]])
def test_a_session_given_as_a_rig_file_says_so(capsys, sessions, command):
    code, _, err = run_cli(capsys, *command, sessions[0])
    assert_one_line_error(code, err, f"{sessions[0]} is not a text TOML rig file (a session? try taprig info)")
    assert "codec" not in err


def test_record_with_a_session_as_the_rig_says_so(tmp_path, capsys, sessions):
    code, _, err = run_cli(capsys, "record", "--rig", sessions[0], "--port", "sim://", "-o", tmp_path / "x.taprig")
    assert_one_line_error(code, err, "is not a text TOML rig file")


def test_replay_says_no_flow_with_the_fan_off_as_the_live_line_does(tmp_path, capsys):
    # issue 10, item 2: with the fan off, "no flow" and no Cl, V or Re. The session starts wind-off (the zero a
    # sweep or demo takes first) and the fan comes on at 1 s; replay's line per second is the live line's flow part.
    path = tmp_path / "wind-off-first.taprig"
    record_simulated(AIRFOIL, path, 3.0, 400.0, SimOptions(seed=4, **QUICK_FAN), [Setpoint(1.0, "fan", 0.9)])
    code, out, err = run_cli(capsys, "replay", path, "--fast")
    lines = out.strip().splitlines()[:-1]
    assert code == 0 and err == "" and lines[0].split()[1] == "0"
    off = lines[0]
    assert "no flow" in off, off
    for word in (" V ", " Re ", " Cl ", "nan"):
        assert word not in off, off
    on = lines[-1]
    assert "no flow" not in on and " V " in on and " Re " in on and " Cl " in on, on
