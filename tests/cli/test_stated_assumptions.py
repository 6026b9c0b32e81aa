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


def test_check_predicts_the_uncertainties_at_the_design_speed_and_warns(capsys):
    assert main(["check", str(RIGS / "water-hydrofoil.toml"), str(RIGS / "cylinder.toml")]) == 0
    out = capsys.readouterr().out
    assert "predicts at the design speed 0.4 m/s" in out and "predicts at the design speed 15 m/s" in out
    assert "WARNING: u(q)" in out and "the q sensor is too wide" in out  # the water rig's ±5 kPa for 80 Pa
