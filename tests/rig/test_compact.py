"""Compact rig files (channel groups, tap tables, a tap CSV) give the same model as the long form, and a mistake in
a compact form is refused naming the file, the row (or CSV line) and the value."""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest

from taprig.cli import main
from taprig.rig import RigError, load_rig, parse_rig
from taprig.rig.compact import fill_pattern, parse_tap_csv

RIGS = Path(__file__).resolve().parents[2] / "rigs"
LONG = Path(__file__).resolve().parent / "long"
NAMES = sorted(p.stem for p in RIGS.glob("*.toml"))
NACA = (RIGS / "naca0012-20tap.toml").read_text(encoding="utf-8")


def test_every_example_has_its_long_form() -> None:
    assert NAMES == sorted(p.stem for p in LONG.glob("*.toml"))


@pytest.mark.parametrize("name", NAMES)
def test_compact_and_long_forms_give_equal_models(name: str) -> None:
    compact, long = load_rig(RIGS / f"{name}.toml"), load_rig(LONG / f"{name}.toml")
    assert compact.model_dump() == long.model_dump()
    # the keys each tap was given (not only their values) are the same: a y_c left out stays left out
    assert [t.model_fields_set for t in compact.taps] == [t.model_fields_set for t in long.taps]
    assert [c.model_fields_set for c in compact.channels] == [c.model_fields_set for c in long.channels]
    assert len(compact.source_text.splitlines()) < len(long.source_text.splitlines())


def test_the_64_channel_example_is_short() -> None:
    # issue 14: the 64-channel example well under 200 lines (974 in the long form)
    assert len((RIGS / "bench-64.toml").read_text(encoding="utf-8").splitlines()) < 150


def test_a_session_can_rebuild_a_rig_with_a_tap_csv() -> None:
    rig = load_rig(RIGS / "bench-64.toml")
    assert set(rig.attachments) == {"bench-64-taps.csv"}  # recorded beside the rig text
    assert parse_rig(rig.source_text, "replayed", rig.attachments) == rig


def test_name_patterns() -> None:
    assert [fill_pattern("p{index:02}", i, i - 2) for i in (3, 10, 63)] == ["p03", "p10", "p63"]
    assert fill_pattern("s{n}", 0, 1) == "s1" and fill_pattern("ch{index}_{n:03}", 12, 4) == "ch12_004"
    assert fill_pattern("{index:x}", 1, 1) == "{index:x}"  # only whole-number widths are placeholders


def _problems(text: str, attachments: dict | None = None) -> list[str]:
    with pytest.raises(RigError) as info:
        parse_rig(text, "mine.toml", attachments)
    return [str(i) for i in info.value.issues]


def _sub(text: str, old: str, new: str) -> str:
    assert old in text, old
    return text.replace(old, new, 1)


def test_a_short_array_names_the_row_that_has_no_value() -> None:
    text = _sub(NACA, "0.884, 0.9474]", "0.884]")  # the last x/c of the lower surface lost
    assert _problems(text) == ["taps.x_c: 19 values for 20 taps (taps.name): the row of tap 'L10' (row 19) and after have none"]


def test_a_bad_value_in_a_tap_table_names_its_row_and_tap() -> None:
    text = _sub(NACA, "x_c     = [0.0054, 0.0478, 0.1289, 0.2414", "x_c     = [0.0054, 0.0478, 0.1289, 2.414")
    (problem,) = _problems(text)
    assert problem.startswith("taps.x_c[3] (tap 'U04'): ") and problem.endswith("(got 2.414)")


def test_two_taps_on_one_channel_in_a_table_name_the_second_row() -> None:
    text = _sub(NACA, '"p12",  "p13"', '"p12",  "p12"')
    assert _problems(text) == ["taps.channel[11] (tap 'L02'): channel already read by an earlier tap (got 'p12')"]


def test_a_group_that_overlaps_a_channel_names_the_member() -> None:
    text = _sub(NACA, "index = 22\n", "index = 9\n")  # baro put on an index of the aft upper tap group
    assert "channels[6].index: device index already used by an earlier channel (got 9)" in _problems(text)
    text = _sub(NACA, "index = 1\n", "index = 2\n")  # p_total on the group's first index: the group is named
    assert "channels[2] (1st of 4: index 2, 'p02').index: device index already used by an earlier channel (got 2)" in _problems(text)


def test_a_shared_key_of_a_group_is_reported_once() -> None:
    text = _sub(NACA, 'count = 4\nname = "p{index:02}"\nencoding = "u16"', 'count = 4\nname = "p{index:02}"\nencoding = "u17"')
    assert _problems(text) == ["channels[2].encoding: expected one of i16, u16, i32, u32, f32 (got 'u17')"]


