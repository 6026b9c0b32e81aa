"""The reference firmware's device: command handling, watchdog, STATUS and LOG, around the `Streamer`.

`Device.step` is one pass of the main loop (read the port, serve the sampler, check the watchdog, housekeeping);
`Device.run` repeats it until a maintenance request. All hardware goes through the shim ``hw``, so the whole
device runs under CPython against `hw_fake` with a fake clock.
"""

from fw_stream import Streamer
from fw_wire import (
    ALLOW_MOVES,
    BAD_ARGUMENT,
    BUSY,
    COMMAND_LAYOUT,
    DESCRIBE,
    DESCRIPTION,
    FLAG_BOOT,
    FrameReader,
    HARDWARE_FAULT,
    LOG,
    LOG_ERROR,
    LOG_INFO,
    LOG_WARNING,
    MALFORMED,
    OK,
    OUT_OF_RANGE,
    REPLY,
    RESET,
    SET_ACTUATOR,
    START,
    STATE_IDLE,
    STATE_SAFE,
    STATE_STREAMING,
    STATUS,
    STOP,
    UNKNOWN_COMMAND,
    description_body,
    encode_frame,
    f32,
    log_body,
    parse_command,
    reply_body,
    status_body,
)

FIRMWARE = "taprig-ref 0.1.0"
_HOUSEKEEPING_US = 1000000  # STATUS "about once a second" while streaming, error summaries at the same pace
_READ_CHUNK = 256


