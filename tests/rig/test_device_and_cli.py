"""Rig against a device self-description, and ``taprig calibrate`` from a file and guided at the terminal."""

from __future__ import annotations

import argparse
from dataclasses import replace
from pathlib import Path

import pytest

from taprig.cli import main
from taprig.cli.commands import calibrate as calibrate_cmd
from taprig.protocol import ActuatorInfo, ActuatorKind, ChannelInfo, Description, Encoding
from taprig.rig import ManometerReading, load_calibration, load_rig, manometer_pressure

RIGS = Path(__file__).resolve().parents[2] / "rigs"
RIG = load_rig(RIGS / "cambered-balance.toml")


def _description(**changes) -> Description:
    channels = tuple(ChannelInfo(c.name, c.encoding) for c in sorted(RIG.channels, key=lambda c: c.index))
    actuators = (
        ActuatorInfo(0, ActuatorKind.FAN, 0.0, 1.0, 0.0, "duty", "fan"),
        ActuatorInfo(1, ActuatorKind.ANGLE, -12.0, 25.0, 0.0, "deg", "alpha"),
    )
    base = Description(1, 0, "test-fw 1.0", "ABC123", 1.0, 2000.0, 4096, 1000, channels, actuators)
    return replace(base, **changes)


def test_matching_description_has_no_differences() -> None:
    assert RIG.differences(_description()) == []


def test_channel_differences_are_named() -> None:
    d = _description()
    fewer = replace(d, channels=d.channels[:10])
    wrong = replace(d, channels=d.channels[:1] + (ChannelInfo("u1", Encoding.I16),) + d.channels[2:])
    assert RIG.differences(fewer) == ["the device has 10 channel(s), the rig file describes 11",
                                      "channel 'lift' (index 10) is not on the device, which has 10 channel(s)"]
    few = replace(d, channels=d.channels[:3])
    assert RIG.differences(few)[1].startswith("8 of the rig's channels (")  # one sentence, not eight
    assert len(RIG.differences(few)) == 2
    more = replace(d, channels=d.channels + (ChannelInfo("spare", Encoding.U16),))
    assert RIG.differences(more) == ["the device has 12 channel(s), the rig file describes 11; "
                                     "the rig file does not describe device channel(s) [11]"]
    assert RIG.differences(wrong) == ["channel 'u1' (index 1): the rig expects u16, the device sends i16 (device name 'u1')"]


def test_actuator_differences_are_named() -> None:
    d = _description()
    narrow = replace(d, actuators=(d.actuators[0], ActuatorInfo(1, ActuatorKind.ANGLE, -5.0, 25.0, 0.0, "deg", "a")))
    unsafe = replace(d, actuators=(ActuatorInfo(0, ActuatorKind.FAN, 0.0, 1.0, 0.2, "duty", "fan"), d.actuators[1]))
    missing = replace(d, actuators=d.actuators[:1])
    kind = replace(d, actuators=(ActuatorInfo(0, ActuatorKind.OTHER, 0.0, 1.0, 0.0, "duty", "x"), d.actuators[1]))
    assert RIG.differences(narrow) == ["actuator 'alpha' (id 1): the rig's range [-8, 16] is not within the device's [-5, 25]"]
    assert RIG.differences(unsafe) == ["actuator 'fan' (id 0): the rig's safe value 0 differs from the device's 0.2"]
    assert RIG.differences(missing) == ["actuator 'alpha' (id 1) is not on the device (its actuator ids: 0)"]
    assert RIG.differences(kind) == ["actuator 'fan' (id 0): the rig says fan, the device says other"]


CHANNELS = ["u1", "u2", "u3", "u4"]
SLOPE = RIG.sensor_of("u1").slope
TRUE_GAIN, TRUE_ZERO = 1.02, 2052.0
READINGS_MM = [0.0, 40.0, 80.0, 120.0, 160.0]


def _counts(p: float, scans: int = 4) -> list[list[float]]:
    row = TRUE_ZERO + p / (TRUE_GAIN * SLOPE)
    return [[row] * len(CHANNELS) for _ in range(scans)]


def _pressure(mm: float) -> float:
    return manometer_pressure(ManometerReading(mm * 1e-3, liquid_temperature=293.15))


def _toml_input() -> str:
    lines = [f"channels = {CHANNELS!r}".replace("'", '"'), 'operator_note = "morning check"', "[manometer]",
             "angle_deg = 90.0", 'liquid = "water"', "liquid_temperature_c = 20.0", "[zero]", f"counts = {_counts(0.0)}",
             "[end_zero]", f"counts = {_counts(0.0)}"]
    for mm in READINGS_MM:
        lines += ["[[points]]", f"reading_mm = {mm}", f"counts = {_counts(_pressure(mm))}"]
    return "\n".join(lines) + "\n"


