"""Benchmark of the simulated board: 64 channels at 2 kHz in real time (CPU use) and in compressed time.

Measured through the ``sim://`` pyserial port exactly as a host uses it, reading whatever is waiting:

* real time (``speed=1``): the process's CPU time over the wall time while the board streams, as a percentage of
  one core (target ≤ 25 %), and the scan rate the reader received;
* compressed time (``speed=max``): simulated seconds per wall second (target ≥ 20× real time).

The naive baseline, measured in the same run, generates the same stream one scan at a time through the same
flow and sensor models and encodes each frame with :func:`taprig.protocol.encode_message`; its figures are the
CPU it would need for real time and the speed-up over real time it reaches.
"""

from __future__ import annotations

import time
from pathlib import Path

import numpy as np
import serial

import taprig.link  # noqa: F401  (registers sim://)
from taprig.bench import Record
from taprig.protocol import Heartbeat, Samples, SetActuator, Start, StreamDecoder, encode_message
from taprig.rig.loader import load_rig
from taprig.sim import SimOptions, sim_url
from taprig.sim.board import build_description, build_sensor_bank, tubing_time_constants
from taprig.sim.plant import build_plant, channel_values
from taprig.sim.sensors import digitise, first_order_lag, lag_coefficients, sensor_reading

RIG = Path(__file__).resolve().parents[3] / "rigs" / "bench-64.toml"
RATE_HZ = 2000.0
ALL_CHANNELS = (1 << 64) - 1


def _open(query: str):
    port = serial.serial_for_url(sim_url(RIG.as_posix(), f"seed=1&{query}"), timeout=0.05)
    port.write(encode_message(SetActuator(1, 0, 0.7), 0) + encode_message(SetActuator(2, 1, 6.0), 1))
    port.write(encode_message(Start(3, RATE_HZ, ALL_CHANNELS, 0), 2))
    return port


def _drain(port, seconds: float, heartbeat_s: float | None) -> tuple[bytes, float, float]:
    """Read what is waiting for ``seconds`` of wall time; return the bytes, wall time and process CPU time."""
    chunks = []
    seq = 3
    t0, c0 = time.perf_counter(), time.process_time()
    next_beat = t0
    while (now := time.perf_counter()) - t0 < seconds:
        chunks.append(port.read(max(1, port.in_waiting)))
        if heartbeat_s is not None and now >= next_beat:
            port.write(encode_message(Heartbeat(0), seq))
            seq += 1
            next_beat = now + heartbeat_s
    return b"".join(chunks), time.perf_counter() - t0, time.process_time() - c0


def _scans(data: bytes, before: bytes = b"") -> tuple[int, dict]:
    """Scans in ``data`` and the decoder's counters over ``before`` + ``data``."""
    decoder = StreamDecoder()
    decoder.feed(before)
    items = decoder.feed(data)
    return sum(getattr(i, "n_scans", 0) for i in items), decoder.counters.as_dict()


def measure_real_time(seconds: float) -> tuple[float, float, dict]:
    """CPU use [% of one core] and delivered scan rate [scans/s] of the board in real time."""
    port = _open("speed=1")
    try:
        settle, _, _ = _drain(port, 0.3, 0.25)  # the boot burst and the first frames, not timed
        data, wall, cpu = _drain(port, seconds, 0.25)
    finally:
        port.close()
    n, counters = _scans(data, settle)
    return 100.0 * cpu / wall, n / wall, counters


def measure_compressed(seconds: float) -> tuple[float, dict]:
    """Simulated seconds per wall second with ``speed=max`` (the watchdog off: no wall-time heartbeats)."""
    port = _open("speed=max&watchdog_ms=0")
    try:
        start_ns = port.device.now_ns
        data, wall, _ = _drain(port, seconds, None)
        simulated = (port.device.now_ns - start_ns) * 1e-9
    finally:
        port.close()
    _, counters = _scans(data)
    return simulated / wall, counters


