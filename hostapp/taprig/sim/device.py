"""The simulated board: holds state and a simulated clock, speaks PROTOCOL.md, does no I/O.

:class:`SimulatedDevice` is driven from outside. ``receive(data)`` takes host bytes at the current simulated
time; ``produce_until(t_ns)`` advances the simulated (true, host-side) clock to ``t_ns`` nanoseconds after open and
queues every byte the board sends up to then; ``read(max_bytes)`` hands the queued bytes out. Whoever drives it
decides how time passes: the ``sim://`` port follows the wall clock (or runs as fast as it is read), tests step it
explicitly. Every scan is generated in numpy blocks of whole frames; noise and fault draws are consumed in scan
and frame order, so the bytes depend on the seed and the host's commands, never on how the reads are chunked.

Time: the board's own clock is its crystal, ``clock_ppm`` fast of true time; scans are scheduled and stamped on
the board's clock. The watchdog, the scheduled resets, the disconnect and write stalls run on true time.

The horizon (:meth:`SimulatedDevice.set_horizon`): a host that paces the board in its own device time (a sweep)
names the board-clock time at which its next command acts. A ``START`` or a setpoint that arrives before then is
acknowledged at once and acts at the horizon, so the board's response depends on the device times the host chose,
not on when its bytes happened to arrive (in real time a wall-clock moment, in compressed time wherever the reader
had got to). ``STOP``, ``RESET`` and heartbeats act at once; a ``STOP``, the watchdog or a reboot drops what was
waiting, and so does a setpoint that acts at once (no horizon) for its actuator. The host clears the horizon
before anything that must act now (its safe values at the end of a run, an operator's command).
"""

from __future__ import annotations

import math

import numpy as np

from taprig.protocol import (
    FLAG_BOOT,
    ActuatorKind,
    AllowMoves,
    Describe,
    DeviceState,
    Heartbeat,
    Log,
    MsgType,
    Reply,
    ReplyCode,
    Reset,
    SetActuator,
    Start,
    Status,
    Stop,
    StreamDecoder,
    encode_frame,
    encode_message,
    mask_to_channels,
)
from taprig.protocol.samples import SAMPLES_HEAD, WIRE_DTYPES, SampleLayout, make_layout
from taprig.physics.constants import ZERO_CELSIUS
from taprig.rig.model import Medium, Rig
from taprig.sim.board import (
    MAX_FRAME,
    StreamPlan,
    build_actuators,
    build_description,
    build_sensor_bank,
    plan_stream,
    rate_max_hz,
    tubing_time_constants,
)
from taprig.sim.faults import FaultTally, LinkFaults
from taprig.sim.flows import fan_speed, first_order_response
from taprig.sim.options import SimOptions
from taprig.sim.plant import build_plant, channel_values
from taprig.sim.sensors import board_temperature, digitise, first_order_lag, lag_coefficients, sensor_reading

_NS = 1_000_000_000
_NEVER = math.inf
#: The watchdog acts this long after its deadline (PROTOCOL.md §4 allows up to 50 ms).
WATCHDOG_LATENCY_NS = 10_000_000
STATUS_PERIOD_NS = _NS
#: Largest block of scans generated in one numpy pass (bounds the memory of a long compressed-time step).
MAX_BLOCK_SCANS = 8192
#: Board warm-up after power-up: final rise over the room [K] and time constant [s] (from memory: a small board
#: in a plastic box warms by a few kelvin over some minutes).
WARM_UP_RISE = 6.0
WARM_UP_TIME = 300.0
SUPPLY_MV = 4980
BOOT_TEXT = b"taprig-sim bootloader: starting firmware\r\n"


def to_wire(counts: np.ndarray, layout: SampleLayout) -> np.ndarray:
    """Cast quantised counts (scans × channels of the layout) to the layout's wire dtype, one record per scan."""
    if layout.shared:
        return counts.astype(layout.dtype)
    wire = np.empty(counts.shape[0], layout.dtype)
    for j, (channel, encoding) in enumerate(zip(layout.channels, layout.encodings)):
        wire[f"c{channel}"] = counts[:, j].astype(WIRE_DTYPES[encoding])
    return wire


def default_max_speed(rig) -> float:
    """Stream speed at full fan when the options give none [m/s]: 20 m/s in air, 0.5 m/s in water, but never past
    the fan's top speed the rig file states (``[operating] max_speed_m_s``): a simulated bench should not blow
    harder than the one it stands for."""
    speed = 0.5 if rig.fluid.medium is Medium.WATER else 20.0
    top = rig.operating.max_speed
    return min(speed, top) if top else speed