def _csv_input(with_readings: bool = True) -> str:
    rows = ["step,reading_mm," + ",".join(CHANNELS)]
    steps = [("zero", 0.0)] + [(f"p{k}", mm) for k, mm in enumerate(READINGS_MM)]
    for step, mm in steps:
        for scan in _counts(0.0 if step == "zero" else _pressure(mm)):
            reading = f"{mm}" if with_readings and step != "zero" else ""
            rows.append(f"{step},{reading}," + ",".join(f"{c:.6f}" for c in scan))
    return "\n".join(rows) + "\n"


@pytest.mark.parametrize("suffix,text", [(".toml", _toml_input()), (".csv", _csv_input())])
def test_calibrate_from_file_recovers_the_gain(suffix: str, text: str, tmp_path: Path, capsys) -> None:
    src = tmp_path / f"points{suffix}"
    src.write_text(text, encoding="utf-8")
    out = tmp_path / "cal.toml"
    rc = main(["calibrate", str(RIGS / "cambered-balance.toml"), "--from", str(src), "-o", str(out),
               "--date", "2024-05-01T10:30:00+00:00"])
    assert rc == 0, capsys.readouterr().err
    cal = load_calibration(out)
    assert cal.rig_id == RIG.id and set(cal.channels) == set(CHANNELS)
    for entry in cal.channels.values():
        assert entry.gain == pytest.approx(TRUE_GAIN, rel=1e-6)
        assert entry.zero_counts == pytest.approx(TRUE_ZERO, rel=1e-9)
        assert entry.flags == ()


def test_calibrate_guided_asks_for_the_readings(tmp_path: Path) -> None:
    src = tmp_path / "counts.csv"
    src.write_text(_csv_input(with_readings=False), encoding="utf-8")
    answers = iter(["", *[str(mm) for mm in READINGS_MM], "", "n"])
    said: list[str] = []
    out = tmp_path / "cal.json"
    parser = argparse.ArgumentParser()
    calibrate_cmd.register(parser.add_subparsers())
    args = parser.parse_args(["calibrate", str(RIGS / "cambered-balance.toml"), "--counts", str(src), "-o", str(out)])
    assert calibrate_cmd.run(args, ask=lambda prompt: next(answers), say=said.append) == 0
    cal = load_calibration(out)
    assert cal.channels["u3"].gain == pytest.approx(TRUE_GAIN, rel=1e-6)
    assert any("40.0 mm →" in line for line in said)


def test_calibrate_flags_out_of_tolerance_and_strict_exits_1(tmp_path: Path, capsys) -> None:
    text = _toml_input().replace("reading_mm = 160.0", "reading_mm = 100.0")  # one point misread → bad linearity
    src = tmp_path / "points.toml"
    src.write_text(text, encoding="utf-8")
    out = tmp_path / "c.toml"
    # a calibration failing its own checks is not written unless the user forces it
    assert main(["calibrate", str(RIGS / "cambered-balance.toml"), "--from", str(src), "-o", str(out)]) == 1
    err = capsys.readouterr().err
    assert "fails its own checks" in err and "--accept-failed" in err and "nothing was written" in err
    assert not out.exists()
    rc = main(["calibrate", str(RIGS / "cambered-balance.toml"), "--from", str(src), "-o", str(out), "--strict",
               "--accept-failed"])
    assert rc == 1
    assert "out of tolerance" in capsys.readouterr().out
    # forced and written: using it is refused unless forced again, and then every reduced value is marked
    from taprig.cli.runopts import load_calibration_arg
    from taprig.cli import UserError
    from taprig.reduce import Reducer
    from taprig.rig import load_rig

    rig = load_rig(RIGS / "cambered-balance.toml")
    with pytest.raises(UserError, match="failed its own checks.*--accept-failed-calibration"):
        load_calibration_arg(str(out), rig)
    reducer = Reducer(rig, load_calibration_arg(str(out), rig, accept_failed=True))
    assert "FAILED ITS OWN CHECKS" in reducer.calibration_warning and "u1" in reducer.calibration_warning
    assert reducer.calibration_warning in reducer.assumptions
    assert reducer.assumption_data()["calibration"]["forced"] is True


