"""The reference firmware as a live board without hardware: MicroPython runs it with a real clock, its serial
port carried by the JavaScript host (board.mjs, through the module ``taprig_serial``), and simulated sensors.

Used by run_live.py (see ../README.md, "A live board without hardware"). Everything above the shim is the
firmware as flashed: board_config.py, fw_device, fw_stream, fw_drivers, fw_wire, fw_codec. The sensors are the
parts of hw_fake (ADC counts, I2C bytes, converter pins) fed with pressures of a small invented tunnel whose flow
follows the fan's duty: q = 600 Pa x duty^2.
"""

import binascii
import time

import board_config
import hw_fake
import taprig_serial  # provided by board.mjs
from fw_device import Device
from fw_drivers import build_actuators, build_channels

_LOAD_PERIOD_US = 12500  # the simulated 24-bit converter: 80 conversions a second
_SLICE_US = 20000  # longest run of the firmware's loop before the host's bytes are taken in again


class LiveReboot(Exception):
    """Raised by `LiveHardware.reboot`: the board is built afresh on the same hardware, as after a reset."""


class LiveHardware(hw_fake.FakeHardware):
    """hw_fake's parts and timer, on MicroPython's real clock and the host's serial bytes."""

    def __init__(self):
        hw_fake.FakeHardware.__init__(self, uid="5e7e1b0a4d11ab1e")
        self._last_ticks = time.ticks_us()
        self._elapsed_us = 0

    def now_us(self):
        """Microseconds since start, never wrapping (``ticks_us`` wraps; its steps are summed)."""
        ticks = time.ticks_us()
        self._elapsed_us += time.ticks_diff(ticks, self._last_ticks)
        self._last_ticks = ticks
        return self._elapsed_us

    def catch_up(self):
        """Fire the sampling timer for every period boundary the real clock has passed."""
        now = self.now_us()
        while self._timer is not None and self._timer[0] <= now:
            due, period, callback = self._timer
            self._timer = (due + period, period, callback)
            callback(None)

    def advance(self, duration_us):
        raise RuntimeError("a live board follows the real clock")

    def idle(self):
        pass  # the host's event loop paces the board (board.mjs)

    def read_serial(self, max_bytes):
        text = taprig_serial.read(max_bytes)
        return binascii.unhexlify(text) if text else b""

    def write_serial(self, data):
        taprig_serial.write(binascii.hexlify(bytes(data)).decode())
        return len(data)

    def reboot(self):
        self._timer = None
        raise LiveReboot()


class LiveBoard:
    """board_config's board on `LiveHardware`; `tick` runs the firmware's loop for a slice of real time."""

    def __init__(self):
        self.hw = LiveHardware()
        self.sensors = {}
        for entry in board_config.CHANNELS:
            if entry["kind"] == "i2c_bridge14":
                bus = board_config.I2C_BUSES[entry["bus"]]
                sensor = hw_fake.FakeBridge14Sensor()
                self.hw.i2c(entry["bus"], bus["sda"], bus["scl"], bus["freq"]).devices[entry["address"]] = sensor
                self.sensors[entry["name"]] = sensor
            elif entry["kind"] == "bridge24":
                self.sensors[entry["name"]] = self.hw.attach_bridge24(entry["clock_pin"], entry["data_pin"])
            else:
                self.sensors[entry["name"]] = self.hw.adc(entry["pin"])
        self.boots = 0
        self._next_load_us = self._next_sensors_us = 0
        self._build()

    def _build(self):
        self.actuators = build_actuators(self.hw, board_config)
        self.device = Device(self.hw, board_config.SETTINGS, build_channels(self.hw, board_config), self.actuators)
        self.device.boot()
        self.boots += 1

    def _fan(self):
        for act in board_config.ACTUATORS:
            if act["kind"] == "fan":
                duty = self.hw.pwms[act["pin"]].duty
                return 0.0 if duty is None else duty / 65535
        return 0.0

    def _sensors(self, now_us):
        """The tunnel: q from the fan; three taps at Cp -0.8, -0.3, +0.4 on ratiometric sensors (±1 kPa,
        10-90 % of supply), the pitot and a fourth tap (Cp -0.5) on 14-bit bridges (±1 kPa, 10-90 %), the lift
        on the 24-bit converter (20 N per kPa of q at 2.4 µN a count)."""
        q = 600.0 * self._fan() ** 2
        ripple = 2.0 * ((now_us // 1000) % 7 - 3)  # a few Pa of deterministic unsteadiness
        for name, cp in (("adc0", -0.8), ("adc1", -0.3), ("adc2", 0.4)):
            pa = cp * q + ripple
            self.sensors[name].value = int(65535 * (0.5 + 0.4 * pa / 1000.0))
        for name, pa in (("bridge0", q + ripple), ("bridge1", -0.5 * q + ripple)):
            self.sensors[name].counts = int(16383 * (0.5 + 0.4 * pa / 1000.0))
        if now_us >= self._next_load_us:
            self.sensors["load"].convert(int(q * 0.01 / 4.6e-6))
            self._next_load_us = now_us + _LOAD_PERIOD_US

    def tick(self):
        """Run the firmware's main loop for up to one slice (less when it has nothing to do)."""
        hw = self.hw
        end = hw.now_us() + _SLICE_US
        while True:
            now = hw.now_us()
            if now >= self._next_sensors_us:  # the simulated pressures move once a millisecond
                self._sensors(now)
                self._next_sensors_us = now + 1000
            hw.catch_up()
            try:
                busy = self.device.step()
            except LiveReboot:
                self._build()
                busy = True
            if now >= end or not (busy or self.device.streamer.streaming):
                return