class SimulatedDevice:
    """A simulated board for ``rig`` with ``options`` (see ``docs/simulator.md``); powered up at time 0.

    Public state: ``description`` (what it sends in DESCRIPTION), ``plant`` (its flow model), ``actuators``
    (id → :class:`taprig.sim.board.ActuatorState`), ``faults`` (:class:`taprig.sim.faults.LinkFaults`),
    ``disconnected``, ``host_frames`` (well-formed host frames received since open), ``commands`` (every host
    command other than HEARTBEAT received since open, as (true time [ns], state before it, message), in order:
    what the board was told, for tests and ``taprig sim --command-log``), ``command_codes`` (index in ``commands``
    → the :class:`ReplyCode` the board answered it with), ``held`` (in the safe hold after a watchdog trip,
    PROTOCOL.md §4: a SET_ACTUATOR away from safe is refused with BUSY until ALLOW_MOVES).
    """

    def __init__(self, rig: Rig, options: SimOptions = SimOptions()):
        self.rig = rig
        self.options = options
        #: Angle of attack [deg] of a section with no angle actuator: on a real bench the operator sets it by
        #: hand; here a test (or a script) plays the hand and sets this.
        self.hand_angle_deg = 0.0
        self.description = build_description(rig, options)
        self.plant = build_plant(rig, options)
        n = len(self.description.channels)
        self._bank = build_sensor_bank(rig, self.description, options)
        self._tau = tubing_time_constants(rig, n, options)
        self._encodings = [c.encoding for c in self.description.channels]
        noise_seq, fault_seq = np.random.SeedSequence(options.seed).spawn(2)
        self._noise_rng = np.random.default_rng(noise_seq)
        fault_rng = np.random.default_rng(fault_seq)
        self.faults = LinkFaults(fault_rng, options.ber, options.burst_rate, options.burst_frames)
        self._drift = 1.0 + options.clock_ppm * 1e-6
        self._max_speed = options.max_speed or default_max_speed(rig)
        self._resets = sorted(int(t * _NS) for t in options.reset)
        self._disconnect_ns = int(options.disconnect * _NS) if options.disconnect >= 0 else _NEVER
        self._out = bytearray()  # deleting from the front of a bytearray is cheap, so byte-wise readers are too
        self._now = 0
        self._speed = 0.0
        self._speed_ns = 0
        self.actuators = build_actuators(self.description, options)
        self.disconnected = False
        self.host_frames = 0
        self.commands: list[tuple[int, DeviceState, object]] = []
        self._horizon_dev: float | None = None
        #: Commands acknowledged and waiting for the horizon: (true time [ns], message), in arrival order.
        self._deferred: list[tuple[float, object]] = []
        #: Commands that arrived after the horizon they were meant for had passed (acted on arrival).
        self.late_commands = 0
        self.command_codes: dict[int, ReplyCode] = {}
        self._answering: int | None = None
        self._boot()

    # -- what the driver uses ------------------------------------------------------------------------------
    @property
    def now_ns(self) -> int:
        """Simulated true time since open [ns]."""
        return self._now

    @property
    def tally(self) -> FaultTally:
        """Exact count of the faults injected so far (see :class:`taprig.sim.faults.FaultTally`)."""
        return self.faults.tally

    @property
    def state(self) -> DeviceState:
        """The state the board reports in STATUS."""
        if self._safe:
            return DeviceState.SAFE
        return DeviceState.STREAMING if self._plan is not None else DeviceState.IDLE

    @property
    def pending(self) -> int:
        """Bytes queued for the host."""
        return len(self._out)

    @property
    def stream_speed(self) -> float:
        """Stream speed at the last simulated instant [m/s]."""
        return self._speed

    def read(self, max_bytes: int | None = None) -> bytes:
        """Hand out up to ``max_bytes`` queued bytes (all of them by default), oldest first."""
        size = len(self._out) if max_bytes is None else min(max_bytes, len(self._out))
        data = bytes(self._out[:size])
        del self._out[:size]
        return data

    def stalled_until(self, t_ns: int) -> int | None:
        """End of the write stall [ns] if the board takes no host bytes at ``t_ns``, else None."""
        start = self.options.write_stall
        if start < 0:
            return None
        begin, end = int(start * _NS), int((start + self.options.write_stall_for) * _NS)
        return end if begin <= t_ns < end else None

    def next_due_ns(self) -> float:
        """True time of the next byte the board will send unprompted [ns] (inf if none is scheduled)."""
        due = self._next_event()[0]
        plan = self._plan
        if plan is not None:
            last = self._next_scan + plan.scans_per_frame - 1
            due = min(due, self._true_ns(self._scan_dev_ns(last)))
        return due

    @property
    def board_ns(self) -> int:
        """The board's clock now [ns since its boot]: the clock the stream's scan times are on."""
        return int(self._dev_ns(self._now))

    def set_horizon(self, board_ns: float | None) -> None:
        """Let a ``START`` or a setpoint that arrives from now on act at board-clock time ``board_ns``
        [ns since boot] (module docstring); None: every command acts on arrival. Commands already waiting keep
        their time."""
        self._horizon_dev = None if board_ns is None else float(board_ns)

    def horizon_true_ns(self) -> float | None:
        """True time [ns since open] of the horizon, or None when there is none."""
        return None if self._horizon_dev is None else self._true_ns(self._horizon_dev)

    def receive(self, data: bytes) -> None:
        """Take host bytes at the current simulated time and act on every complete command in them."""
        if self.disconnected or not data:
            return
        before, foreign_before = self._decoder.counters, self._decoder.foreign_frames
        items = self._decoder.feed(data)
        after = self._decoder.counters
        # PROTOCOL.md §1, §4: a device → host type arriving here is an echo, not the host: no reply, and it does
        # not feed the watchdog
        foreign = self._decoder.foreign_frames - foreign_before
        well_formed = after.frames - before.frames - foreign
        if well_formed:
            self.host_frames += well_formed
            self._watchdog_ns = self._now + self._timeout_ns()
        for item in items:
            if not isinstance(item, Heartbeat):
                self.commands.append((self._now, self.state, item))
                self._answering = len(self.commands) - 1
            try:
                self._command(item)
            finally:
                self._answering = None
        unknown = after.unknown_types - before.unknown_types - foreign
        malformed = well_formed - len(items) - unknown - (after.duplicates - before.duplicates)
        for _ in range(unknown):
            self._reply(0, ReplyCode.UNKNOWN_COMMAND, "unknown command type")
        for _ in range(max(malformed, 0)):
            self._reply(0, ReplyCode.MALFORMED, "command body too short")

    def produce_until(self, t_ns: int) -> None:
        """Advance the simulated clock to ``t_ns`` [ns since open], queueing every byte the board sends by then."""
        while not self.disconnected:
            due, action = self._next_event()
            stop = min(t_ns, due)
            self._stream_until(stop)
            if due > t_ns:
                break
            self._now = max(self._now, int(due))
            action()
        self._now = max(self._now, int(t_ns))

    def press_reset(self) -> None:
        """Reboot the board now, as its reset button would (actuators to safe, DESCRIPTION with BOOT)."""
        if not self.disconnected:
            self._reboot()

    def unplug(self) -> None:
        """Vanish now, as a pulled USB cable would."""
        self._disconnect()

    # -- boot, events ----------------------------------------------------------------------------------------
    def _boot(self) -> None:
        """Power-up or reboot: sequence 0, actuators to safe, not streaming, DESCRIPTION with BOOT."""
        self._boot_ns = self._now
        self._seq = 0
        self._decoder = StreamDecoder(receiver="device")
        self._plan: StreamPlan | None = None
        self._safe = False
        self.held = False  # power-up state is safe, not held (PROTOCOL.md §4)
        self._watchdog_ns = _NEVER
        self._next_status_dev = 0
        self._deferred = []
        self._horizon_dev = None  # a horizon was on the clock of the board before the reboot
        for act in self.actuators.values():
            act.command(act.info.safe, self._now)
        self.faults.restart()
        if self.options.boot_text:
            self._queue(BOOT_TEXT)
        self._queue(b"\x00")  # flushes a receiver holding a partial frame (PROTOCOL.md §1)
        self._send(self.description, flags=FLAG_BOOT)
        self._send(Log(20, f"{self.description.firmware} up, simulating rig {self.rig.id!r}"))

    def _next_event(self) -> tuple[float, object]:
        """The earliest scheduled event: (true time [ns], what to do then)."""
        events = [(self._disconnect_ns, self._disconnect)]
        if self._resets:
            events.append((self._resets[0], self._scheduled_reset))
        if not self._safe and self.options.watchdog_ms > 0:
            events.append((self._watchdog_ns + WATCHDOG_LATENCY_NS, self._trip_watchdog))
        if self._plan is not None:
            events.append((self._true_ns(self._next_status_dev), self._status))
        if self._deferred:
            events.append((self._deferred[0][0], self._act_deferred))
        return min(events, key=lambda e: e[0])

    def _act_deferred(self) -> None:
        """The waiting command whose time has come acts now (its reply went out when it arrived)."""
        _, msg = self._deferred.pop(0)
        if isinstance(msg, Start):
            self._begin_stream(msg)
        else:
            self._move(self.actuators[msg.actuator_id], msg.value)

    def _defer(self, msg) -> bool:
        """Whether ``msg`` waits for the horizon (queued, in arrival order); late ones count and act now."""
        if self._horizon_dev is None:
            return False
        at = self._true_ns(self._horizon_dev)
        if at < self._now:
            self.late_commands += 1
            return False
        self._deferred.append((at, msg))
        return True

    def _drop_deferred(self, what=None) -> None:
        """Forget waiting commands: all, or those for actuator id ``what`` (an int), or waiting STARTs ("start")."""
        if what is None:
            self._deferred = []
        elif what == "start":
            self._deferred = [(t, m) for t, m in self._deferred if not isinstance(m, Start)]
        else:
            self._deferred = [(t, m) for t, m in self._deferred
                              if isinstance(m, Start) or m.actuator_id != what]

    def _disconnect(self) -> None:
        self.disconnected = True

    def _scheduled_reset(self) -> None:
        self._resets.pop(0)
        self._reboot()

    def _reboot(self) -> None:
        self.faults.tally.resets += 1
        self._boot()

    def _trip_watchdog(self) -> None:
        """PROTOCOL.md §4: actuators to safe, state 2 and the safe hold, a STATUS and a LOG at level 30; streaming
        goes on."""
        self._drop_deferred()  # nothing the host asked for before the trip may move later
        for act in self.actuators.values():
            act.command(act.info.safe, self._now)
        self._safe = True
        self.held = True
        self._send_status()
        self._send(Log(30, f"watchdog: no host frame for {self.options.watchdog_ms} ms, actuators set to safe"))

    def _status(self) -> None:
        self._next_status_dev += STATUS_PERIOD_NS
        self._send_status()

    def _send_status(self) -> None:
        uptime_s = self._dev_ns(self._now) / _NS
        temp_k = board_temperature(uptime_s, self.options.ambient_c + ZERO_CELSIUS, WARM_UP_RISE, WARM_UP_TIME)
        temp_cc = int(round((float(temp_k) - ZERO_CELSIUS) * 100))
        self._send(Status(SUPPLY_MV, temp_cc, int(uptime_s * 1000) & 0xFFFFFFFF, 0, 0, self.state))

    def _timeout_ns(self) -> float:
        return self.options.watchdog_ms * 1_000_000 if self.options.watchdog_ms > 0 else _NEVER

    # -- commands ---------------------------------------------------------------------------------------------
    def _command(self, msg) -> None:
        if isinstance(msg, Start):
            self._start(msg)
        elif isinstance(msg, Stop):
            self._drop_deferred("start")
            self._plan = None
            self._reply(msg.req, ReplyCode.OK)
        elif isinstance(msg, SetActuator):
            self._set_actuator(msg)
        elif isinstance(msg, Describe):
            self._send(self.description)
            self._reply(msg.req, ReplyCode.OK)
        elif isinstance(msg, AllowMoves):
            self.held = False  # moves nothing: the actuators stay at their safe values until set
            self._reply(msg.req, ReplyCode.OK)
        elif isinstance(msg, Reset):
            self._reply(msg.req, ReplyCode.OK)
            self._reboot()
        elif not isinstance(msg, Heartbeat):
            self._reply(0, ReplyCode.UNKNOWN_COMMAND, f"{type(msg).__name__} is not a host command")

    def _start(self, msg: Start) -> None:
        n = len(self.description.channels)
        channels = mask_to_channels(msg.channel_mask)
        if not channels or channels[-1] >= n:
            self._reply(msg.req, ReplyCode.BAD_ARGUMENT, f"channel mask must name channels 0..{n - 1}")
            return
        top = rate_max_hz(len(channels))
        if not self.description.rate_min_hz <= msg.rate_hz <= top:
            low = self.description.rate_min_hz
            self._reply(msg.req, ReplyCode.OUT_OF_RANGE, f"rate must lie in [{low:g}, {top:g}] Hz")
            return
        if self._defer(msg):
            self._reply(msg.req, ReplyCode.OK)
            return
        self._reply(msg.req, ReplyCode.OK)
        self._begin_stream(msg)

    def _begin_stream(self, msg: Start) -> None:
        """Start the stream of a checked ``START`` now."""
        channels = mask_to_channels(msg.channel_mask)
        encodings = [self._encodings[c] for c in channels]
        self._plan = plan_stream(msg.rate_hz, channels, encodings, msg.scans_per_frame, MAX_FRAME)
        self._layout = make_layout(channels, encodings)
        self.faults.new_stream()
        self._next_scan = 0
        self._first_dev = self._dev_ns(self._now)
        self._next_status_dev = self._first_dev + STATUS_PERIOD_NS
        self._lag_state = None
        self._advance_idle_flow(self._now)

    def _set_actuator(self, msg: SetActuator) -> None:
        act = self.actuators.get(msg.actuator_id)
        if act is None:
            self._reply(msg.req, ReplyCode.BAD_ARGUMENT, f"no actuator {msg.actuator_id}")
            return
        # the limits crossed the wire as f32 (PROTOCOL.md §3), so compare at that precision
        low, high, value = (np.float32(v) for v in (act.info.min, act.info.max, msg.value))
        if not low <= value <= high:
            self._reply(msg.req, ReplyCode.OUT_OF_RANGE, f"{act.info.name} takes [{act.info.min:g}, {act.info.max:g}]")
            return
        if self.held and value != np.float32(act.info.safe):  # PROTOCOL.md §4: a stale move after a trip
            self._reply(msg.req, ReplyCode.BUSY, f"safe hold after a watchdog trip: {act.info.name} stays at "
                                                 f"{act.info.safe:g} {act.info.unit} until ALLOW_MOVES")
            return
        if not self.held:  # a safe value sent in the hold is taken, and the hold goes on
            self._safe = False
        if not self.held and self._defer(msg):  # in the safe hold nothing waits: a safe value acts at once
            self._reply(msg.req, ReplyCode.OK)
            return
        self._drop_deferred(msg.actuator_id)  # acting now: a move still waiting for this actuator is superseded
        self._move(act, msg.value)
        self._reply(msg.req, ReplyCode.OK)

    def _move(self, act, value: float) -> None:
        """Give ``act`` its new setpoint now. While streaming, the stream's lag is stepped on the scan grid
        only (:meth:`_scan_counts`), so when a command arrives between two scans changes nothing but the
        actuator's own start time; while idle, the flow is brought up to now first."""
        if self._plan is None:
            self._advance_idle_flow(self._now)
        act.command(value, self._now)

    # -- sending ----------------------------------------------------------------------------------------------
    def _queue(self, data: bytes) -> None:
        self._out += data

    def _send(self, msg, flags: int = 0) -> None:
        self._queue(encode_message(msg, self._seq, flags))
        self._seq = (self._seq + 1) & 0xFFFFFFFF
        self.faults.passed()

    def _reply(self, req: int, code: ReplyCode, detail: str = "") -> None:
        if self._answering is not None:
            self.command_codes[self._answering] = code
        self._send(Reply(req, code, detail))

    # -- clocks -----------------------------------------------------------------------------------------------
    def _dev_ns(self, true_ns: float) -> float:
        """Board clock [ns since its boot] at a true time."""
        return (true_ns - self._boot_ns) * self._drift

    def _true_ns(self, dev_ns: float) -> float:
        """True time [ns since open] at a board-clock reading."""
        return self._boot_ns + dev_ns / self._drift

    def _scan_dev_ns(self, index):
        return self._first_dev + index * self._plan.period_ns

    # -- streaming --------------------------------------------------------------------------------------------
    def _stream_until(self, t_ns: float) -> None:
        """Send every whole frame whose last scan falls at or before true time ``t_ns``."""
        plan = self._plan
        if plan is None:
            self._advance_idle_flow(int(t_ns))
            return
        dev = self._dev_ns(t_ns)
        due = int((dev - self._first_dev) // plan.period_ns) + 1 - self._next_scan if dev >= self._first_dev else 0
        frames = due // plan.scans_per_frame
        per_block = max(1, MAX_BLOCK_SCANS // plan.scans_per_frame)
        while frames > 0:
            n = min(frames, per_block)
            self._emit_frames(n)
            frames -= n

    def _advance_idle_flow(self, t_ns: int) -> None:
        """Let the stream follow the fan between blocks (exact first-order step toward the current target)."""
        if t_ns <= self._speed_ns:
            return
        target = float(self._target_speed(np.array([t_ns]))[0])
        tau = self.options.fan_tau
        dt = (t_ns - self._speed_ns) * 1e-9
        self._speed = float(first_order_response(self._speed, target, dt, tau)) if tau > 0 else target
        self._speed_ns = t_ns

    def _target_speed(self, t_ns: np.ndarray) -> np.ndarray:
        fan = next((a for a in self.actuators.values() if a.info.kind == ActuatorKind.FAN), None)
        if fan is None:
            return np.full(t_ns.shape, self._max_speed)
        return fan_speed(fan.position_at(t_ns), self._max_speed, fan.info.unit)

    def _angle(self, t_ns: np.ndarray) -> np.ndarray:
        servo = next((a for a in self.actuators.values() if a.info.kind == ActuatorKind.ANGLE), None)
        if servo is None:  # a model set by hand: the simulated hand is whoever sets hand_angle_deg
            return np.full(t_ns.shape, math.radians(self.hand_angle_deg))
        return np.radians(servo.position_at(t_ns))

    def _emit_frames(self, n_frames: int) -> None:
        """Generate ``n_frames`` whole frames of scans in one numpy pass and queue them through the faults.

        The block is cast to the protocol's wire layout once (:func:`taprig.protocol.samples.make_layout`) and
        sliced per frame; each frame is then ``SAMPLES_HEAD ‖ scans`` framed by :func:`encode_frame`, which is
        byte for byte what :func:`encode_message` makes of the same ``Samples`` (a test checks it) without
        converting each frame's columns again.
        """
        plan = self._plan
        spf = plan.scans_per_frame
        n = n_frames * spf
        index = self._next_scan + np.arange(n)
        dev = self._scan_dev_ns(index.astype(float))
        true = self._true_ns(dev)
        wire = to_wire(self._scan_counts(true, dev)[:, list(plan.channels)], self._layout)
        duration_s = spf * plan.period_ns * 1e-9
        for j in range(n_frames):
            first = self._next_scan + j * spf
            t_us = int(self._scan_dev_ns(first) // 1000) & 0xFFFFFFFF
            head = SAMPLES_HEAD.pack(t_us, plan.period_ns, first & 0xFFFFFFFF, spf, 0, plan.mask)
            frame = encode_frame(MsgType.SAMPLES, self._seq, head + wire[j * spf : (j + 1) * spf].tobytes())
            self._seq = (self._seq + 1) & 0xFFFFFFFF
            if self.faults.active:
                frame = self.faults.sample_frame(frame, spf, duration_s)
            if frame is not None:
                self._queue(frame)
        self._next_scan += n
        self._speed_ns = int(true[-1])

    def _scan_counts(self, true: np.ndarray, dev: np.ndarray) -> np.ndarray:
        """Counts of every board channel at the given scan times: physics, tubing, sensor, converter."""
        plant, bank = self.plant, self._bank
        target = self._target_speed(true)
        pole = lag_coefficients(self._plan.period_ns * 1e-9, np.array([self.options.fan_tau]))
        speed, state = first_order_lag(target[:, None], pole, np.array([self._speed]))
        self._speed = float(state[0])
        n_draws = plant.n_taps + plant.n_channels
        if self.options.noise > 0.0:
            draws = self._noise_rng.standard_normal((true.size, n_draws))
        else:
            draws = np.zeros((true.size, n_draws))
        values = channel_values(plant, speed[:, 0], self._angle(true), draws[:, : plant.n_taps] * self.options.noise)
        if self._lag_state is None:
            self._lag_state = values[0].copy()
        lagged, self._lag_state = first_order_lag(
            values, lag_coefficients(self._plan.period_ns * 1e-9, self._tau), self._lag_state
        )
        rise = np.zeros(true.size)
        if self.options.thermal:
            uptime = dev * 1e-9
            rise = board_temperature(uptime, 0.0, WARM_UP_RISE, WARM_UP_TIME)
        return digitise(sensor_reading(lagged, bank, draws[:, plant.n_taps :], rise), bank)