@pytest.mark.parametrize("old,new,expected", [
    ('name = "p{index:02}"', 'name = "tap"', "channels[2].name: the names of a group must differ"),
    ("count = 4", "count = 0", "channels[2].count: expected a whole number of channels, 1 to 64 (got 0)"),
    ("count = 4", 'count = "4"', "channels[2].count: expected a whole number"),
    ('name = "p{index:02}"', 'name = ["a", "b"]', "channels[2].name: 2 names for count = 4 channels"),
    ("[taps]\nname ", '[taps]\nfile = "t.csv"\nname ', "taps.file: give the taps in a file or as arrays, not both"),
    ("surface = [", "colour = 1\nsurface = [", "taps.colour: unknown key"),
])
def test_compact_form_mistakes_name_their_key(old: str, new: str, expected: str) -> None:
    problems = _problems(_sub(NACA, old, new))
    assert any(p.startswith(expected) for p in problems), problems


# -- the tap CSV ------------------------------------------------------------------------------------------------

@pytest.fixture
def bench(tmp_path: Path) -> Path:
    for name in ("bench-64.toml", "bench-64-taps.csv"):
        shutil.copy(RIGS / name, tmp_path / name)
    return tmp_path


def _edit_csv(folder: Path, old: str, new: str) -> None:
    path = folder / "bench-64-taps.csv"
    path.write_text(_sub(path.read_text(encoding="utf-8"), old, new), encoding="utf-8")


@pytest.mark.parametrize("old,new,expected", [
    ("U05,p07,0.0448,upper", "U05,p07,oops,upper", "bench-64-taps.csv line 7, x_c: expected a number (got 'oops')"),
    ("U05,p07,0.0448,upper", "U05,p07,1.0448,upper", "bench-64-taps.csv line 7, x_c (tap 'U05'): Input should be less than or equal to 1 (got 1.0448)"),
    ("U05,p07,0.0448,upper", "U05,p07,0.0448,uper", "bench-64-taps.csv line 7, surface (tap 'U05'): Input should be 'upper' or 'lower' (got 'uper')"),
    ("U05,p07,0.0448,upper", "U05,p07,0.0448", "bench-64-taps.csv line 7: expected 4 cells (name,channel,x_c,surface), found 3 (got 'U05,p07,0.0448')"),
    ("U05,p07,", "U05,p06,", "bench-64-taps.csv line 7, channel (tap 'U05'): channel already read by an earlier tap (got 'p06')"),
    ("name,channel,x_c,surface", "name,chanel,x_c,surface", "taps.file: bench-64-taps.csv line 2: expected a header line"),
])
def test_a_bad_csv_row_is_refused_naming_file_line_and_value(bench: Path, old: str, new: str, expected: str, capsys) -> None:
    _edit_csv(bench, old, new)
    assert main(["check", str(bench / "bench-64.toml")]) == 1
    err = capsys.readouterr().err
    assert str(bench / "bench-64.toml") in err and expected in err, err
    assert "Traceback" not in err


def test_a_missing_tap_csv_is_named(bench: Path) -> None:
    (bench / "bench-64-taps.csv").unlink()
    with pytest.raises(RigError, match=r"taps\.file: tap file not found \(expected a CSV beside the rig file\) \(got 'bench-64-taps.csv'\)"):
        load_rig(bench / "bench-64.toml")


def test_tap_csv_cells() -> None:
    rows, issues = parse_tap_csv("# comment\n\nname,x_c,y_c,surface\nU1, 0.1 ,,upper\n", "t.csv")
    assert issues == [] and rows == [(4, {"name": "U1", "x_c": 0.1, "surface": "upper"})]  # empty cell: key left out
    assert parse_tap_csv("name,x_c\n", "t.csv")[1][0].message == "t.csv: no taps after the header line"
    assert "no header line" in parse_tap_csv("", "t.csv")[1][0].message


def test_the_documented_compact_example_is_a_valid_rig() -> None:
    text = (RIGS.parent / "docs" / "rig-file.md").read_text(encoding="utf-8")
    example = text.split("```toml\n", 1)[1].split("```", 1)[0]
    rig = parse_rig(example, "docs/rig-file.md")
    assert [c.name for c in rig.channels] == ["pitot", "t1", "t2", "t3", "t4", "t5", "t6"]
    assert [t.surface.value for t in rig.taps] == ["upper"] * 3 + ["lower"] * 3


def test_the_getting_started_rig_is_valid_in_the_compact_form() -> None:
    text = (RIGS.parent / "docs" / "getting-started.md").read_text(encoding="utf-8")
    example = text.split("```toml\n# Makerspace", 1)[1].split("```", 1)[0]
    rig = parse_rig("# Makerspace" + example, "docs/getting-started.md")
    assert [c.name for c in rig.channels] == ["adc0", "adc1", "adc2", "bridge0", "bridge1", "load"]
    assert [(t.name, t.channel) for t in rig.taps] == [("U1", "adc0"), ("U2", "adc1"), ("L1", "adc2"), ("L2", "bridge1")]
