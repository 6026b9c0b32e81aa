"""Example rigs load and pass ``taprig check``; broken rig files fail with a message naming the key."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from pydantic import ValidationError

from taprig.cli import main
from taprig.rig import Medium, RigError, RigKind, load_rig, parse_rig

RIGS = Path(__file__).resolve().parents[2] / "rigs"
LONG = Path(__file__).resolve().parent / "long"  # the examples in the long form (one table per channel and tap)
EXAMPLES = sorted(RIGS.glob("*.toml"))
BASE = (LONG / "cambered-balance.toml").read_text(encoding="utf-8")


def test_there_are_the_promised_examples() -> None:
    kinds = {load_rig(p).kind for p in EXAMPLES}
    assert {RigKind.AIRFOIL, RigKind.VENTURI, RigKind.CYLINDER, RigKind.BUMP} <= kinds
    assert any(load_rig(p).fluid.medium is Medium.WATER for p in EXAMPLES)
    assert any(len(load_rig(p).channels) == 64 for p in EXAMPLES)


@pytest.mark.parametrize("path", EXAMPLES + sorted(LONG.glob("*.toml")), ids=lambda p: f"{p.parent.name}/{p.name}")
def test_example_rig_checks_clean(path: Path, capsys) -> None:
    assert main(["check", str(path)]) == 0
    out = capsys.readouterr().out
    assert f"rig {load_rig(path).id!r}" in out and "can compute:" in out


def test_units_are_converted_once_to_si() -> None:
    rig = load_rig(RIGS / "cambered-balance.toml")
    assert rig.geometry.chord == pytest.approx(0.100)  # chord_mm = 100
    alpha = next(a for a in rig.actuators if a.name == "alpha")
    assert (alpha.min, alpha.max) == pytest.approx((math.radians(-8), math.radians(16)))
    assert alpha.to_device(alpha.max) == pytest.approx(16.0)  # boards take degrees (PROTOCOL.md §3)
    water = load_rig(RIGS / "water-hydrofoil.toml")
    assert water.fluid.temperature == pytest.approx(288.15)  # 15 °C


def test_section_layout_is_in_contour_order() -> None:
    layout = load_rig(RIGS / "cambered-balance.toml").tap_layout()
    # upper surface trailing edge → leading edge, then lower leading edge → trailing edge
    assert layout.names == ("U6", "U5", "U4", "U3", "U2", "U1", "L1", "L2", "L3")
    assert np.all(layout.y_c[layout.upper] > 0) and np.all(layout.y_c[~layout.upper] < 0)


def test_venturi_areas_come_from_the_table() -> None:
    layout = load_rig(RIGS / "venturi-8.toml").tap_layout()
    # S4 at 93 mm lies on the 25 mm throat: π/4 · 25² mm² (geometry)
    assert layout.area[layout.names.index("S4")] == pytest.approx(math.pi / 4 * 0.025**2, rel=1e-5)
    assert np.all(np.diff(layout.x) > 0)


def test_bump_reads_its_coordinate_csv() -> None:
    rig = load_rig(RIGS / "bump-channel.toml")
    assert rig.section.shape.surface_y(0.5, True) == pytest.approx(0.1)  # 10 % bump crest
    again = parse_rig(rig.source_text, "replayed", rig.attachments)  # what a session stores is enough
    assert again == rig


def _replace(old: str, new: str) -> str:
    assert old in BASE, old
    return BASE.replace(old, new, 1)


# (case id, broken rig text, key path that the message must name)
BROKEN = [
    ("toml-syntax", _replace('kind = "airfoil"', 'kind = "airfoil'), "not valid TOML"),
    ("missing-key", _replace('name = "NACA 2412, 9 taps, lift balance"\n', ""), "name: required key is missing"),
    ("misspelt-key", _replace("chord_mm = 100.0", "cord_mm = 100.0"), "geometry.cord_mm: unknown key"),
    ("wrong-type", _replace("adc_bits = 24", 'adc_bits = "twenty-four"'), "sensors.load_cell.adc_bits"),
    ("tap-on-missing-channel", _replace('channel = "u3"', 'channel = "u9"'), "taps[2].channel"),
    ("duplicate-tap", _replace('name = "U3"', 'name = "U2"'), "taps[2].name"),
    ("duplicate-channel-index", _replace("index = 7", "index = 6"), "channels[7].index"),
    ("x_c-outside", _replace("x_c = 0.25", "x_c = 1.3"), "taps[3].x_c"),
    ("tap-off-surface", _replace("y_c = 0.0767", "y_c = 0.12"), "taps[3].y_c"),
    ("unknown-sensor-kind", _replace('kind = "digital_bridge"', 'kind = "digital_brige"'), "sensors.tap.kind"),
    ("range-min-above-max", _replace("pmin_pa = -2000.0\npmax_pa = 2000.0", "pmin_pa = 2000.0\npmax_pa = -2000.0"), "sensors.tap"),
    ("negative-chord", _replace("chord_mm = 100.0", "chord_mm = -100.0"), "geometry.chord_mm"),
    ("unknown-naca", _replace('naca = "2412"', 'naca = "24x2"'), "section: cannot build the section shape"),
    ("reference-missing", _replace('pitot = "pitot_dp"  ', 'pitot = "pitot"  '), "reference.pitot"),
    ("actuator-safe-outside", _replace("safe_deg = 0.0", "safe_deg = 30.0"), "actuators[1].safe_deg"),
    ("channel-index-over-63", _replace("index = 8", "index = 64"), "channels[8].index"),
    ("unknown-encoding", _replace('encoding = "i32"', 'encoding = "i24"'), "channels[10].encoding"),
    ("sensor-not-defined", _replace('sensor = "load_cell"', 'sensor = "loadcell"'), "channels[10].sensor"),
    ("balance-on-pressure", _replace('lift = "lift"', 'lift = "u1"'), "balance.lift"),
    ("differential-without-reference", _replace('relative_to = "static"\n', ""), "channels[0].relative_to"),
    ("no-q-source", _replace('pitot = "pitot_dp"  ', "# no pitot  "), "reference: an airfoil rig needs a dynamic-pressure source"),
    ("tap-key-of-another-kind", _replace('x_c = 0.015\nsurface = "upper"', 'x_c = 0.015\nsurface = "upper"\ntheta_deg = 7.0'), "taps[0].theta_deg"),
    ("bad-vid-pid", _replace('vid_pid = "2e8a:000a"', 'vid_pid = "2e8a-000a"'), "link.vid_pid"),
]


@pytest.mark.parametrize("text,key", [c[1:] for c in BROKEN], ids=[c[0] for c in BROKEN])
def test_broken_rig_exits_1_naming_the_key(text: str, key: str, tmp_path: Path, capsys) -> None:
    path = tmp_path / "broken.toml"
    path.write_text(text, encoding="utf-8")
    assert main(["check", str(path)]) == 1
    err = capsys.readouterr().err
    assert str(path) in err and key in err
    assert "Traceback" not in err


def test_every_error_is_reported_not_just_the_first() -> None:
    text = BASE.replace("chord_mm = 100.0", "chord_mm = -1.0").replace("adc_bits = 24", "adc_bits = 2").replace("x_c = 0.25", "x_c = 2")
    with pytest.raises(RigError) as info:
        parse_rig(text, "three.toml")
    keys = {issue.key for issue in info.value.issues}
    assert {"geometry.chord_mm", "sensors.load_cell.adc_bits", "taps[3].x_c"} <= keys
    assert str(info.value).startswith("three.toml: 3 problems")


def test_missing_file_and_missing_csv_are_user_errors(tmp_path: Path) -> None:
    with pytest.raises(RigError, match="cannot read"):
        load_rig(tmp_path / "nowhere.toml")
    text = (RIGS / "bump-channel.toml").read_text(encoding="utf-8")
    (tmp_path / "bump.toml").write_text(text, encoding="utf-8")  # without its CSV beside it
    with pytest.raises(RigError, match=r"section\.coordinates_file: coordinate file not found"):
        load_rig(tmp_path / "bump.toml")


def test_the_model_is_immutable() -> None:
    rig = load_rig(RIGS / "cambered-balance.toml")
    # pydantic v2 refuses assignment to a frozen model with a ValidationError (type "frozen_instance")
    with pytest.raises(ValidationError, match="frozen"):
        rig.id = "other"
    with pytest.raises(ValidationError, match="frozen"):
        rig.geometry.chord = 1.0


def test_water_rig_needs_its_temperature() -> None:
    text = (RIGS / "water-hydrofoil.toml").read_text(encoding="utf-8").replace("temperature_c = 15.0\n", "")
    with pytest.raises(RigError, match="fluid: a water rig needs temperature_c"):
        parse_rig(text, "water.toml")


def test_coordinate_csv_with_a_bad_line_names_it(tmp_path: Path) -> None:
    text = (RIGS / "bump-channel.toml").read_text(encoding="utf-8")
    (tmp_path / "bump.toml").write_text(text, encoding="utf-8")
    (tmp_path / "bump-profile.csv").write_text("x,y\n1.0,0.0\n0.5,oops\n", encoding="utf-8")
    with pytest.raises(RigError, match=r"bump-profile.csv line 3: expected two numbers"):
        load_rig(tmp_path / "bump.toml")


def test_check_reports_each_file(tmp_path: Path, capsys) -> None:
    bad = tmp_path / "bad.toml"
    bad.write_text(_replace("chord_mm = 100.0", "chord_mm = 0.0"), encoding="utf-8")
    assert main(["check", str(RIGS / "cylinder.toml"), str(bad)]) == 1
    captured = capsys.readouterr()
    assert "rig 'cylinder-13tap'" in captured.out and "geometry.chord_mm" in captured.err


@pytest.mark.parametrize("data", [b"SQLite format 3\x00\x10\x00", b"\x00\x01\x02\xf8\xff"])
def test_a_binary_file_is_not_a_rig_file(tmp_path: Path, data: bytes) -> None:
    path = tmp_path / "run.taprig"
    path.write_bytes(data)
    with pytest.raises(RigError) as info:
        load_rig(path)
    assert str(info.value) == f"{path} is not a text TOML rig file (a session? try taprig info)"
