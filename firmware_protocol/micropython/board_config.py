"""Board configuration of the reference firmware: every pin, channel and actuator in one place.

Written for a Raspberry Pi Pico (RP2040) running MicroPython; README.md has the wiring table. Channel index =
position in CHANNELS (that is the index the host's rig file refers to). Pins are GPIO numbers.
"""

# Protocol limits sent in DESCRIPTION (PROTOCOL.md §3).
SETTINGS = {
    "rate_min_hz": 1.0,
    "rate_max_hz": 500.0,  # all six channels; the I2C reads and the load-cell bit-banging set this limit
    "max_frame": 2048,
    "heartbeat_timeout_ms": 1000,
}

TIMER_ID = -1  # rp2 has only the virtual timer; use 0 on an ESP32
SUPPLY_ADC_PIN = 29  # Pico: VSYS/3 on GPIO29 (set None on a Pico W, where that pin serves the radio)
SUPPLY_DIVIDER = 3
MAINTENANCE_PIN = 22  # held to GND at boot or while running: the firmware stops and leaves the REPL free

I2C_BUSES = {
    0: {"sda": 4, "scl": 5, "freq": 400000},
    1: {"sda": 2, "scl": 3, "freq": 400000},  # second bus: two sensors of the same fixed address
}

CHANNELS = [
    {"kind": "analog", "name": "adc0", "pin": 26, "oversample": 4},
    {"kind": "analog", "name": "adc1", "pin": 27, "oversample": 4},
    {"kind": "analog", "name": "adc2", "pin": 28, "oversample": 4},
    {"kind": "i2c_bridge14", "name": "bridge0", "bus": 0, "address": 0x28},
    {"kind": "i2c_bridge14", "name": "bridge1", "bus": 1, "address": 0x28},
    {"kind": "bridge24", "name": "load", "clock_pin": 14, "data_pin": 15, "select": "A128"},
]

ACTUATORS = [
    {"kind": "fan", "id": 1, "name": "fan", "pin": 16, "freq": 25000, "safe": 0.0},
    {"kind": "angle", "id": 2, "name": "alpha", "pin": 18, "deg_min": -10.0, "deg_max": 20.0, "safe": 0.0,
     "pulse_min_us": 1000, "pulse_max_us": 2000},
]
