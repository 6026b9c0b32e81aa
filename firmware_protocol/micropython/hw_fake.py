"""Hardware shim for CPython: a fake clock, a fake serial port and simulated parts, for the firmware's tests.

Same interface as `hw_machine.MachineHardware`. Time moves only when the test calls `FakeHardware.advance`,
which fires the sampling timer at each period boundary it crosses, so every test is independent of wall-clock
time. The simulated parts work at the level the drivers see: ADC counts, I2C bytes, clock and data pin levels.
"""


class FakeReboot(Exception):
    """Raised by `FakeHardware.reboot`: the test builds a new device on the same hardware, as a reboot would."""


class FakeAdc:
    """An ADC input whose ``read_u16`` returns ``value`` (an int, or a function of the fake time in µs)."""

    def __init__(self, hw, value=32768):
        self._hw = hw
        self.value = value
        self.reads = 0

    def read_u16(self):
        self.reads += 1
        value = self.value(self._hw.now_us()) if callable(self.value) else self.value
        return max(0, min(65535, int(value)))


class FakePwm:
    """A PWM output that remembers its frequency and every duty written."""

    def __init__(self, freq):
        self.freq = freq
        self.duties = []

    def duty_u16(self, value):
        if not 0 <= value <= 65535:
            raise ValueError("duty_u16 %r outside 0-65535" % value)
        self.duties.append(value)

    @property
    def duty(self):
        """Last duty written, 0-65535 (None before the first)."""
        return self.duties[-1] if self.duties else None


class FakeBridge14Sensor:
    """The I2C side of a 14-bit digital bridge sensor: a 2-byte read gives status bits and counts."""

    def __init__(self, counts=8192, status=0):
        self.counts = counts
        self.status = status
        self.absent = False

    def read(self, n_bytes):
        if self.absent:
            raise OSError(19)  # ENODEV: no acknowledge, as MicroPython's I2C raises
        first = (self.status << 6) | ((self.counts >> 8) & 0x3F)
        return bytes((first, self.counts & 0xFF))[:n_bytes]


class FakeI2CBus:
    """An I2C bus with simulated devices by address."""

    def __init__(self, sda, scl, freq):
        self.pins = (sda, scl)
        self.freq = freq
        self.devices = {}

    def readfrom(self, address, n_bytes):
        device = self.devices.get(address)
        if device is None:
            raise OSError(19)
        return device.read(n_bytes)


class FakeBridge24Chip:
    """The pin-level behaviour of a 24-bit two-wire bridge converter.

    Data is low while a conversion waits. Each rising clock edge presents the next bit, MSB first; after the 24th
    the data line goes high, and the total number of pulses of that read is kept in ``last_pulses`` (the gain
    selection). `convert` loads the next conversion (a signed value, stored as 24-bit two's complement).
    """

    def __init__(self):
        self._word = 0
        self._ready = False
        self._pulses = 0
        self._level = 1
        self.last_pulses = 0
        self.clock_level = 0

    def convert(self, value):
        if not -(1 << 23) <= value < (1 << 23):
            raise ValueError("24-bit converter value %r out of range" % value)
        self._word = value & 0xFFFFFF
        self._pulses = 0
        self._ready = True
        self._level = 0

    def clock(self, level):
        if level and not self.clock_level:
            self._pulses += 1
            if self._ready and self._pulses <= 24:
                self._level = (self._word >> (24 - self._pulses)) & 1
                if self._pulses == 24:
                    self._ready = False
            else:
                self._level = 1
        self.clock_level = level
        if self._pulses >= 24:
            self.last_pulses = self._pulses

    def data(self):
        return self._level


class _ChipClockPin:
    def __init__(self, chip):
        self._chip = chip

    def value(self, level=None):
        if level is None:
            return self._chip.clock_level
        self._chip.clock(1 if level else 0)
        return None


class _ChipDataPin:
    def __init__(self, chip):
        self._chip = chip

    def value(self):
        return self._chip.data()


