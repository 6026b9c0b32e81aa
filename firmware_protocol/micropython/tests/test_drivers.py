"""Channel and actuator drivers on the fake shim, at the level of pins, bytes and duty cycles."""

from types import SimpleNamespace

import pytest

import fw_drivers
from fw_drivers import AnalogRatiometric, AngleServo, Bridge24, ConfigError, FanPwm, I2CBridge14
from hw_fake import FakeBridge14Sensor, FakeHardware


def _bridge24(select="A128"):
    hw = FakeHardware()
    chip = hw.attach_bridge24(14, 15)
    return hw, chip, Bridge24(hw, "load", 14, 15, select)


@pytest.mark.parametrize("value", [0, 1, -1, 0x7FFFFF, -0x800000, 123456, -654321])
def test_bridge24_sign_extends_24_bit_twos_complement(value):
    # 24-bit two's complement: 0x800000 is −2²³, 0xFFFFFF is −1 (common practice)
    hw, chip, channel = _bridge24()
    chip.convert(value)
    assert channel.read() == value
    assert hw.irq_disabled == 0  # interrupts are back on after the bit-banging


@pytest.mark.parametrize("select, pulses", [("A128", 25), ("B32", 26), ("A64", 27)])
def test_bridge24_extra_pulses_select_input_and_gain(select, pulses):
    # 25 pulses: input A gain 128; 26: B gain 32; 27: A gain 64 (the usual two-wire bridge converter; from memory)
    _, chip, channel = _bridge24(select)
    chip.convert(-5)
    channel.read()
    assert chip.last_pulses == pulses


def test_bridge24_holds_the_last_conversion_until_a_new_one_and_faults_when_silent():
    hw, chip, channel = _bridge24()
    chip.convert(4242)
    assert channel.read() == 4242
    hw.advance(12_500)  # between conversions (80 per second) the value repeats
    assert channel.read() == 4242
    chip.convert(-17)
    assert channel.read() == -17
    hw.advance(1_000_001)
    with pytest.raises(OSError, match="no conversion"):
        channel.read()


def test_bridge24_rejects_an_unknown_select():
    hw = FakeHardware()
    hw.attach_bridge24(14, 15)
    with pytest.raises(ConfigError, match="select"):
        Bridge24(hw, "load", 14, 15, "C7")


def _bridge14(status, counts):
    bus = FakeHardware().i2c(0, 4, 5, 400_000)
    bus.devices[0x28] = FakeBridge14Sensor(counts, status)
    return bus, I2CBridge14("p", bus, 0x28)


@pytest.mark.parametrize("counts", [0, 1, 1638, 8192, 14745, 16383])
@pytest.mark.parametrize("status", [0, 2])
def test_i2c_bridge14_masks_the_status_bits(status, counts):
    # 1638 and 14745 are the 10 % and 90 % points of the usual 2¹⁴ transfer function (common practice)
    _, channel = _bridge14(status, counts)
    assert channel.read() == counts


@pytest.mark.parametrize("status", [1, 3])
def test_i2c_bridge14_command_mode_and_fault_raise(status):
    _, channel = _bridge14(status, 8192)
    with pytest.raises(OSError, match="status %d" % status):
        channel.read()


def test_i2c_bridge14_missing_sensor_raises():
    bus, channel = _bridge14(0, 8192)
    bus.devices[0x28].absent = True
    with pytest.raises(OSError):
        channel.read()


def test_analog_channel_averages_its_oversamples():
    hw = FakeHardware()
    channel = AnalogRatiometric(hw, "a", 26, oversample=4)
    readings = iter([1000, 1001, 1002, 1005])
    hw.adc(26).value = lambda _t: next(readings)
    assert channel.read() == (1000 + 1001 + 1002 + 1005) // 4
    assert hw.adc(26).reads == 4


@pytest.mark.parametrize("duty, expected", [(0.0, 0), (0.5, 32768), (1.0, 65535), (0.25, 16384)])
def test_fan_duty_to_u16(duty, expected):
    hw = FakeHardware()
    fan = FanPwm(hw, 1, "fan", 16, freq=25_000)
    fan.apply(duty)
    assert hw.pwms[16].duty == expected
    assert hw.pwms[16].freq == 25_000


def test_fan_inverted_output():
    hw = FakeHardware()
    FanPwm(hw, 1, "fan", 16, invert=True).apply(0.25)
    assert hw.pwms[16].duty == 49151  # (1 − 0.25) × 65535 rounded


@pytest.mark.parametrize("degrees, pulse_us", [(-10.0, 1000.0), (20.0, 2000.0), (5.0, 1500.0), (0.0, 1333.333)])
def test_servo_maps_degrees_onto_one_to_two_milliseconds(degrees, pulse_us):
    # hobby servo: 50 Hz frames, 1.0–2.0 ms pulse over the travel (common practice)
    hw = FakeHardware()
    servo = AngleServo(hw, 2, "alpha", 18, -10.0, 20.0, 0.0)
    assert servo.pulse_us(degrees) == pytest.approx(pulse_us, abs=1e-3)
    servo.apply(degrees)
    assert hw.pwms[18].freq == 50
    assert hw.pwms[18].duty == round(pulse_us / 20_000 * 65535)


def test_actuator_limits_are_f32_and_refuse_nan():
    servo = AngleServo(FakeHardware(), 2, "alpha", 18, -10.1, 20.0, 0.0)
    assert servo.min == pytest.approx(-10.1, rel=1e-7) and servo.min != -10.1  # rounded to binary32
    assert servo.in_range(servo.min) and servo.in_range(20.0)
    assert not servo.in_range(float("nan")) and not servo.in_range(20.001)


def _config(channels=(), actuators=(), buses=None):
    return SimpleNamespace(CHANNELS=list(channels), ACTUATORS=list(actuators), I2C_BUSES=buses or {})


@pytest.mark.parametrize("channels, message", [
    ([{"kind": "analog", "name": "a"}], r"CHANNELS\[0\]: missing key 'pin'"),
    ([{"kind": "thermocouple", "name": "t"}], r"CHANNELS\[0\]: kind must be"),
    ([{"kind": "i2c_bridge14", "name": "p", "bus": 3, "address": 40}], r"I2C bus 3 is not in I2C_BUSES"),
])
def test_channel_config_errors_name_the_entry(channels, message):
    with pytest.raises(ConfigError, match=message):
        fw_drivers.build_channels(FakeHardware(), _config(channels))


@pytest.mark.parametrize("actuators, message", [
    ([{"kind": "fan", "id": 1, "name": "f", "pin": 16}, {"kind": "fan", "id": 1, "name": "g", "pin": 17}],
     r"ACTUATORS\[1\]: id 1 is repeated"),
    ([{"kind": "angle", "id": 2, "name": "a", "pin": 18, "deg_min": 0, "deg_max": 10, "safe": 12}],
     r"safe value 12 outside"),
    ([{"kind": "angle", "id": 2, "name": "a", "pin": 18, "deg_min": 5, "deg_max": 5, "safe": 5}],
     r"deg_max must exceed"),
    ([{"kind": "valve", "id": 3, "name": "v", "pin": 1}], r"kind must be fan or angle"),
])
def test_actuator_config_errors_name_the_entry(actuators, message):
    with pytest.raises(ConfigError, match=message):
        fw_drivers.build_actuators(FakeHardware(), _config(actuators=actuators))


def test_board_config_builds():
    import board_config
    from fw_testkit import Bench

    rig = Bench()
    assert [c.name for c in rig.channels] == [entry["name"] for entry in board_config.CHANNELS]
    assert [a.id for a in rig.actuators] == [1, 2]
