"""What the simulated board is, built once from the rig (pure): its self-description, sensor bank and actuators.

The board offers exactly the rig's channels (by index, with the rig's encodings; an index the rig skips becomes a
spare ``i16`` channel that reads 0) and the rig's actuators in the board's units (degrees for an angle), so
``rig.differences(description)`` is empty for the simulated board of any valid rig.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from taprig import __version__
from taprig.physics.air import sutherland_viscosity
from taprig.physics.constants import ZERO_CELSIUS
from taprig.protocol import ActuatorInfo, ActuatorKind, ChannelInfo, Description, Encoding
from taprig.rig.model import Medium, Rig
from taprig.rig.sensors import Quantity
from taprig.sim.flows import rate_limited
from taprig.sim.options import SimOptions
from taprig.sim.sensors import (
    DEFAULT_NOISE_FRACTION_FS,
    DEFAULT_TEMPCO_FRACTION_FS,
    SensorBank,
    encoding_limits,
    tubing_time_constant,
)

FIRMWARE = f"taprig-sim {__version__}"
RATE_MIN_HZ = 1.0
#: Channel-samples per second the simulated board's sampler can take, shared by the channels of a scan.
SAMPLE_BUDGET = 256_000.0
RATE_CAP_HZ = 10_000.0
MAX_FRAME = 4096
#: Slew rate of an actuator without a rate limit (a rate-limit option of 0).
UNLIMITED = float("inf")


def rate_max_hz(n_channels: int) -> float:
    """Highest scan rate for a set of ``n_channels`` channels [Hz]."""
    return min(RATE_CAP_HZ, SAMPLE_BUDGET / max(n_channels, 1))


def board_uid(rig: Rig, options: SimOptions) -> str:
    """A stable id of the simulated board: the same rig and seed give the same board."""
    return f"sim-{rig.id}-{options.seed}"


def build_description(rig: Rig, options: SimOptions) -> Description:
    """The board's self-description for ``rig`` (PROTOCOL.md §3)."""
    n = max(c.index for c in rig.channels) + 1
    channels = [ChannelInfo(f"spare{i}", Encoding.I16) for i in range(n)]
    for ch in rig.channels:
        channels[ch.index] = ChannelInfo(ch.name, ch.encoding)
    actuators = tuple(
        ActuatorInfo(
            a.id, a.kind, a.to_device(a.min), a.to_device(a.max), a.to_device(a.safe),
            "deg" if a.kind is ActuatorKind.ANGLE else a.unit, a.name,
        )
        for a in rig.actuators
    )
    return Description(
        proto_major=1, proto_minor=1, firmware=FIRMWARE, uid=board_uid(rig, options),
        rate_min_hz=RATE_MIN_HZ, rate_max_hz=rate_max_hz(n), max_frame=MAX_FRAME,
        heartbeat_timeout_ms=options.watchdog_ms or 1000, channels=tuple(channels), actuators=actuators,
    )


def build_sensor_bank(rig: Rig, description: Description, options: SimOptions) -> SensorBank:
    """Per-channel transfer functions, noise, drift and limits of the board's channels (see :class:`SensorBank`)."""
    n = len(description.channels)
    lo, hi, integer = encoding_limits([c.encoding for c in description.channels])
    slope, intercept = np.ones(n), np.zeros(n)
    noise, tempco = np.zeros(n), np.zeros(n)
    for ch in rig.channels:
        sensor = rig.sensors[ch.sensor]
        i = ch.index
        slope[i], intercept[i] = sensor.slope, sensor.intercept
        noise[i] = DEFAULT_NOISE_FRACTION_FS * sensor.full_scale * options.noise
        tempco[i] = DEFAULT_TEMPCO_FRACTION_FS * sensor.full_scale if options.thermal else 0.0
        if integer[i]:
            rail_lo, rail_hi = sensor.rails
            lo[i], hi[i] = max(lo[i], rail_lo), min(hi[i], rail_hi)
    return SensorBank(slope, intercept, noise, tempco, lo, hi, integer)


