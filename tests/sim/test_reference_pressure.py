"""The freestream static pressure as the rig states it, against simulated tunnels that produce each case.

A tap referred to the room reads p − p_room; Cp needs p − p∞, so the reducer needs where p∞ lies against the room.
Each simulated tunnel (suction, blower, open jet) produces its own static; a rig that states the matching source
must give the stagnation tap of a cylinder Cp = +1 (potential flow, Cp = 1 − 4 sin²θ: docs/REFERENCES.md) within
its stated uncertainty, and the whole distribution within the tubing-free quantisation.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest

from taprig.protocol import SetActuator, Start
from taprig.reduce import ReduceError, Reducer, ambient_for
from taprig.rig import parse_rig
from taprig.rig.errors import RigError

CYLINDER = (Path(__file__).resolve().parents[2] / "rigs" / "cylinder.toml").read_text(encoding="utf-8")
GAUGE_CHANNELS = """[[channels]]
index = 0
name = "pitot_dp"
encoding = "i16"
sensor = "diff500"
measures = "differential"
relative_to = "static"

[[channels]]
index = 1
count = 13
name = ["c00", "c15", "c30", "c45", "c60", "c75", "c90", "c105", "c120", "c135", "c150", "c165", "c180"]
encoding = "i16"
sensor = "diff500"
measures = "gauge"

"""


def room_referred_cylinder(reference_lines: str):
    """The example cylinder with every tap on a gauge (room-referenced) sensor, the pitot unchanged, and the given
    lines added to [reference]."""
    start = CYLINDER.index("[[channels]]")
    end = CYLINDER.index("# Taps")
    text = CYLINDER[:start] + GAUGE_CHANNELS + CYLINDER[end:]
    text = text.replace("[reference]\n", "[reference]\n" + reference_lines, 1)
    return parse_rig(text, "cylinder-gauge.toml")


def steady_mean(host_of, rig, **options):
    h = host_of(rig, max_speed=12.0, **options)  # q ≈ 87 Pa: −4.1 q fits the ±500 Pa sensors
    n = len(h.device.description.channels)
    h.send(SetActuator(1, 0, 1.0))
    h.step(0.01)
    h.send(Start(2, 200.0, (1 << n) - 1, 0))
    h.step(0.3)
    ambient = ambient_for(rig, pressure=h.device.options.ambient_pa,
                          temperature=h.device.options.ambient_c + 273.15, relative_humidity=h.device.options.humidity)
    reducer = Reducer(rig, ambient=ambient)
    return reducer, reducer.reduce_mean(h.blocks())


CASES = [
    ("suction", 'static_source = "suction"\ninlet_loss = 0.10\ninlet_loss_u = 0.03\n', "suction tunnel"),
    ("blower", 'static_source = "factor"\nstatic_factor = -0.30\nstatic_factor_u = 0.01\n', "calibration factor"),
    ("open-jet", 'static_source = "room"\n', "open jet"),
]


@pytest.mark.parametrize(("tunnel", "lines", "words"), CASES)
def test_stagnation_cp_is_one_in_each_stated_case(host_of, tunnel, lines, words):
    rig = room_referred_cylinder(lines)
    reducer, mean = steady_mean(host_of, rig, tunnel=tunnel)
    assert words in " ".join(reducer.assumptions)
    theta = np.array([rig.tap_layout().theta[rig.tap_layout().names.index(n)] for n in mean.tap_names])
    front = int(np.argmin(np.abs(theta)))
    assert theta[front] == 0.0
    # potential flow: Cp = +1 at the stagnation point, 1 − 4 sin²θ round the front (docs/REFERENCES.md)
    assert abs(mean.cp[front] - 1.0) < 2.0 * mean.u_cp[front] + 0.01
    np.testing.assert_allclose(mean.cp, 1.0 - 4.0 * np.sin(theta) ** 2, atol=2.0 * mean.u_cp.max() + 0.01)
    if tunnel != "open-jet":  # the stated factor's uncertainty is in the budget: u(Cp) ≥ u(f)
        assert np.all(mean.u_cp >= (0.03 if tunnel == "suction" else 0.01) - 1e-12)


def test_the_static_channel_case_needs_no_statement(host_of):
    rig = parse_rig(CYLINDER, "cylinder.toml")  # taps differential to the probe's static port
    reducer, mean = steady_mean(host_of, rig, tunnel="blower")
    front = mean.tap_names.index(rig.tap_layout().names[int(np.argmin(np.abs(rig.tap_layout().theta)))])
    assert abs(mean.cp[front] - 1.0) < 2.0 * mean.u_cp[front] + 0.01  # potential flow (docs/REFERENCES.md)


def test_a_wrong_statement_is_what_the_defect_looked_like(host_of):
    # Before: p∞ taken as the room in a suction tunnel: every Cp is shifted by −(1 + K) = −1.1 (the stagnation tap
    # read −0.1 instead of +1). Stating the wrong case reproduces it; stating the right one removes it.
    rig = room_referred_cylinder('static_source = "room"\n')
    _, mean = steady_mean(host_of, rig, tunnel="suction")
    front = int(np.argmax(mean.cp))
    assert mean.cp[front] == pytest.approx(1.0 - 1.1, abs=0.02)


def test_an_unstated_static_is_refused_with_the_choices():
    with pytest.raises(RigError, match="static_source = 'suction'.*'factor'.*'room'"):
        room_referred_cylinder("")
    with pytest.raises(RigError, match="inlet_loss_u"):
        room_referred_cylinder('static_source = "suction"\ninlet_loss = 0.1\n')
