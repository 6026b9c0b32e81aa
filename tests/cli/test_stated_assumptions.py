"""Every output that shows Cp or a coefficient states the freestream static in force; no flow is said in words."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from taprig.cli import main
from taprig.cli.live import live_line
from taprig.protocol import RawBlock
from taprig.reduce import Reducer
from taprig.rig import load_rig
from taprig.runtime.acquisition import LiveState

RIGS = Path(__file__).resolve().parents[2] / "rigs"


def test_check_states_the_static_source_of_each_example(capsys):
    assert main(["check", str(RIGS / "cambered-balance.toml"), str(RIGS / "naca0012-20tap.toml")]) == 0
    out = capsys.readouterr().out
    assert "assumes: freestream static = room − (1 + K)·q: open-circuit suction tunnel, inlet loss K = 0.1" in out
    assert "assumes: freestream static pressure measured at the port of channel 'p_static'" in out
    assert "isentropic relation" in out


def _state(block) -> LiveState:
    return LiveState(0, block, {}, "connected", {}, block.n_scans, {}, 0)


def test_live_line_says_no_flow_and_the_static_in_force():
    rig = load_rig(RIGS / "cambered-balance.toml")
    reducer = Reducer(rig)
    channels = tuple(sorted(c.index for c in rig.channels))
    # fan off: every pressure sensor at its nominal zero (the ratiometric taps' mid-scale), a little noise
    rng = np.random.default_rng(1)
    zero = np.array([-rig.sensor_of(i).intercept / rig.sensor_of(i).slope for i in channels])
    counts = np.round(zero + rng.normal(0.0, 0.7, (50, len(channels))))
    line = live_line(_state(reducer.reduce(RawBlock(counts, channels, np.arange(50), np.arange(50)))))
    assert "no flow" in line
    for word in ("V ", "Re ", "Cl", "nan"):
        assert word not in line
    assert "p∞ = room − 1.1q (suction)" in line


def test_check_predicts_the_uncertainties_at_the_design_speed_and_warns(capsys, tmp_path):
    # the water example with its low-range parts swapped for ±5 kPa ones: far too wide for its 80 Pa q
    text = (RIGS / "water-hydrofoil.toml").read_text(encoding="utf-8")
    for part in ("250.0", "1000.0"):
        text = text.replace(f"pmin_pa = -{part}\npmax_pa = {part}", "pmin_pa = -5000.0\npmax_pa = 5000.0")
    wide = tmp_path / "water-wide.toml"
    wide.write_text(text, encoding="utf-8")
    assert main(["check", str(wide), str(RIGS / "cylinder.toml")]) == 0
    out = capsys.readouterr().out
    assert "predicts at the design speed 0.4 m/s" in out and "predicts at the design speed 15 m/s" in out
    assert "WARNING: u(q)" in out and "the q sensor is too wide" in out


def test_check_says_what_each_kind_computes_and_no_example_warns(capsys):
    # issue 10, item 7: an airfoil's line gives α and u(Cl); a cylinder's u(Cd) and no α or Cl; a venturi's
    # station Cp and mass flow, no α or Cl
    rigs = sorted(RIGS.glob("*.toml"))
    assert main(["check", *map(str, rigs)]) == 0
    out = capsys.readouterr().out
    assert "WARNING" not in out
    blocks = {b.split("'", 2)[1]: b for b in out.split("\nrig ")[0:] if "'" in b}
    cylinder, venturi = blocks["cylinder-13tap"], blocks["venturi-8"]
    airfoil = blocks["naca0012-20tap"]
    assert "(α 4°, datasheet bands" in airfoil and "  u(Cl) " in airfoil
    for block in (cylinder, venturi):
        assert "(datasheet bands" in block and "α 4°" not in block and "u(Cl)" not in block
    assert "  u(Cd) " in cylinder and "u(Cp), u(Cd) propagated by" in cylinder
    assert "  mass flow " in venturi and "g/s (ISO 5167-4)" in venturi
    assert "the sensors' own share after a zero (C ± 0.5%" in venturi
