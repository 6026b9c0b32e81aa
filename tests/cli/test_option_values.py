"""Bad option values: a usage error (exit 2) naming the option and the value in the user's unit, never a defect.

The rule (DEVELOPERS.md, Habits): 2 for a bad command line, 1 for bad data, 3 only for a defect in taprig.
"""

from __future__ import annotations

import argparse
import math
from pathlib import Path

import pytest
from hypothesis import given
from hypothesis import strategies as st

from taprig.cli import bounded, celsius, finite_nonnegative, finite_positive, latitude, main, positive_int, scan_rate

RIGS = Path(__file__).resolve().parents[2] / "rigs"
AIRFOIL = RIGS / "naca0012-20tap.toml"
WATER = RIGS / "water-hydrofoil.toml"


def usage_error(capsys, *argv) -> str:
    """Run the command line, expect argparse's exit 2, return its stderr (usage, then one error line)."""
    with pytest.raises(SystemExit) as exit_info:
        main([str(a) for a in argv])
    err = capsys.readouterr().err
    assert exit_info.value.code == 2, err
    assert "Traceback" not in err and "internal error" not in err
    return err.strip().splitlines()[-1]


@pytest.mark.parametrize("argv, option", [
    (["decode", "sim://", "--baud", "-5"], "--baud"),
    (["decode", "sim://", "--baud", "fast"], "--baud"),
    (["decode", "sim://", "--no-handshake", "--seconds", "inf"], "--seconds"),
    (["decode", "sim://", "--seconds", "nan"], "--seconds"),
    (["decode", "sim://", "--handshake-timeout", "-1"], "--handshake-timeout"),
    (["decode", "sim://", "--start", "0"], "--start"),
    (["decode", "sim://", "--start", "1e300"], "--start"),  # START carries the rate as f32 (PROTOCOL.md §3)
    (["decode", "sim://", "--handshake-timeout", "1e300"], "--handshake-timeout"),
    (["record", "--rig", AIRFOIL, "--port", "sim://", "--duration", "inf"], "--duration"),
    (["record", "--rig", AIRFOIL, "--port", "sim://", "--rate", "-500"], "--rate"),
    (["record", "--rig", AIRFOIL, "--port", "sim://", "--rate", "1e39"], "--rate"),
    (["sim", "--rig", AIRFOIL, "--seconds", "nan"], "--seconds"),
    (["replay", "x.taprig", "--seek", "-1"], "--seek"),
    (["replay", "x.taprig", "--seek", "inf"], "--seek"),
    (["replay", "x.taprig", "--speed", "0"], "--speed"),
    (["calibrate", AIRFOIL, "--from", "x.csv", "--latitude-deg", "100"], "--latitude-deg"),
    (["calibrate", AIRFOIL, "--from", "x.csv", "--latitude-deg", "nan"], "--latitude-deg"),
    (["calibrate", AIRFOIL, "--from", "x.csv", "--angle-deg", "0"], "--angle-deg"),
    (["calibrate", AIRFOIL, "--from", "x.csv", "--angle-deg", "120"], "--angle-deg"),
    (["calibrate", AIRFOIL, "--from", "x.csv", "--liquid-temp-c", "-300"], "--liquid-temp-c"),
])
def test_a_bad_value_is_a_usage_error_naming_the_option(capsys, argv, option):
    line = usage_error(capsys, *argv)
    assert f"argument {option}" in line and repr(argv[-1]) in line, line


def test_the_range_is_stated_in_the_user_unit(capsys):
    line = usage_error(capsys, "calibrate", AIRFOIL, "--from", "x.csv", "--latitude-deg", "100")
    assert "[-90, 90] deg" in line and "'100'" in line


def run(capsys, *argv) -> tuple[int, str]:
    code = main([str(a) for a in argv])
    return code, capsys.readouterr().err