@pytest.mark.parametrize(
    "text,message",
    [
        ('channels = ["u1", "nope"]\n', "channels[1]: not a channel"),
        ('[manometer]\nangle = 10\n', "manometer.angle: unknown key"),
        ('channels = ["u1"]\n[zero]\ncounts = [[1, 2]]\n', "zero.counts: expected scans × 1 channels"),
        ('channels = ["u1"]\n[[points]]\nreading_mm = 1\nreference_pa = 2\n', "points[0]: give one of"),
    ],
)
def test_bad_calibration_input_is_a_user_error(text: str, message: str, tmp_path: Path, capsys) -> None:
    src = tmp_path / "bad.toml"
    src.write_text(text, encoding="utf-8")
    assert main(["calibrate", str(RIGS / "cambered-balance.toml"), "--from", str(src), "-o", str(tmp_path / "c.toml")]) == 1
    assert message in capsys.readouterr().err


def _calibrate(src: Path, *extra: str) -> int:
    return main(["calibrate", str(RIGS / "cambered-balance.toml"), "--from", str(src), *extra])


def test_calibrate_refuses_an_existing_output_unless_forced(tmp_path: Path, capsys) -> None:
    src = tmp_path / "points.toml"
    src.write_text(_toml_input(), encoding="utf-8")
    out = tmp_path / "cal.toml"
    out.write_text("keep me", encoding="utf-8")
    assert _calibrate(src, "-o", str(out)) == 1
    err = capsys.readouterr().err
    assert "already exists" in err and "--force" in err and out.read_text(encoding="utf-8") == "keep me"
    assert _calibrate(src, "-o", str(out), "--force") == 0
    assert load_calibration(out).rig_id == RIG.id


@pytest.mark.parametrize("name", ["cal.txt", "cal", "cal.csv"])
def test_calibrate_writes_only_toml_or_json(tmp_path: Path, capsys, name: str) -> None:
    src = tmp_path / "points.toml"
    src.write_text(_toml_input(), encoding="utf-8")
    assert _calibrate(src, "-o", str(tmp_path / name)) == 2
    assert ".toml or .json" in capsys.readouterr().err and not (tmp_path / name).exists()


def test_calibrate_to_a_directory_says_so(tmp_path: Path, capsys) -> None:
    src = tmp_path / "points.toml"
    src.write_text(_toml_input(), encoding="utf-8")
    (tmp_path / "out.toml").mkdir()
    assert _calibrate(src, "-o", str(tmp_path / "out.toml"), "--force") == 1
    assert "is a directory" in capsys.readouterr().err


@pytest.mark.parametrize("suffix,text", [(".csv", "step,reading_mm,u1,u2\n"), (".toml", 'channels = ["u1"]\n'),
                                         (".csv", "step,reading_mm,u1\nend_zero,,1.0\n")])
def test_calibrate_from_no_data_is_refused(tmp_path: Path, capsys, suffix: str, text: str) -> None:
    src = tmp_path / f"empty{suffix}"
    src.write_text(text, encoding="utf-8")
    assert _calibrate(src, "-o", str(tmp_path / "c.toml")) == 1
    assert "no zero and no span points" in capsys.readouterr().err and not (tmp_path / "c.toml").exists()


def test_guided_with_no_zero_and_no_point_typed_writes_nothing(tmp_path: Path) -> None:
    src = tmp_path / "counts.csv"
    src.write_text("\n".join(line for line in _csv_input(with_readings=False).splitlines()
                             if not line.startswith("zero,")) + "\n", encoding="utf-8")
    out = tmp_path / "cal.toml"
    parser = argparse.ArgumentParser()
    calibrate_cmd.register(parser.add_subparsers())
    args = parser.parse_args(["calibrate", str(RIGS / "cambered-balance.toml"), "--counts", str(src), "-o", str(out)])
    answers = iter(["", "", "n"])  # Enter for the zero, no point, no end zero
    with pytest.raises(calibrate_cmd.UserError, match="no zero and no span points"):
        calibrate_cmd.run(args, ask=lambda prompt: next(answers), say=lambda line: None)
    assert not out.exists()


def test_calibrate_from_a_binary_file_says_so(tmp_path: Path, capsys) -> None:
    src = tmp_path / "points.toml"
    src.write_bytes(b"SQLite format 3\x00\xf8\xff")
    assert _calibrate(src, "-o", str(tmp_path / "c.toml")) == 1
    err = capsys.readouterr().err
    assert "is not a text TOML or CSV calibration input" in err and "codec" not in err


def test_an_encoding_this_host_does_not_know_is_named_as_such() -> None:
    # PROTOCOL.md §2: the description is kept with the code; the difference says what it is
    d = _description()
    unknown = replace(d, channels=d.channels[:1] + (ChannelInfo("u1", 9),) + d.channels[2:])
    assert RIG.differences(unknown) == ["channel 'u1' (index 1): the rig expects u16, the device sends unknown "
                                        "encoding 9 (device name 'u1')"]
