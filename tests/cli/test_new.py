"""``taprig new``: a rig file from answers or a tap CSV that passes ``check``, records on the simulated rig and
draws clean; bad answers are refused naming what to fix."""

from __future__ import annotations

import io
import json
from pathlib import Path

import numpy as np
import pytest

from taprig.bench.bench_replay import Setpoint, record_simulated
from taprig.cli import main
from taprig.physics.sections import naca4
from taprig.rig import load_rig
from taprig.rig.picture import rig_picture
from taprig.sim import SimOptions

# A 16-tap layout of our own: 8 upper, 8 lower, closer towards the nose
TAPS_CSV = "x_c,surface\n" + "".join(f"{x},upper\n" for x in (0.0, 0.02, 0.06, 0.15, 0.3, 0.5, 0.7, 0.9)) + \
           "".join(f"{x},lower\n" for x in (0.02, 0.06, 0.15, 0.3, 0.5, 0.7, 0.85, 0.95))


@pytest.fixture
def taps_csv(tmp_path: Path) -> Path:
    path = tmp_path / "taps.csv"
    path.write_text(TAPS_CSV, encoding="utf-8")
    return path


def test_from_a_tap_csv_the_rig_checks_draws_clean_and_records(tmp_path, taps_csv, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)
    assert main(["new", "wing.toml", "--taps", "taps.csv", "--section", "2412", "--chord-mm", "120",
                 "--tunnel-mm", "250x300", "--tap-range-pa", "1500", "--pitot-range-pa", "800"]) == 0
    assert "wrote wing.toml" in capsys.readouterr().out
    assert main(["check", "wing.toml"]) == 0
    assert "can compute:" in capsys.readouterr().out
    rig = load_rig(tmp_path / "wing.toml")
    assert [t.x_c for t in rig.taps] == [float(line.split(",")[0]) for line in TAPS_CSV.splitlines()[1:]]
    assert [t.channel for t in rig.taps] == [f"p{i:02d}" for i in range(1, 17)]
    assert (rig.geometry.chord, rig.geometry.tunnel_height, rig.geometry.tunnel_width) == pytest.approx((0.12, 0.25, 0.3))
    assert rig.sensors["tap"].range_pa == pytest.approx((-1500.0, 1500.0))
    assert "Cl/Cd/Cm (pressure integral)" in rig.capabilities()
    assert rig_picture(rig).problems == ()
    session = tmp_path / "first.taprig"
    record_simulated(tmp_path / "wing.toml", session, 1.0, 200.0, SimOptions(seed=4, fan_rate=0.0, fan_tau=0.1),
                     [Setpoint(0.0, "fan", 0.8)])
    assert main(["info", str(session), "--json"]) == 0
    info = json.loads(capsys.readouterr().out)
    assert info["rig"] == "wing" and info["scans"] >= 190 and info["crc_errors"] == 0


def test_answers_at_the_terminal(tmp_path, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)
    answers = ["lab-wing", "0015", "ten", "100", "300", "12", "analog", "", "", "n"]  # "ten" is asked again
    monkeypatch.setattr("sys.stdin", io.StringIO("\n".join(answers) + "\n"))
    assert main(["new", "mine.toml"]) == 0
    captured = capsys.readouterr()
    assert "expected a number > 0 in mm" in captured.err
    rig = load_rig(tmp_path / "mine.toml")
    assert rig.id == "lab-wing" and rig.section.naca == "0015" and rig.geometry.chord == pytest.approx(0.1)
    assert rig.geometry.tunnel_height == pytest.approx(0.3) and rig.geometry.tunnel_width == pytest.approx(0.3)
    assert len(rig.taps) == 12 and sum(t.surface.value == "upper" for t in rig.taps) == 6
    assert rig.sensors["tap"].kind == "ratiometric" and rig.actuators == ()
    assert main(["check", "mine.toml"]) == 0


def test_a_coordinate_file_in_another_folder(tmp_path, capsys, monkeypatch):
    shape = naca4("4412")
    (tmp_path / "shapes").mkdir()
    np.savetxt(tmp_path / "shapes" / "wing.csv", np.column_stack((shape.x, shape.y)), delimiter=",", header="x,y",
               comments="")
    monkeypatch.chdir(tmp_path)
    assert main(["new", "rigs/w.toml", "--section", "shapes/wing.csv", "--tap-count", "16"]) == 0
    text = (tmp_path / "rigs" / "w.toml").read_text(encoding="utf-8")
    assert 'coordinates_file = "../shapes/wing.csv"' in text
    rig = load_rig(tmp_path / "rigs" / "w.toml")
    assert rig.section.shape.surface_y(0.3, True) == pytest.approx(float(shape.surface_y(0.3, True)), abs=1e-4)
    assert rig_picture(rig).problems == ()


@pytest.mark.parametrize("csv_text,message", [
    ("x_c,surface\n0.1,upper\nabc,upper\n0.3,lower\n", "taps.csv line 3, x_c: expected a number (got 'abc')"),
    ("x_c,surface\n0.1,upper\n1.5,upper\n0.3,lower\n", "taps.csv line 3, x_c: expected x/c from 0 (leading edge) to 1"),
    ("x_c,surface\n0.1,upper\n0.2,side\n0.3,lower\n", "taps.csv line 3, surface: expected upper or lower (got 'side')"),
    ("x_c,side\n0.1,upper\n", "taps.csv line 1: expected a header line naming each column once, x_c and surface"),
])
def test_a_bad_tap_csv_is_refused_naming_its_line(tmp_path, capsys, monkeypatch, csv_text, message):
    monkeypatch.chdir(tmp_path)
    (tmp_path / "taps.csv").write_text(csv_text, encoding="utf-8")
    assert main(["new", "x.toml", "--taps", "taps.csv"]) == 1
    err = capsys.readouterr().err
    assert message in err and "Traceback" not in err, err
    assert not (tmp_path / "x.toml").exists()


def test_an_existing_file_is_kept(tmp_path, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)
    (tmp_path / "x.toml").write_text("keep me", encoding="utf-8")
    assert main(["new", "x.toml", "--tap-count", "8"]) == 1
    assert "already exists (--force writes over it)" in capsys.readouterr().err
    assert (tmp_path / "x.toml").read_text(encoding="utf-8") == "keep me"
    assert main(["new", "x.toml", "--tap-count", "8", "--force"]) == 0


@pytest.mark.parametrize("argv,message", [
    (["x.txt"], "a rig file is written as .toml"),
    (["x.toml", "--tunnel-mm", "wide"], "expected HEIGHTxWIDTH in mm"),
    (["x.toml", "--chord-mm", "0"], "--chord-mm"),
    (["x.toml", "--tap-count", "2"], "expected 3 to 63 taps"),
    (["x.toml", "--id", "My Rig"], "'My Rig': expected lower-case letters"),
])
def test_bad_command_lines_exit_2(tmp_path, capsys, monkeypatch, argv, message):
    monkeypatch.chdir(tmp_path)
    with pytest.raises(SystemExit) as info:
        raise SystemExit(main(["new", *argv]))
    assert info.value.code == 2
    assert message in capsys.readouterr().err


def test_no_answer_at_all_says_how_to_give_them(tmp_path, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)
    monkeypatch.setattr("sys.stdin", io.StringIO(""))
    assert main(["new", "x.toml"]) == 1
    assert "give the answers as options (taprig new --help)" in capsys.readouterr().err