@pytest.mark.parametrize("option, value, words", [
    ("--humidity-pct", "200", ["--humidity-pct 200 %", "0 to 100 %"]),
    ("--humidity-pct", "nan", ["--humidity-pct nan %"]),
    ("--temperature-c", "-400", ["--temperature-c -400 °C", "absolute zero (-273.15 °C)"]),
    ("--pressure-hpa", "0", ["--pressure-hpa 0 hPa", "> 0 hPa"]),
    # unit slips (common practice: a room is at 300–1100 hPa and −30–60 °C); before, 101325 gave V √10 too small
    ("--pressure-hpa", "101325", ["--pressure-hpa 101325 hPa", "pascals typed as hPa", "--pressure-hpa 1013.25"]),
    ("--pressure-hpa", "101.3", ["kilopascals", "--pressure-hpa 1013"]),
    ("--temperature-c", "293.15", ["--temperature-c 293.15 °C", "kelvin", "--temperature-c 20.00"]),
    ("--temperature-c", "68", ["Fahrenheit", "--temperature-c 20.0"]),
])
def test_ambient_options_out_of_range_are_refused_in_the_unit_typed(capsys, tmp_path, option, value, words):
    # refused before the port is opened: sim:// would otherwise start a simulated board
    code, err = run(capsys, "record", "--rig", AIRFOIL, "--port", "sim://", "-o", tmp_path / "x.taprig", option, value)
    assert code == 2 and len(err.strip().splitlines()) == 1, err
    for word in words:
        assert word in err, (word, err)
    assert "(fraction)" not in err and " K" not in err
    assert not (tmp_path / "x.taprig").exists()


def test_a_water_rig_temperature_outside_the_water_tables(capsys, tmp_path):
    # the water density of Tanaka et al. (2001) holds for 0–40 °C (taprig.physics.water)
    code, err = run(capsys, "record", "--rig", WATER, "--port", "sim://", "-o", tmp_path / "x.taprig",
                    "--temperature-c", "80")
    assert code == 2 and "--temperature-c 80 °C" in err and "0 to 40 °C" in err and "internal error" not in err


def test_calibrate_water_temperature_outside_the_water_tables(capsys, tmp_path):
    src = tmp_path / "in.csv"
    src.write_text("step,reading_mm,p_total\nzero,,32768\n")
    code, err = run(capsys, "calibrate", AIRFOIL, "--from", src, "-o", tmp_path / "c.toml", "--liquid-temp-c", "60")
    assert code == 2 and "--liquid-temp-c 60 °C" in err and "--liquid-density" in err
    assert not (tmp_path / "c.toml").exists()


# -- the helpers themselves ---------------------------------------------------------------------------------------

@given(st.floats(allow_nan=True, allow_infinity=True))
def test_finite_helpers_accept_exactly_the_finite_numbers_in_range(value):
    text = repr(value)
    for parse, ok in ((finite_nonnegative, math.isfinite(value) and value >= 0),
                      (finite_positive, math.isfinite(value) and value > 0),
                      (latitude, math.isfinite(value) and -90 <= value <= 90),
                      (celsius, math.isfinite(value) and value > -273.15),
                      # IEEE 754 binary32's largest finite value, (2 − 2⁻²³) · 2¹²⁷ (common practice)
                      (scan_rate, 0 < value <= 3.4028234663852886e38)):
        if ok:
            assert parse(text) == value
        else:
            with pytest.raises(argparse.ArgumentTypeError):
                parse(text)


@pytest.mark.parametrize("text, expected", [("1", 1), ("115200", 115200)])
def test_positive_int_accepts_whole_numbers_above_zero(text, expected):
    assert positive_int(text) == expected


@pytest.mark.parametrize("text", ["0", "-5", "1.5", "x", ""])
def test_positive_int_refuses_the_rest(text):
    with pytest.raises(argparse.ArgumentTypeError, match="whole number > 0"):
        positive_int(text)


def test_bounded_with_an_open_low_end():
    angle = bounded(0.0, 90.0, "deg", low_open=True)
    assert angle("90") == 90.0 and angle("0.5") == 0.5
    with pytest.raises(argparse.ArgumentTypeError, match=r"\(0, 90\] deg"):
        angle("0")
