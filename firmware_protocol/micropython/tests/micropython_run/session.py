"""A fixed session on the fake shim that prints the device's whole output as hex.

Run under CPython and under a real MicroPython (see test_micropython_compat.py): the two outputs must be equal.
Uses only what MicroPython has; hw_fake stands in for the board.
"""

import binascii
import struct

import board_config
import fw_codec
import fw_wire
import hw_fake
from fw_device import Device
from fw_drivers import build_actuators, build_channels


def build():
    hw = hw_fake.FakeHardware()
    chip = None
    for entry in board_config.CHANNELS:
        if entry["kind"] == "i2c_bridge14":
            bus = board_config.I2C_BUSES[entry["bus"]]
            sensor = hw_fake.FakeBridge14Sensor(1000 + entry["bus"])
            hw.i2c(entry["bus"], bus["sda"], bus["scl"], bus["freq"]).devices[entry["address"]] = sensor
        elif entry["kind"] == "bridge24":
            chip = hw.attach_bridge24(entry["clock_pin"], entry["data_pin"])
    hw.adc(26).value = lambda t: (t // 1000) % 65536
    device = Device(hw, board_config.SETTINGS, build_channels(hw, board_config), build_actuators(hw, board_config))
    return hw, chip, device


def session():
    hw, chip, device = build()
    device.boot()

    def command(msg_type, body):
        hw.host_send(fw_wire.encode_frame(msg_type, 0, body))
        device.step()

    command(0x83, struct.pack("<HBf", 1, 1, 0.5))
    command(0x81, struct.pack("<HfQH", 2, 200.0, 63, 0))
    command(0x81, struct.pack("<Hf", 3, 1.0))  # too short: MALFORMED
    command(0x99, b"xx")  # UNKNOWN_COMMAND
    for tick in range(2000):
        hw.advance(1000)
        if tick % 200 == 0:
            hw.host_send(b"\x13\x37garbage\x00" + fw_wire.encode_frame(0x84, 0, b"\x00\x00"))
        if tick % 25 == 0:
            chip.convert(-tick * 97)
        device.step()
    command(0x82, struct.pack("<H", 4))
    hw.advance(1500000)  # silence: the watchdog trips
    device.step()
    fan = hw.pwms[board_config.ACTUATORS[0]["pin"]]
    duties = [fan.duty]
    # The race of PROTOCOL.md §4 (1.1): a move the host decided before it froze reaches the board only after the
    # watchdog time, while the board's loop was away: the board trips first, refuses it with BUSY, nothing moves.
    command(0x83, struct.pack("<HBf", 5, 1, 0.5))  # in the hold: BUSY
    command(0x87, struct.pack("<H", 9))  # ALLOW_MOVES
    command(0x83, struct.pack("<HBf", 10, 1, 0.5))
    duties.append(fan.duty)
    hw.advance(1500000)
    hw.host_send(fw_wire.encode_frame(0x83, 0, struct.pack("<HBf", 6, 1, 0.75)))
    device.step()
    duties.append(fan.duty)
    command(0x87, struct.pack("<H", 7))  # ALLOW_MOVES: moves nothing itself
    duties.append(fan.duty)
    command(0x83, struct.pack("<HBf", 8, 1, 0.25))
    duties.append(fan.duty)
    return hw.take_output(), duties


if __name__ == "__main__":  # not on import (pytest's doctest collection imports every module)
    out, duties = session()
    fw_codec._native_crc32 = None  # again with the table-driven CRC
    assert session() == (out, duties)
    print("OUT " + binascii.hexlify(out).decode())
    print("FAN " + " ".join([str(d) for d in duties]))
