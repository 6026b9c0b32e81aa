"""Channel and actuator drivers of the reference firmware, built from the board configuration.

Every driver reaches hardware only through the shim object ``hw`` (`hw_machine` on a board, `hw_fake` in the
tests). A channel has ``name``, ``encoding`` (a PROTOCOL.md code) and ``read()`` returning one value in that
encoding, raising ``OSError`` when the sensor cannot give one. An actuator has ``id``, ``kind``, ``min``, ``max``,
``safe``, ``unit``, ``name``, ``value`` and ``apply(value)``.

The firmware sends native counts; converting them to pascals or newtons is the host's job (its rig file holds each
sensor's transfer function), so nothing here knows a full-scale range.
"""

from fw_wire import ENC_I32, ENC_U16, KIND_ANGLE, KIND_FAN, f32

# Extra clock pulses after the 24 data bits select the next conversion's input and gain.
BRIDGE24_SELECT_PULSES = {"A128": 25, "B32": 26, "A64": 27}
_BRIDGE24_STALE_US = 1000000  # no conversion for this long means the converter is absent or stuck


class ConfigError(ValueError):
    """A board configuration entry is missing a key or has a bad value; the message names the entry."""


def _need(entry, key, where):
    if key not in entry:
        raise ConfigError("%s: missing key '%s'" % (where, key))
    return entry[key]


class AnalogRatiometric:
    """A ratiometric analog sensor on an ADC pin: output ∝ supply × (transfer function of pressure).

    Powered from the same rail as the ADC reference, the counts are the output/supply ratio × 65535 whatever
    that rail's exact voltage (common practice). ``oversample`` readings are averaged to cut ADC noise.
    """

    encoding = ENC_U16

    def __init__(self, hw, name, pin, oversample=1):
        self.name = name
        self._adc = hw.adc(pin)
        self._oversample = max(1, int(oversample))

    def read(self):
        """One value: mean of ``oversample`` ``read_u16`` results, 0–65535."""
        adc = self._adc
        total = 0
        for _ in range(self._oversample):
            total += adc.read_u16()
        return total // self._oversample


class I2CBridge14:
    """A digital bridge pressure sensor on I2C giving 14-bit counts.

    A 2-byte read returns ``S1 S0 C13..C8 | C7..C0``: two status bits, then the counts. The usual transfer
    function is p = p_min + (counts − 0.1·2¹⁴)·(p_max − p_min)/(0.8·2¹⁴), applied on the host. Status 0 is a
    fresh reading, 2 a reading already fetched (still valid, the sensor converts slower than we may scan); 1
    (command mode) and 3 (diagnostic fault) carry no valid counts and raise ``OSError``.
    """

    encoding = ENC_U16

    def __init__(self, name, bus, address):
        self.name = name
        self._bus = bus
        self._address = address

    def read(self):
        """Counts 0–16383 from one 2-byte read."""
        raw = self._bus.readfrom(self._address, 2)
        status = raw[0] >> 6
        if status == 1 or status == 3:
            raise OSError("bridge sensor at 0x%02x reports status %d" % (self._address, status))
        return ((raw[0] & 0x3F) << 8) | raw[1]


class Bridge24:
    """A 24-bit two-wire bridge converter for a load cell (clock out, data in, bit-banged).

    Data low means a conversion is ready. 24 clock pulses shift it out MSB first as two's complement; 1–3 extra
    pulses pick the next conversion's input (25: input A gain 128, 26: B gain 32, 27: A gain 64). The converter
    runs at its own 10 or 80 conversions/s, so between conversions ``read`` repeats the last value; interrupts are
    held off while clocking because a clock held high for ~60 µs powers the converter down.
    """

    encoding = ENC_I32

    def __init__(self, hw, name, clock_pin, data_pin, select="A128"):
        if select not in BRIDGE24_SELECT_PULSES:
            raise ConfigError("channel '%s': select must be one of A128, B32, A64, not %r" % (name, select))
        self.name = name
        self._hw = hw
        self._clock = hw.pin_out(clock_pin)
        self._data = hw.pin_in(data_pin)
        self._pulses = BRIDGE24_SELECT_PULSES[select]
        self._clock.value(0)
        self._value = 0
        self._last_conversion_us = hw.now_us()

    def read(self):
        """Latest conversion as a sign-extended i32; raises ``OSError`` if none came for a second."""
        if self._data.value():
            if self._hw.now_us() - self._last_conversion_us > _BRIDGE24_STALE_US:
                raise OSError("load-cell converter '%s' gave no conversion for 1 s" % self.name)
            return self._value
        raw = self._shift_in()
        if raw & 0x800000:
            raw -= 0x1000000
        self._value = raw
        self._last_conversion_us = self._hw.now_us()
        return raw

    def _shift_in(self):
        clock = self._clock
        data = self._data
        raw = 0
        state = self._hw.disable_irq()
        try:
            for _ in range(24):
                clock.value(1)
                clock.value(0)
                raw = (raw << 1) | data.value()
            for _ in range(self._pulses - 24):
                clock.value(1)
                clock.value(0)
        finally:
            self._hw.enable_irq(state)
        return raw


