"""Values out of physical range are flagged, not printed as plain numbers; room conditions are checked."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from taprig.protocol import RawBlock
from taprig.reduce import Reducer, ScanFlag
from taprig.rig import load_rig
from taprig.rig.errors import RigError
from taprig.rig.loader import parse_rig

RIGS = Path(__file__).resolve().parents[2] / "rigs"


def _block(rig, pitot_pa: float, n: int = 20) -> RawBlock:
    channels = tuple(sorted(c.index for c in rig.channels))
    sensors = [rig.sensor_of(i) for i in channels]
    values = np.array([pitot_pa if rig.channel(i).name == "pitot_dp" else 0.0 for i in channels])
    counts = np.array([s.si_to_counts(v) for s, v in zip(sensors, values)])
    return RawBlock(np.tile(counts, (n, 1)), channels, np.arange(n), np.arange(n))


@pytest.fixture(scope="module")
def cambered():
    rig = load_rig(RIGS / "cambered-balance.toml")
    return rig, Reducer(rig)


def test_a_speed_the_fan_cannot_make_is_flagged(cambered):
    rig, reducer = cambered
    # 900 Pa of q is √(2·900/1.2) ≈ 38.7 m/s (Bernoulli, common practice), above 1.1 × the rig's 25 m/s fan
    rb = reducer.reduce(_block(rig, 900.0))
    assert rig.operating.max_speed == 25.0
    assert np.all(rb.scan_flags & ScanFlag.BEYOND_RIG)
    mean = reducer.reduce_mean(_block(rig, 900.0))
    assert "BEYOND_RIG" in mean.flag_names
    # 250 Pa (20.4 m/s) is within the rig's reach
    assert not np.any(reducer.reduce(_block(rig, 250.0)).scan_flags & ScanFlag.BEYOND_RIG)


def test_negative_q_beyond_noise_is_reversed_and_no_flow(cambered):
    rig, reducer = cambered
    rb = reducer.reduce(_block(rig, -50.0))
    assert np.all(rb.scan_flags & ScanFlag.REVERSED) and np.all(rb.scan_flags & ScanFlag.NO_FLOW)
    assert np.all(np.isnan(rb.cl))
    small = reducer.reduce(_block(rig, -0.3))  # noise about zero: no flow, not reversed
    assert not np.any(small.scan_flags & ScanFlag.REVERSED)


def test_room_conditions_in_the_rig_file_name_the_unit_slip():
    text = (RIGS / "cambered-balance.toml").read_text(encoding="utf-8").replace(
        '[fluid]\nmedium = "air"', '[fluid]\nmedium = "air"\nambient_pressure_pa = 1013.25', 1)
    with pytest.raises(RigError, match="looks like hPa: ambient_pressure_pa = 101325"):
        parse_rig(text, "x.toml")


def test_before_a_zero_the_no_flow_threshold_carries_the_offset_band():
    # A channel never zeroed reads "no pressure" only to within its datasheet offset part (a rectangular bound,
    # u = FS·o/(100√3), JCGM 100:2008 §4.3.7); a wind-off zero removes it, leaving one count's LSB/√12 (GUM
    # F.2.2.1). The threshold is 3 u(q at no flow), q = p_total − p_static (GUM §5.1.2), at least two counts.
    from datetime import datetime, timezone

    from taprig.rig import build_calibration
    from taprig.rig.fitting import ZeroResult

    rig = load_rig(Path(__file__).resolve().parents[2] / "rigs" / "naca0012-20tap.toml")
    probe = rig.sensors["probe"]
    channels = tuple(sorted(c.index for c in rig.channels))
    lsb = probe.slope
    offset = probe.full_scale * probe.offset_pct_fs / 100.0 / np.sqrt(3.0)
    nominal = Reducer(rig).plan(channels).q_threshold
    assert nominal == pytest.approx(3.0 * np.sqrt(2.0 * (offset**2 + lsb**2 / 12.0)), rel=1e-9)
    names = [rig.channel(i).name for i in channels]
    zero = ZeroResult(np.array([rig.sensor_of(i).si_to_counts(0.0) for i in channels]), np.zeros(len(channels)), 100)
    cal = build_calibration(rig, names, datetime(2000, 1, 1, tzinfo=timezone.utc), zero=zero)
    zeroed = Reducer(rig, cal).plan(channels).q_threshold
    assert zeroed == pytest.approx(max(3.0 * np.sqrt(2.0 * lsb**2 / 12.0), 2.0 * 2.0 * lsb), rel=1e-9)
