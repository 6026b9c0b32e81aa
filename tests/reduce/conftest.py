"""Rig texts and block builders for the reducer tests.

Blocks are made the way a board makes them: a pressure per channel [Pa] turned into counts by the channel's own
calibrated transfer function run backwards (the rig's Conversion inverted), so every test goes through the real
counts → Pa path.
"""

from __future__ import annotations

import numpy as np
import pytest

from taprig.protocol import RawBlock

# A linear sensor fine enough (1e-4 Pa per count) that one count is far below every tolerance in these tests.
FINE_SENSOR = """
[sensors.fine]
kind = "linear"
gain_pa_per_count = 1e-4
offset_pa = 0.0
range_pa = [{lo}, {hi}]
adc_bits = 32
accuracy_pct_fs = {pct}
"""


def channel_table(index: int, name: str, sensor: str, measures: str, relative_to: str | None = None) -> str:
    rel = f'relative_to = "{relative_to}"\n' if relative_to else ""
    return (f'[[channels]]\nindex = {index}\nname = "{name}"\nencoding = "i32"\nsensor = "{sensor}"\n'
            f'measures = "{measures}"\n{rel}')


def _airfoil_rig(taps, *, layout: str = "absolute", section: str = 'naca = "0012"', pct: float = 0.0,
                chord_mm: float = 100.0, extra: str = "") -> str:
    """Rig text: an airfoil whose taps are (name, x_c, surface) on fine sensors.

    ``layout="absolute"``: static, total and every tap on absolute channels; ``"differential"``: a pitot
    differential and taps referred to the static port.
    """
    lo, hi = (0.0, 200000.0) if layout == "absolute" else (-100000.0, 100000.0)
    parts = ['format = 1\nid = "test-rig"\nname = "test"\nkind = "airfoil"\n', FINE_SENSOR.format(lo=lo, hi=hi, pct=pct)]
    if layout == "absolute":
        parts += [channel_table(0, "ps", "fine", "absolute"), channel_table(1, "pt", "fine", "absolute")]
        reference = '[reference]\nstatic = "ps"\ntotal = "pt"\n'
    else:
        parts += [channel_table(0, "dq", "fine", "differential", "static")]
        reference = '[reference]\npitot = "dq"\n'
    first = 2 if layout == "absolute" else 1
    for k, (name, _, _) in enumerate(taps):
        parts.append(channel_table(first + k, f"c_{name}", "fine", "absolute" if layout == "absolute" else "differential",
                                   None if layout == "absolute" else "static"))
    parts.append(reference)
    parts.append(f"[geometry]\nchord_mm = {chord_mm}\nspan_mm = 300.0\ntunnel_height_mm = 300.0\ntunnel_width_mm = 300.0\n")
    parts.append(f"[section]\n{section}\n")
    for name, x_c, surface in taps:
        parts.append(f'[[taps]]\nname = "{name}"\nchannel = "c_{name}"\nx_c = {x_c!r}\nsurface = "{surface}"\n')
    return "\n".join(parts) + extra


@pytest.fixture
def make_block():
    """Build a RawBlock for a reducer from pressures [Pa] per channel (scans × channels, rig channel order)."""

    def build(reducer, pressures, channels=None) -> RawBlock:
        channels = tuple(c.index for c in reducer.rig.channels) if channels is None else tuple(channels)
        plan = reducer.plan(channels)
        p = np.atleast_2d(np.asarray(pressures, dtype=float))
        counts = p / plan.scale + plan.zero  # the inverse of value = (counts − zero) · scale
        n = counts.shape[0]
        return RawBlock(counts, channels, np.arange(n, dtype=np.int64) * 1_000_000, np.arange(n, dtype=np.int64))

    return build


@pytest.fixture
def airfoil_rig():
    """Rig text builder ``airfoil_rig(taps, layout=..., section=..., pct=...)`` (see :func:`_airfoil_rig`)."""
    return _airfoil_rig
