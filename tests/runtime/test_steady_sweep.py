"""A sweep averages each point only once the flow is steady, and compressed time gives the points of paced time.

The reference is the simulator's own steady state (the same run waited out far beyond the spin-up), an
independent computation of the point the sweep should have averaged.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest

from taprig.link import Link
from taprig.reduce import Reducer
from taprig.reduce.steady import SteadyCriteria
from taprig.rig import load_rig
from taprig.runtime.acquisition import Acquisition, AcquisitionError
from taprig.runtime.sweep import run_sweep, wait_device_time

AIRFOIL = Path(__file__).resolve().parents[2] / "rigs" / "naca0012-20tap.toml"


def sweep_points(query: str, angles_deg, spin_up_s: float, steady=SteadyCriteria()):
    rig = load_rig(AIRFOIL)
    acq = Acquisition(Link(f"sim://{AIRFOIL}?{query}", heartbeat=False), rig, Reducer(rig), None)
    acq.open(250)
    try:
        acq.set_actuator("fan", 0.8)
        wait_device_time(acq, spin_up_s, timeout_s=60)
        return run_sweep(acq, np.radians(angles_deg), settle_s=0.5, average_s=1.0, timeout_s=60, steady=steady)
    finally:
        acq.close()


def test_the_first_point_waits_for_the_spin_up():
    # a slow fan (τ = 3 s): after 1 s of run-up the stream is at 28 % of its q; the steady point is ~q∞
    query = "seed=5&speed=20&watchdog_ms=0&fan_tau=3&fan_rate=0"  # paced: device time follows the waits
    steady = sweep_points(query, [0.0], spin_up_s=1.0)[0].mean
    reference = sweep_points(query, [0.0], spin_up_s=40.0, steady=None)[0].mean  # waited out: 13 τ
    assert steady.q_pa == pytest.approx(reference.q_pa, abs=2 * np.hypot(steady.u_q_pa, reference.u_q_pa))
    assert abs(steady.q_pa / reference.q_pa - 1.0) < 0.01


def test_a_flow_that_never_settles_stops_with_the_reason():
    # paced, a fan slewing to 0.8 over 16 s: q ∝ t² keeps rising through the 3 s the sweep may wait
    query = "seed=5&speed=20&watchdog_ms=0&fan_tau=0&fan_rate=0.05"
    with pytest.raises(AcquisitionError, match=r"did not settle within 3 s: q moved by"):
        sweep_points(query, [0.0], spin_up_s=3.0, steady=SteadyCriteria(timeout_s=3.0))


def test_compressed_time_gives_the_points_of_paced_time():
    angles = [0.0, 4.0]
    fast = sweep_points("seed=3&speed=max&watchdog_ms=0", angles, spin_up_s=1.0)
    paced = sweep_points("seed=3&speed=25&watchdog_ms=0", angles, spin_up_s=1.0)
    for a, b in zip(fast, paced):
        ca, cb = a.mean.default, b.mean.default
        assert a.mean.q_pa == pytest.approx(b.mean.q_pa, abs=2 * np.hypot(a.mean.u_q_pa, b.mean.u_q_pa))
        assert ca.cl == pytest.approx(cb.cl, abs=2 * math.hypot(ca.u_cl, cb.u_cl))