def tubing_time_constants(rig: Rig, n_channels: int, options: SimOptions) -> np.ndarray:
    """Pneumatic time constant of each channel [s]: air-filled tubing on pressure channels, none elsewhere.

    A water rig's lines are liquid-filled: nearly incompressible, so their lag is neglected (common practice).
    """
    tau = np.zeros(n_channels)
    if not options.lag or rig.fluid.medium is Medium.WATER or options.tube_mm <= 0.0 or options.bore_mm <= 0.0:
        return tau
    mu = float(sutherland_viscosity(options.ambient_c + ZERO_CELSIUS))
    p = rig.fluid.ambient_pressure or options.ambient_pa
    value = tubing_time_constant(options.tube_mm * 1e-3, options.bore_mm * 1e-3, mu, p)
    for ch in rig.channels:
        if rig.sensors[ch.sensor].quantity is Quantity.PRESSURE:
            tau[ch.index] = value
    return tau


@dataclass
class ActuatorState:
    """One actuator in the board's units: its setpoint, and where it was when the setpoint last changed.

    ``position_at(t)`` slews from there toward the setpoint at ``rate`` [unit/s] (times in ns since open).
    """

    info: ActuatorInfo
    rate: float
    setpoint: float
    start_value: float
    start_ns: int = 0

    def position_at(self, t_ns: np.ndarray) -> np.ndarray:
        """Position at true times ``t_ns`` [board unit] (vectorised)."""
        elapsed = np.maximum(np.asarray(t_ns, dtype=float) - self.start_ns, 0.0) * 1e-9
        return rate_limited(self.start_value, self.setpoint, elapsed, self.rate)

    def command(self, value: float, t_ns: int) -> None:
        """Change the setpoint at true time ``t_ns``; the actuator continues from where it is."""
        self.start_value = float(self.position_at(np.array([t_ns]))[0])
        self.start_ns = t_ns
        self.setpoint = float(value)


def build_actuators(description: Description, options: SimOptions) -> dict[int, ActuatorState]:
    """Every actuator of the board at its safe value, with the rate limits of the options."""
    out = {}
    for info in description.actuators:
        if info.kind is ActuatorKind.ANGLE:
            rate = options.angle_rate_deg or UNLIMITED
        elif info.kind is ActuatorKind.FAN:
            rate = options.fan_rate * (info.max - info.min) or UNLIMITED
        else:
            rate = UNLIMITED
        out[info.id] = ActuatorState(info, rate, info.safe, info.safe)
    return out


#: Bytes of one value in each wire encoding (PROTOCOL.md §3).
ENCODING_BYTES = {Encoding.I16: 2, Encoding.U16: 2, Encoding.I32: 4, Encoding.U32: 4, Encoding.F32: 4}
#: Time a device-chosen frame covers [s]: short enough for a live display, long enough to keep frames few.
FRAME_SPAN_S = 0.02
_SAMPLES_OVERHEAD = 12 + 24  # header + CRC, and the SAMPLES head


@dataclass(frozen=True)
class StreamPlan:
    """The stream a START set up: rate, scan period [ns], channels and their mask and encodings, scans per frame."""

    rate_hz: float
    period_ns: int
    channels: tuple[int, ...]
    mask: int
    encodings: tuple[Encoding, ...]
    scans_per_frame: int


def plan_stream(rate_hz: float, channels: tuple[int, ...], encodings, requested: int, max_frame: int) -> StreamPlan:
    """Fix the scans per frame of a stream: the host's request, or about 20 ms of scans, within one frame.

    A request above what one frame holds is reduced to what fits.
    """
    scan_bytes = sum(ENCODING_BYTES[e] for e in encodings)
    fits = max(1, (max_frame - _SAMPLES_OVERHEAD) // scan_bytes)
    wanted = requested if requested > 0 else max(1, round(rate_hz * FRAME_SPAN_S))
    mask = sum(1 << c for c in channels)
    return StreamPlan(
        float(rate_hz), int(round(1e9 / rate_hz)), tuple(channels), mask, tuple(encodings), int(min(wanted, fits))
    )
