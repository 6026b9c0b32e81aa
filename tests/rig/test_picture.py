"""The rig picture: pure geometry for every example rig kind, suspicious things marked, and ``check --draw``."""

from __future__ import annotations

import json
import math
import shutil
from pathlib import Path

import numpy as np
import pytest

from taprig.cli import main
from taprig.rig import RigError, load_rig, parse_rig, parse_rig_unchecked
from taprig.rig.picture import rig_picture

RIGS = Path(__file__).resolve().parents[2] / "rigs"
EXAMPLES = sorted(RIGS.glob("*.toml"))
NACA = (RIGS / "naca0012-20tap.toml").read_text(encoding="utf-8")


def _sub(text: str, old: str, new: str) -> str:
    assert old in text, old
    return text.replace(old, new, 1)


@pytest.mark.parametrize("path", EXAMPLES, ids=lambda p: p.stem)
def test_every_example_pictures_clean_with_every_tap_placed(path: Path) -> None:
    rig = load_rig(path)
    picture = rig_picture(rig)
    assert picture.problems == ()
    assert [t.name for t in picture.taps] == [t.name for t in rig.taps]
    assert all(t.x is not None and t.y is not None for t in picture.taps)
    assert [t.index for t in picture.taps] == [rig.index_of(t.channel) for t in rig.taps]
    xmin, xmax, ymin, ymax = picture.extent
    assert all(xmin <= t.x <= xmax and ymin <= t.y <= ymax for t in picture.taps)
    assert all(math.isclose(math.hypot(t.nx, t.ny), 1.0, rel_tol=1e-9) for t in picture.taps)
    json.dumps(picture.to_dict())  # plain data, for the browser


def test_section_taps_sit_on_the_section_to_scale() -> None:
    rig = load_rig(RIGS / "naca0012-20tap.toml")
    picture = rig_picture(rig)
    chord = rig.geometry.chord
    u05 = next(t for t in picture.taps if t.name == "U05")
    # NACA 0012 half-thickness, closed trailing edge: y_t = 5 t (0.2969√x − 0.1260x − 0.3516x² + 0.2843x³ − 0.1036x⁴)
    # (Abbott & von Doenhoff, Theory of Wing Sections, eq. 6.2, with the closed-edge last coefficient; from memory)
    x = 0.3755
    y_t = 5 * 0.12 * (0.2969 * math.sqrt(x) - 0.1260 * x - 0.3516 * x**2 + 0.2843 * x**3 - 0.1036 * x**4)
    assert u05.x == pytest.approx((x - 0.25) * chord)  # the pivot at the quarter chord is the origin
    assert u05.y == pytest.approx(y_t * chord, rel=1e-3)
    assert u05.ny > 0.99 and next(t for t in picture.taps if t.name == "L05").ny < -0.99
    walls = picture.walls
    assert {round(p[1], 9) for w in walls for p in w} == {0.15, -0.15}  # 300 mm tunnel height
    assert picture.pivot == (0.0, 0.0)


def test_the_section_turns_about_the_pivot_with_alpha() -> None:
    rig = load_rig(RIGS / "naca0012-20tap.toml")
    flat, turned = rig_picture(rig), rig_picture(rig, math.radians(10))
    te_flat = max(flat.outline, key=lambda p: p[0])
    te_turned = max(turned.outline, key=lambda p: p[0])
    assert math.hypot(*te_flat) == pytest.approx(math.hypot(*te_turned))  # same distance from the pivot
    assert te_turned[1] == pytest.approx(-0.75 * rig.geometry.chord * math.sin(math.radians(10)), rel=1e-3)  # tail down


def test_cylinder_taps_go_round_from_the_front() -> None:
    picture = rig_picture(load_rig(RIGS / "cylinder.toml"))
    r = 0.020
    t0, t90, t180 = (next(t for t in picture.taps if t.name == n) for n in ("T000", "T090", "T180"))
    assert (t0.x, t0.y) == pytest.approx((-r, 0.0), abs=1e-12)  # facing the flow
    assert (t90.x, t90.y) == pytest.approx((0.0, r), abs=1e-12)
    assert (t180.x, t180.y) == pytest.approx((r, 0.0), abs=1e-12)


def test_venturi_walls_follow_the_area_table() -> None:
    picture = rig_picture(load_rig(RIGS / "venturi-8.toml"))
    s4 = next(t for t in picture.taps if t.name == "S4")
    assert s4.y == pytest.approx(0.0125, rel=1e-5)  # 25 mm throat: radius √(A/π) of the table's 490.87 mm²
    assert any(p.role == "inlet" for p in picture.ports)


# A planted mistake of each kind the picture marks
PLANTED = _sub(_sub(_sub(NACA,
    '"p12",  "p13"', '"p12",  "p12"'),                                   # L02 on L01's channel
    "[[channels]]\nindex = 22", '[[channels]]\nindex = 23\nname = "p23"\nencoding = "u16"\nsensor = "tap"\n'
                                 'measures = "gauge"\n\n[[channels]]\nindex = 22'),  # p23 read by nothing
    "surface = [", 'y_c     = ["", "", "", 0.09, "", "", "", "", "", "", "", "", "", "", "", "", "", "", "", ""]\nsurface = [')


