"""Test helpers: a device built from board_config.py on the fake hardware shim, driven by a fake clock.

Host-side bytes come from the host package (`taprig.protocol`), written independently of the firmware from the
same PROTOCOL.md, so a test that passes shows the two agree, not that the firmware agrees with itself.
"""

import board_config
import hw_fake
from fw_device import Device
from fw_drivers import build_actuators, build_channels
from taprig.protocol import StreamDecoder, encode_message


class Bench:
    """A device on fake hardware, with the simulated parts wired as board_config.py says.

    ``decoder`` is a host `StreamDecoder` that every byte the device writes goes through (`collect`).
    """

    def __init__(self, start_us=0, settings=None):
        self.hw = hw_fake.FakeHardware(start_us=start_us)
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
        self.settings = dict(board_config.SETTINGS, **(settings or {}))
        self.channels = build_channels(self.hw, board_config)
        self.actuators = build_actuators(self.hw, board_config)
        self.device = Device(self.hw, self.settings, self.channels, self.actuators)
        self.decoder = StreamDecoder()
        self._host_seq = 0
        self.items = []

    def boot(self):
        """Boot the device and decode its first frames."""
        self.device.boot()
        return self.collect()

    def send(self, message):
        """Encode a host message with the host's encoder and put it on the device's input."""
        self.hw.host_send(encode_message(message, self._host_seq))
        self._host_seq += 1

    def command(self, message):
        """Send one host message, run one loop pass, return the decoded device output."""
        self.send(message)
        self.device.step()
        return self.collect()

    def run(self, duration_us, step_us=100, on_step=None):
        """Advance the fake clock in steps, one main-loop pass after each; return the decoded output.

        ``on_step(now_us)``, if given, runs between the clock step and the loop pass (to move simulated sensors).
        """
        end = self.hw.now_us() + duration_us
        while self.hw.now_us() < end:
            self.hw.advance(min(step_us, end - self.hw.now_us()))
            if on_step is not None:
                on_step(self.hw.now_us())
            self.device.step()
        return self.collect()

    def collect(self):
        """Feed all new device output to the host decoder; return (and keep in ``items``) what it delivered."""
        items = self.decoder.feed(self.hw.take_output())
        self.items.extend(items)
        return items


def of_type(items, kind):
    """The items of one dataclass type, in order."""
    return [item for item in items if isinstance(item, kind)]