class FakeHardware:
    """The whole fake board: clock, timer, serial port and the simulated parts that tests attach."""

    def __init__(self, start_us=0, uid="e6614103e7452d2f"):
        self._now_us = start_us
        self._uid = uid
        self._timer = None
        self.rx = bytearray()
        self.tx = bytearray()
        self.tx_limit = None  # bytes a write may take; None = all
        self.adcs = {}
        self.pwms = {}
        self.i2c_buses = {}
        self.bridge24 = {}
        self.irq_disabled = 0
        self.supply = 5012
        self.temperature_cc = 2350
        self.maintenance = False
        self.timer_starts = []
        self.drop_callbacks = 0  # timer callbacks to lose

    # clock and timer ------------------------------------------------------------------------------

    def now_us(self):
        return self._now_us

    def advance(self, duration_us):
        """Move the fake clock forward, firing the sampling timer at every period boundary on the way."""
        target = self._now_us + duration_us
        while self._timer is not None and self._timer[0] <= target:
            due, period, callback = self._timer
            self._now_us = due
            self._timer = (due + period, period, callback)
            if self.drop_callbacks:
                self.drop_callbacks -= 1  # as when the scheduler's queue is full
            else:
                callback(None)
        self._now_us = target

    def start_timer(self, period_us, callback):
        self.timer_starts.append(period_us)
        self._timer = (self._now_us + period_us, period_us, callback)

    def stop_timer(self):
        self._timer = None

    @property
    def timer_running(self):
        return self._timer is not None

    def idle(self):
        self.advance(1000)  # the real shim rests 1 ms

    # serial ---------------------------------------------------------------------------------------

    def host_send(self, data):
        """Bytes from the host to the device's input."""
        self.rx.extend(data)

    def take_output(self):
        """Everything the device wrote since the last call."""
        out = bytes(self.tx)
        self.tx = bytearray()
        return out

    def read_serial(self, max_bytes):
        chunk = bytes(self.rx[:max_bytes])
        self.rx = self.rx[max_bytes:]
        return chunk

    def write_serial(self, data):
        data = bytes(data)
        if self.tx_limit is not None:
            data = data[: self.tx_limit]
        self.tx.extend(data)
        return len(data)

    # parts ----------------------------------------------------------------------------------------

    def adc(self, pin):
        return self.adcs.setdefault(pin, FakeAdc(self))

    def i2c(self, bus_id, sda, scl, freq):
        return self.i2c_buses.setdefault(bus_id, FakeI2CBus(sda, scl, freq))

    def attach_bridge24(self, clock_pin, data_pin):
        """Wire a simulated 24-bit converter to two pins; returns the chip."""
        chip = FakeBridge24Chip()
        self.bridge24[clock_pin] = chip
        self.bridge24[data_pin] = chip
        return chip

    def pin_out(self, pin):
        if pin not in self.bridge24:
            raise ValueError("fake board: nothing wired to output pin %r" % pin)
        return _ChipClockPin(self.bridge24[pin])

    def pin_in(self, pin):
        if pin not in self.bridge24:
            raise ValueError("fake board: nothing wired to input pin %r" % pin)
        return _ChipDataPin(self.bridge24[pin])

    def pwm(self, pin, freq):
        self.pwms[pin] = FakePwm(freq)
        return self.pwms[pin]

    def disable_irq(self):
        self.irq_disabled += 1
        return self.irq_disabled

    def enable_irq(self, state):
        if state != self.irq_disabled:
            raise RuntimeError("interrupts re-enabled out of order")
        self.irq_disabled -= 1

    # board ----------------------------------------------------------------------------------------

    def uid(self):
        return self._uid

    def supply_mv(self):
        return self.supply

    def board_temp_cc(self):
        return self.temperature_cc

    def maintenance_requested(self):
        return self.maintenance

    def reboot(self):
        self._timer = None
        raise FakeReboot()