class Device:
    """One board speaking protocol 1.1.

    ``settings`` is a dict with ``rate_min_hz``, ``rate_max_hz``, ``max_frame`` and ``heartbeat_timeout_ms``;
    ``channels`` and ``actuators`` are driver objects (see fw_drivers). The device powers up safe: every actuator
    at its safe value, state 2, until the host's first accepted SET_ACTUATOR.

    A watchdog trip also starts the *safe hold* (PROTOCOL.md §4, 1.1): ``held`` is True and a SET_ACTUATOR to
    anything but the actuator's safe value is refused with BUSY, moving nothing, until ALLOW_MOVES. So a move the
    host decided before it froze, arriving after the trip, cannot take the rig out of its safe state.

    Well-formed frames of the device → host types (0x01–0x7F) that arrive are skipped, counted and reported in a
    LOG: they are an echo, not the host, so they get no reply and do not feed the watchdog. Every other unknown
    type gets UNKNOWN_COMMAND.
    """

    def __init__(self, hw, settings, channels, actuators):
        self._hw = hw
        self._channels = channels
        self._actuators = actuators
        self._info = {
            "firmware": FIRMWARE,
            "uid": hw.uid(),
            "rate_min_hz": f32(settings["rate_min_hz"]),
            "rate_max_hz": f32(settings["rate_max_hz"]),
            "max_frame": settings["max_frame"],
            "heartbeat_timeout_ms": settings["heartbeat_timeout_ms"],
        }
        self._timeout_us = settings["heartbeat_timeout_ms"] * 1000
        self._reader = FrameReader(settings["max_frame"])
        self._streamer = Streamer(hw, channels, settings["max_frame"], self._send)
        self._seq = 0
        self._boot_pending = True
        self.running = True
        self.held = False
        self.make_safe()
        now = hw.now_us()
        self._last_host_us = now
        self._next_housekeeping_us = now + _HOUSEKEEPING_US
        self._reported_read_errors = [0] * len(channels)
        self._reported_host_errors = 0
        self._foreign_frames = 0
        self._reported_foreign_frames = 0

    # ----------------------------------------------------------------- state

    @property
    def state(self):
        """The state reported in STATUS: safe overrides streaming (PROTOCOL.md §4 keeps streaming when safe)."""
        if self.safe:
            return STATE_SAFE
        return STATE_STREAMING if self._streamer.streaming else STATE_IDLE

    @property
    def streamer(self):
        """The sampler, for its counters."""
        return self._streamer

    @property
    def reader(self):
        """The host-frame reader, for its error counters."""
        return self._reader

    def make_safe(self):
        """Every actuator to its safe value; state 2. Also the last thing main.py does on any exit."""
        for act in self._actuators:
            act.apply(act.safe)
        self.safe = True

    # ----------------------------------------------------------------- loop

    def boot(self):
        """Flush a receiver's partial frame, then the DESCRIPTION that carries the BOOT flag with seq 0."""
        self._hw.write_serial(b"\x00")
        self._send(DESCRIPTION, description_body(self._info, self._channels, self._actuators))

    def run(self):
        """Boot, then serve the main loop until a maintenance request (see hw_machine) ends it."""
        self.boot()
        while self.running:
            # Idle only between streams: while streaming, the loop polls so each scan is read right at its boundary.
            if not self.step() and not self._streamer.streaming:
                self._hw.idle()

    def step(self):
        """One pass of the main loop; returns True when it did any work."""
        busy = False
        # The watchdog looks before the port is read: a host frame that waited in the port while the loop was away
        # past the deadline must find the board already safe and held (PROTOCOL.md §4), not stop the watchdog.
        self._check_watchdog()
        data = self._hw.read_serial(_READ_CHUNK)
        if data:
            busy = True
            for frame in self._reader.feed(data):
                if 0x01 <= frame[0] <= 0x7F:
                    # A device → host type coming in is our own output echoed (or a second device), not a host:
                    # answering would ping-pong on an echoing port, and feeding the watchdog would hide a dead host.
                    self._foreign_frames += 1
                    continue
                self._last_host_us = self._hw.now_us()
                self._handle(frame)
        self._streamer.service()
        self._check_watchdog()
        now = self._hw.now_us()
        if now >= self._next_housekeeping_us:
            self._next_housekeeping_us = now + _HOUSEKEEPING_US
            self._housekeeping()
        return busy

    # ----------------------------------------------------------------- output

    def _send(self, msg_type, body):
        flags = 0
        if self._boot_pending:
            flags = FLAG_BOOT
            self._boot_pending = False
        frame = encode_frame(msg_type, self._seq, body, flags)
        self._seq = (self._seq + 1) & 0xFFFFFFFF
        if self._hw.write_serial(frame) == len(frame):
            return True
        # A frame cut short: end it with a delimiter so the receiver loses only this one, not the next as well.
        self._hw.write_serial(b"\x00")
        return False

    def _reply(self, req, code, detail=""):
        self._send(REPLY, reply_body(req, code, detail))

    def _log(self, level, text):
        self._send(LOG, log_body(level, text))

    def send_status(self):
        """Send one STATUS frame now."""
        hw = self._hw
        streamer = self._streamer
        self._send(STATUS, status_body(hw.supply_mv(), hw.board_temp_cc(), hw.now_us() // 1000,
                                       streamer.overruns, streamer.dropped_scans, self.state))

    def _check_watchdog(self):
        if not self.safe and self._hw.now_us() - self._last_host_us >= self._timeout_us:
            self._trip_watchdog()

    def _trip_watchdog(self):
        self.make_safe()
        self.held = True
        self.send_status()
        self._log(LOG_WARNING, "no host frame for %d ms: actuators at safe values" % (self._timeout_us // 1000))

    def _housekeeping(self):
        if self._streamer.streaming:
            self.send_status()
        errors = self._streamer.read_errors
        for index in range(len(errors)):
            new = errors[index] - self._reported_read_errors[index]
            if new:
                self._reported_read_errors[index] = errors[index]
                self._log(LOG_ERROR, "channel %d '%s': %d failed reads (%s); last good value repeated"
                          % (index, self._channels[index].name, new, self._streamer.last_error[index]))
        host_errors = self._reader.errors()
        if host_errors != self._reported_host_errors:
            self._log(LOG_WARNING, "skipped %d bad host frames" % (host_errors - self._reported_host_errors))
            self._reported_host_errors = host_errors
        if self._foreign_frames != self._reported_foreign_frames:
            self._log(LOG_WARNING, "ignored %d device-to-host frames (is the port echoing?)"
                      % (self._foreign_frames - self._reported_foreign_frames))
            self._reported_foreign_frames = self._foreign_frames
        if self._hw.maintenance_requested():
            self.running = False

    # ----------------------------------------------------------------- commands

    def _handle(self, frame):
        msg_type, _flags, _seq, body = frame
        status, req, fields = parse_command(msg_type, body)
        if status == UNKNOWN_COMMAND:
            self._reply(0, UNKNOWN_COMMAND, "unknown command type 0x%02x" % msg_type)
        elif status == MALFORMED:
            layout = COMMAND_LAYOUT[msg_type]
            self._reply(req, MALFORMED, "%s body needs %d bytes, got %d" % (layout[2], layout[1], len(body)))
        elif msg_type == START:
            self._start(req, fields[1], fields[2], fields[3])
        elif msg_type == STOP:
            self._streamer.stop()
            self._reply(req, OK)
        elif msg_type == SET_ACTUATOR:
            self._set_actuator(req, fields[1], fields[2])
        elif msg_type == DESCRIBE:
            self._send(DESCRIPTION, description_body(self._info, self._channels, self._actuators))
            self._reply(req, OK)
        elif msg_type == ALLOW_MOVES:
            self.held = False  # moves nothing: the actuators stay at their safe values until set
            self._reply(req, OK)
        elif msg_type == RESET:
            self._streamer.stop()
            self.make_safe()
            self._reply(req, OK)
            self._hw.reboot()
        # HEARTBEAT: only feeds the watchdog, which every well-formed frame already did; no reply.

    def _start(self, req, rate_hz, mask, scans_per_frame):
        info = self._info
        code, detail, spf = self._streamer.check(rate_hz, mask, scans_per_frame, info["rate_min_hz"],
                                                 info["rate_max_hz"])
        if code == OK:
            code, detail = self._streamer.probe(mask)
        if code != OK:
            self._reply(req, code, detail)
            return
        self._streamer.start(rate_hz, mask, spf)
        self._next_housekeeping_us = self._hw.now_us() + _HOUSEKEEPING_US
        self._reply(req, OK)
        self._log(LOG_INFO, self._streamer.describe_stream())

    def _set_actuator(self, req, act_id, value):
        for act in self._actuators:
            if act.id == act_id:
                break
        else:
            self._reply(req, BAD_ARGUMENT, "no actuator with id %d" % act_id)
            return
        if not act.in_range(value):
            self._reply(req, OUT_OF_RANGE, "%s: %s %s outside [%s, %s]" % (act.name, value, act.unit, act.min, act.max))
            return
        moves = value != f32(act.safe)  # the value crossed the wire as f32, and so did safe in DESCRIPTION
        if self.held and moves:
            self._reply(req, BUSY, "safe hold after a watchdog trip: %s stays at %s %s until ALLOW_MOVES"
                        % (act.name, f32(act.safe), act.unit))
            return
        try:
            act.apply(value)
        except OSError as err:
            self._reply(req, HARDWARE_FAULT, "%s: %s" % (act.name, err))
            return
        if not self.held:  # a safe value sent in the hold is taken, and the hold goes on
            self.safe = False
        self._reply(req, OK)

