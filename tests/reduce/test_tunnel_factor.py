"""The tunnel's static factor fitted from empty-tunnel pairs, against the simulated tunnels' own physics."""

from __future__ import annotations

import numpy as np
import pytest

from taprig.cli import main
from taprig.reduce import ReduceError
from taprig.reduce.tunnel import fit_static_factor
from taprig.sim.flows import tunnel_stream


@pytest.mark.parametrize(("kind", "expected"), [("suction", 1.1), ("blower", -0.3), ("open-jet", 0.0)])
def test_the_fit_recovers_each_simulated_tunnel(kind, expected):
    # Independent model: the simulator's tunnel (energy equation + isentropic expansion from the room, inlet loss
    # 0.1 q or the blower's 0.3 q rise, taprig.sim.flows); f is (1 + K), −0.3 or 0 to O(M²).
    speeds = np.array([5.0, 10.0, 15.0, 20.0])
    s = tunnel_stream(speeds, 1.2, 101325.0, inlet_loss=0.1, kind=kind)
    rng = np.random.default_rng(4)
    noise = rng.normal(0.0, 0.2, speeds.size)  # a 0.2 Pa scatter of the spare channel
    fit = fit_static_factor(s.q, s.p_ambient - s.p_static + noise)
    assert fit.factor == pytest.approx(expected, abs=3 * fit.u_factor + 2e-3)
    assert 0.0 < fit.u_factor < 0.01
    # the slope's standard error equals ordinary least squares through the origin (numpy.linalg.lstsq)
    x = s.q[:, None]
    coef, res, *_ = np.linalg.lstsq(x, s.p_ambient - s.p_static + noise, rcond=None)
    assert fit.factor == pytest.approx(coef[0], rel=1e-12)
    assert fit.u_factor == pytest.approx(np.sqrt(res[0] / (speeds.size - 1) / float(np.dot(s.q, s.q))), rel=1e-9)


def test_too_few_or_flowless_pairs_are_refused():
    with pytest.raises(ReduceError, match="three or more"):
        fit_static_factor([1.0, 2.0], [1.0, 2.0])
    with pytest.raises(ReduceError, match="no flow"):
        fit_static_factor([0.0, 0.0, 0.0], [0.0, 1.0, 2.0])


def test_calibrate_prints_the_rig_lines(tmp_path, capsys):
    pairs = tmp_path / "pairs.csv"
    pairs.write_text("q_pa,room_minus_static_pa\n50,55.1\n100,110.0\n150,164.8\n200,220.2\n", encoding="utf-8")
    from pathlib import Path

    rig = Path(__file__).resolve().parents[2] / "rigs" / "cambered-balance.toml"
    assert main(["calibrate", str(rig), "--static-factor", str(pairs)]) == 0
    out = capsys.readouterr().out
    assert 'static_source = "factor"' in out and "static_factor = 1.10" in out
    pairs.write_text("q,dp\n1,2\n", encoding="utf-8")
    assert main(["calibrate", str(rig), "--static-factor", str(pairs)]) == 1
    assert "q_pa and room_minus_static_pa" in capsys.readouterr().err