def measure_naive(sim_seconds: float) -> float:
    """Wall seconds per simulated second of a per-scan generator with a per-frame encoder (the baseline)."""
    rig = load_rig(RIG)
    options = SimOptions(seed=1)
    plant = build_plant(rig, options)
    description = build_description(rig, options)
    bank = build_sensor_bank(rig, description, options)
    pole = lag_coefficients(1.0 / RATE_HZ, tubing_time_constants(rig, plant.n_channels, options))
    encodings = [c.encoding for c in description.channels]
    rng = np.random.default_rng(1)
    n_scans = int(sim_seconds * RATE_HZ)
    spf = 31
    state = None
    frame_rows = []
    t0 = time.perf_counter()
    for k in range(n_scans):
        draws = rng.standard_normal((1, plant.n_taps + plant.n_channels))
        values = channel_values(plant, np.array([14.0]), np.radians([6.0]), draws[:, : plant.n_taps])
        state = values[0] if state is None else state
        lagged, state = first_order_lag(values, pole, state)
        frame_rows.append(digitise(sensor_reading(lagged, bank, draws[:, plant.n_taps :], np.zeros(1)), bank)[0])
        if len(frame_rows) == spf:
            msg = Samples(k, int(1e9 / RATE_HZ), k, ALL_CHANNELS, np.array(frame_rows))
            encode_message(msg, k // spf, 0, encodings)
            frame_rows = []
    return (time.perf_counter() - t0) / sim_seconds


def measure_walls(repeats: int) -> tuple[float, float, float]:
    """The walled section of the bench rig: the images solution's build [ms] (uncached), and the section pressures
    of a 64-scan block with the servo slewing (64 distinct angles) [µs per block] between walls and in free air."""
    from taprig.physics.images import WalledPanelModel
    from taprig.sim.airfoil import AirfoilFlow
    from taprig.sim.plant import walled_chord_ratio

    rig = load_rig(RIG)
    shape, layout = rig.section.shape, rig.tap_layout()
    t0 = time.perf_counter()
    walls = WalledPanelModel(shape, walled_chord_ratio(rig, SimOptions()), rig.geometry.pivot_x_c or 0.25)
    build_ms = 1e3 * (time.perf_counter() - t0)
    alpha = np.radians(np.linspace(4.0, 6.0, 64))
    per_block = []
    for flow in (AirfoilFlow(shape, layout.x_c, layout.upper, walls=walls), AirfoilFlow(shape, layout.x_c, layout.upper)):
        t0 = time.perf_counter()
        for _ in range(repeats):
            flow.pressures(alpha)
        per_block.append(1e6 * (time.perf_counter() - t0) / repeats)
    return build_ms, per_block[0], per_block[1]


def run(quick: bool) -> list[Record]:
    """Measure the simulated board at 64 channels × 2 kHz against the naive generator."""
    seconds = 1.0 if quick else 5.0
    naive_s_per_s = measure_naive(0.1 if quick else 0.5)
    cpu_pct, scan_rate, counters = measure_real_time(seconds)
    speedup, fast_counters = measure_compressed(seconds)
    clean = all(counters[k] == 0 and fast_counters[k] == 0 for k in ("crc_errors", "framing_errors", "gaps"))
    if not clean:
        raise RuntimeError(f"simulated stream not clean: {counters} / {fast_counters}")
    naive_cpu_pct = 100.0 * naive_s_per_s
    build_ms, walled_us, free_us = measure_walls(50 if quick else 400)
    return [
        Record("sim 64ch x 2kHz real time: CPU (baseline: naive CPU needed)", cpu_pct, "% of a core",
               naive_cpu_pct, naive_cpu_pct / cpu_pct, "<= 25"),
        Record("sim 64ch x 2kHz real time: scans delivered", scan_rate, "scans/s", None, None, "2000"),
        Record("sim 64ch x 2kHz compressed time (baseline: naive)", speedup, "x real time",
               1.0 / naive_s_per_s, speedup * naive_s_per_s, ">= 20"),
        Record("sim walled section: images solution, first use per rig", build_ms, "ms", None, None, "< 1000 ms"),
        # a block of 64 scans with the servo slewing (64 distinct angles) is the worst case: at 2 kHz, 2 ms per
        # block would be 6 % of a core while the angle moves
        Record("sim section pressures, 64 angles, walls (baseline: free air)", walled_us, "us per block", free_us,
               free_us / walled_us, "<= 2000"),
    ]
