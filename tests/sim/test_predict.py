"""taprig check's prediction of u(q), u(Cp), u(Cl) at the design speed, against a simulated run of the same rig."""

from __future__ import annotations

import numpy as np
import pytest

from taprig.protocol import SetActuator, Start
from taprig.reduce import Reducer, ambient_for
from taprig.sim.predict import WARN_Q_REL, predict


def test_prediction_is_what_a_noiseless_run_reports(host, rigs):
    # the same budget reached the long way: the simulated board at the design speed, its frames decoded and
    # reduced (noise, lag and drift off, so only the sensors' datasheet bands remain)
    rig = rigs("cylinder")
    p = predict(rig)
    h = host("cylinder", max_speed=p.speed)
    n = len(h.device.description.channels)
    h.send(SetActuator(1, 0, 1.0))
    h.step(0.01)
    h.send(Start(2, 200.0, (1 << n) - 1, 0))
    h.step(0.2)
    opts = h.device.options
    ambient = ambient_for(rig, pressure=opts.ambient_pa, temperature=opts.ambient_c + 273.15,
                          relative_humidity=opts.humidity)
    mean = Reducer(rig, ambient=ambient).reduce_mean(h.blocks(), p.alpha_rad)
    assert mean.q_pa == pytest.approx(p.q, rel=0.01)
    assert mean.u_q_pa == pytest.approx(p.u_q, rel=0.02)
    assert float(np.nanmax(mean.u_cp)) == pytest.approx(p.u_cp, rel=0.05)


def test_a_rig_whose_sensors_cannot_resolve_its_q_is_warned(rigs):
    water = predict(rigs("water-hydrofoil"))  # ±5 kPa sensors for an 80 Pa q
    assert water.u_q_zeroed > WARN_Q_REL * water.q
    assert any("q sensor is too wide" in w for w in water.warnings)
    cylinder = predict(rigs("cylinder"))  # ±500 Pa differential sensors for a 135 Pa q
    assert not cylinder.warnings
    assert cylinder.u_q_zeroed <= cylinder.u_q  # a wind-off zero removes the offset part


def test_a_rig_without_a_design_speed_says_so(rigs):
    from taprig.reduce import ReduceError

    rig = rigs("cylinder").model_copy(update={"operating": rigs("cylinder").operating.model_copy(
        update={"design_speed": None})})
    with pytest.raises(ReduceError, match="no design speed"):
        predict(rig)