def test_planted_mistakes_are_marked() -> None:
    with pytest.raises(RigError):
        parse_rig(PLANTED, "planted.toml")  # check refuses it ...
    rig, problems = parse_rig_unchecked(PLANTED, "planted.toml")  # ... and it can still be drawn
    keys = {i.key for i in problems.issues}
    assert {"taps.channel[11] (tap 'L02')", "taps.y_c[3] (tap 'U04')"} <= keys
    picture = rig_picture(rig)
    marked = {t.name: t.problems for t in picture.taps if t.problems}
    assert set(marked) == {"U04", "L01", "L02"}
    assert "off the upper surface" in marked["U04"][0]
    assert marked["L02"] == ("shares channel p12 with tap L01",)
    # p13 lost its tap to the planted swap, p23 never had one
    assert [p.channel for p in picture.problems if p.channel] == ["p13", "p23"]


def test_check_draws_png_and_svg_and_marks_the_planted_mistakes(tmp_path: Path, capsys) -> None:
    bad = tmp_path / "planted.toml"
    bad.write_text(PLANTED, encoding="utf-8")
    svg = tmp_path / "planted.svg"
    assert main(["check", str(bad), "--draw", str(svg)]) == 1  # drawn, but the rig is still refused
    captured = capsys.readouterr()
    assert "taps.channel[11] (tap 'L02')" in captured.err and f"drew {svg}" in captured.out
    text = svg.read_text(encoding="utf-8")
    for words in ("L02 ch12", "shares channel p12 with tap L01", "off the upper surface", "channel p23 (ch23)"):
        assert words in text, words
    png = tmp_path / "bench.png"
    assert main(["check", str(RIGS / "bench-64.toml"), "--draw", str(png)]) == 0
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


@pytest.mark.parametrize("argv,message", [
    (["--draw", "x.pdf"], "can draw to .png or .svg"),
    (["--alpha-deg", "5"], "--alpha-deg needs --draw"),
])
def test_check_draw_usage_errors(tmp_path: Path, capsys, argv, message) -> None:
    assert main(["check", str(RIGS / "cylinder.toml"), *argv]) == 2
    assert message in capsys.readouterr().err


def test_draw_takes_one_rig(tmp_path: Path, capsys) -> None:
    rigs = [str(RIGS / "cylinder.toml"), str(RIGS / "venturi-8.toml")]
    assert main(["check", *rigs, "--draw", str(tmp_path / "x.png")]) == 2
    assert "--draw draws one rig" in capsys.readouterr().err


def test_check_says_what_to_look_at_in_a_valid_rig(tmp_path: Path, capsys) -> None:
    spare = _sub(NACA, "[[channels]]\nindex = 22", '[[channels]]\nindex = 23\nname = "p23"\nencoding = "u16"\n'
                 'sensor = "tap"\nmeasures = "gauge"\n\n[[channels]]\nindex = 22')
    path = tmp_path / "spare.toml"
    path.write_text(spare, encoding="utf-8")
    assert main(["check", str(path)]) == 0  # a spare channel is allowed, but said
    assert "look at: channel p23 (ch23): no tap reads it, nor any reference" in capsys.readouterr().out


def test_two_channels_on_one_index_are_marked() -> None:
    rig, problems = parse_rig_unchecked(_sub(NACA, "index = 22\n", "index = 21\n"), "same.toml")
    assert problems is not None
    assert "channels p21 and baro are both on ch21" in [p.text for p in rig_picture(rig).problems]


def test_readings_off_the_drawing_are_named() -> None:
    ports = rig_picture(load_rig(RIGS / "cambered-balance.toml")).ports
    assert "balance lift: lift ch10" in [p.label for p in ports]
    # issue 10's stated static source, where no channel is the static port
    assert "freestream static = room − 1.1 q (u 0.03 q; suction tunnel, no static port)" in [p.label for p in ports]
    assert "room (barometer): baro ch22" in [p.label for p in rig_picture(load_rig(RIGS / "naca0012-20tap.toml")).ports]


@pytest.mark.parametrize("name", ["cylinder", "venturi-8", "bump-channel", "cambered-balance"])
def test_every_kind_draws_with_every_tap_labelled(tmp_path: Path, name: str) -> None:
    from taprig.cli.rig_drawing import draw_rig

    picture = rig_picture(load_rig(RIGS / f"{name}.toml"))
    text = draw_rig(picture, tmp_path / f"{name}.svg", values={picture.taps[0].name: "Cp -0.42"}).read_text(encoding="utf-8")
    for tap in picture.taps:
        assert tap.label in text, tap.label
    assert f"{picture.taps[0].label}  Cp -0.42" in text  # a live value drawn beside its tap
    assert "nothing suspicious found" in text
