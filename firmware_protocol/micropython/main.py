"""Entry point of the taprig reference firmware: MicroPython runs main.py after boot."""

import board_config
import hw_machine
from fw_device import Device
from fw_drivers import ConfigError, build_actuators, build_channels


def main():
    """Build the board from board_config and serve the protocol; on any exit, actuators go safe."""
    hw = hw_machine.MachineHardware(board_config)
    device = None
    try:
        if hw.maintenance_requested():
            print("taprig-ref: maintenance requested at boot; firmware not started")
            return
        channels = build_channels(hw, board_config)
        actuators = build_actuators(hw, board_config)
        device = Device(hw, board_config.SETTINGS, channels, actuators)
        device.run()
    except ConfigError as err:
        print("taprig-ref: board_config.py:", err)
    finally:
        if device is not None:
            device.make_safe()
        hw.release()


main()