class _Actuator:
    """Common part of the outputs: limits as f32 (so the check matches what DESCRIPTION told the host)."""

    def __init__(self, act_id, kind, name, unit, low, high, safe):
        if not low <= safe <= high:
            raise ConfigError("actuator '%s': safe value %r outside [%r, %r]" % (name, safe, low, high))
        self.id = act_id
        self.kind = kind
        self.name = name
        self.unit = unit
        self.min = f32(low)
        self.max = f32(high)
        self.safe = f32(safe)
        self.value = None

    def in_range(self, value):
        """True when ``value`` lies in [min, max] (NaN does not)."""
        return self.min <= value <= self.max


class FanPwm(_Actuator):
    """A fan or blower speed controller driven by PWM: value is the duty, 0–1."""

    def __init__(self, hw, act_id, name, pin, freq=25000, safe=0.0, invert=False):
        super().__init__(act_id, KIND_FAN, name, "duty", 0.0, 1.0, safe)
        self._pwm = hw.pwm(pin, freq)
        self._invert = invert

    def apply(self, value):
        """Set the duty (already range-checked) on the pin."""
        duty = 1.0 - value if self._invert else value
        self._pwm.duty_u16(int(duty * 65535 + 0.5))
        self.value = value


class AngleServo(_Actuator):
    """A hobby servo setting the angle of attack: 50 Hz frames, a 1.0–2.0 ms pulse spans [deg_min, deg_max]."""

    def __init__(self, hw, act_id, name, pin, deg_min, deg_max, safe, pulse_min_us=1000, pulse_max_us=2000):
        if not deg_max > deg_min:
            raise ConfigError("actuator '%s': deg_max must exceed deg_min" % name)
        super().__init__(act_id, KIND_ANGLE, name, "deg", deg_min, deg_max, safe)
        self._freq = 50
        self._pwm = hw.pwm(pin, self._freq)
        self._pulse_min_us = pulse_min_us
        self._pulse_span_us = pulse_max_us - pulse_min_us

    def pulse_us(self, degrees):
        """Pulse width [µs] for an angle [deg], linear over the configured range."""
        fraction = (degrees - self.min) / (self.max - self.min)
        return self._pulse_min_us + fraction * self._pulse_span_us

    def apply(self, value):
        """Move the servo to ``value`` degrees (already range-checked)."""
        period_us = 1000000 / self._freq
        self._pwm.duty_u16(int(self.pulse_us(value) / period_us * 65535 + 0.5))
        self.value = value


def build_channels(hw, config):
    """Channel drivers from ``config.CHANNELS`` (list of dicts, see board_config.py), in channel-index order."""
    buses = {}
    channels = []
    for index, entry in enumerate(config.CHANNELS):
        where = "CHANNELS[%d]" % index
        kind = _need(entry, "kind", where)
        name = _need(entry, "name", where)
        if kind == "analog":
            channels.append(AnalogRatiometric(hw, name, _need(entry, "pin", where), entry.get("oversample", 1)))
        elif kind == "i2c_bridge14":
            bus_id = _need(entry, "bus", where)
            if bus_id not in buses:
                bus_cfg = config.I2C_BUSES.get(bus_id)
                if bus_cfg is None:
                    raise ConfigError("%s: I2C bus %r is not in I2C_BUSES" % (where, bus_id))
                buses[bus_id] = hw.i2c(bus_id, bus_cfg["sda"], bus_cfg["scl"], bus_cfg.get("freq", 400000))
            channels.append(I2CBridge14(name, buses[bus_id], _need(entry, "address", where)))
        elif kind == "bridge24":
            clock = _need(entry, "clock_pin", where)
            data = _need(entry, "data_pin", where)
            channels.append(Bridge24(hw, name, clock, data, entry.get("select", "A128")))
        else:
            raise ConfigError("%s: kind must be analog, i2c_bridge14 or bridge24, not %r" % (where, kind))
    if len(channels) > 64:
        raise ConfigError("CHANNELS: at most 64 channels, got %d" % len(channels))
    return channels


def build_actuators(hw, config):
    """Actuator drivers from ``config.ACTUATORS`` (list of dicts); ids must be distinct."""
    actuators = []
    seen = set()
    for index, entry in enumerate(config.ACTUATORS):
        where = "ACTUATORS[%d]" % index
        kind = _need(entry, "kind", where)
        act_id = _need(entry, "id", where)
        name = _need(entry, "name", where)
        if act_id in seen or not 0 <= act_id <= 255:
            raise ConfigError("%s: id %r is repeated or not 0-255" % (where, act_id))
        seen.add(act_id)
        pin = _need(entry, "pin", where)
        if kind == "fan":
            act = FanPwm(hw, act_id, name, pin, entry.get("freq", 25000), entry.get("safe", 0.0),
                         entry.get("invert", False))
        elif kind == "angle":
            act = AngleServo(hw, act_id, name, pin, _need(entry, "deg_min", where), _need(entry, "deg_max", where),
                             _need(entry, "safe", where), entry.get("pulse_min_us", 1000),
                             entry.get("pulse_max_us", 2000))
        else:
            raise ConfigError("%s: kind must be fan or angle, not %r" % (where, kind))
        actuators.append(act)
    if len(actuators) > 16:
        raise ConfigError("ACTUATORS: at most 16 actuators, got %d" % len(actuators))
    return actuators

