"""Hardware shim for a real MicroPython board (written for the RP2040 / Raspberry Pi Pico, portable to ESP32).

The only firmware module that imports ``machine``: everything the protocol and sampling code needs from the
board (clock, serial port, timer, pins, ADC, I2C, PWM, interrupts) is a method here, and `hw_fake` offers the
same methods under CPython. Port differences (timer ids, ADC attenuation, temperature sensor) stay in this file.
"""

import sys
import time

import binascii
import machine
import micropython

try:
    import select
except ImportError:  # older ports name it uselect
    import uselect as select

_RP2_TEMP_ADC = 4  # RP2040 internal temperature sensor channel


class MachineHardware:
    """The board behind the shim interface; ``config`` is the board_config module."""

    def __init__(self, config):
        self._config = config
        self._stdin = sys.stdin.buffer
        self._stdout = sys.stdout.buffer
        self._poll = select.poll()
        self._poll.register(sys.stdin, select.POLLIN)
        # Binary frames carry 0x03 bytes; the REPL would turn them into KeyboardInterrupt. Undone by release().
        micropython.kbd_intr(-1)
        self._last_ticks = time.ticks_us()
        self._elapsed_us = self._last_ticks
        self._timer = None
        self._pwm_slices = {}
        self._supply_adc = None
        if getattr(config, "SUPPLY_ADC_PIN", None) is not None:
            self._supply_adc = machine.ADC(machine.Pin(config.SUPPLY_ADC_PIN))
        self._temp_adc = machine.ADC(_RP2_TEMP_ADC) if sys.platform == "rp2" else None
        self._maintenance_pin = None
        if getattr(config, "MAINTENANCE_PIN", None) is not None:
            self._maintenance_pin = machine.Pin(config.MAINTENANCE_PIN, machine.Pin.IN, machine.Pin.PULL_UP)

    def release(self):
        """Give the port back to the REPL: timer off, Ctrl-C works again."""
        self.stop_timer()
        self._poll.unregister(sys.stdin)
        micropython.kbd_intr(3)

    # clock and timer ------------------------------------------------------------------------------

    def now_us(self):
        """Microseconds since boot, never wrapping: ``ticks_us`` wraps (2³⁰ µs on rp2), so its steps are summed.

        Called by the main loop far more often than half a wrap period, which ``ticks_diff`` needs.
        """
        ticks = time.ticks_us()
        self._elapsed_us += time.ticks_diff(ticks, self._last_ticks)
        self._last_ticks = ticks
        return self._elapsed_us

    def start_timer(self, period_us, callback):
        """Call ``callback`` every ``period_us`` µs (rp2 soft timer, scheduled between bytecodes)."""
        self.stop_timer()
        self._timer = machine.Timer(getattr(self._config, "TIMER_ID", -1))
        try:
            self._timer.init(mode=machine.Timer.PERIODIC, period=period_us, tick_hz=1000000, callback=callback)
        except TypeError:  # ports without tick_hz take a frequency
            self._timer.init(mode=machine.Timer.PERIODIC, freq=1000000 / period_us, callback=callback)

    def stop_timer(self):
        """Stop the sampling timer, if running."""
        if self._timer is not None:
            self._timer.deinit()
            self._timer = None

    def idle(self):
        """Rest 1 ms when the loop has nothing to do: bounded, so the watchdog is checked at least every ms
        (``machine.idle`` waits for an interrupt, and with no stream and a silent port none may come)."""
        time.sleep_ms(1)

    # serial ---------------------------------------------------------------------------------------

    def read_serial(self, max_bytes):
        """Up to ``max_bytes`` already received on USB serial, without blocking (b"" when none)."""
        chunk = bytearray()
        while len(chunk) < max_bytes and self._poll.poll(0):
            chunk.extend(self._stdin.read(1))
        return bytes(chunk)

    def write_serial(self, data):
        """Write a frame to USB serial; returns the bytes taken."""
        written = self._stdout.write(data)
        return len(data) if written is None else written

    # parts ----------------------------------------------------------------------------------------

    def adc(self, pin):
        """An ADC input with ``read_u16``; on ESP32 set to its widest input range."""
        adc = machine.ADC(machine.Pin(pin))
        if hasattr(machine.ADC, "ATTN_11DB"):
            adc.atten(machine.ADC.ATTN_11DB)
        return adc

    def i2c(self, bus_id, sda, scl, freq):
        """A hardware I2C bus on the given pins."""
        return machine.I2C(bus_id, sda=machine.Pin(sda), scl=machine.Pin(scl), freq=freq)

    def pin_out(self, pin):
        """A push-pull output pin."""
        return machine.Pin(pin, machine.Pin.OUT)

    def pin_in(self, pin):
        """An input pin."""
        return machine.Pin(pin, machine.Pin.IN)

    def pwm(self, pin, freq):
        """A PWM output at ``freq`` Hz.

        On rp2 two pins share a PWM slice and its frequency (slice = pin / 2 mod 8): a fan at 25 kHz and a servo
        at 50 Hz on one slice would silently break one of them, so that is refused here.
        """
        if sys.platform == "rp2":
            slice_id = (pin >> 1) & 7
            other = self._pwm_slices.get(slice_id)
            if other is not None and other[1] != freq:
                raise ValueError("PWM pins %d and %d share slice %d but want %d Hz and %d Hz"
                                 % (other[0], pin, slice_id, other[1], freq))
            self._pwm_slices[slice_id] = (pin, freq)
        pwm = machine.PWM(machine.Pin(pin))
        pwm.freq(freq)
        return pwm

    def disable_irq(self):
        """Hold off interrupts (for bit-banged timing); returns the state for `enable_irq`."""
        return machine.disable_irq()

    def enable_irq(self, state):
        """Undo `disable_irq`."""
        machine.enable_irq(state)

    # board ----------------------------------------------------------------------------------------

    def uid(self):
        """The MCU's factory serial number as hex text."""
        return binascii.hexlify(machine.unique_id()).decode()

    def supply_mv(self):
        """Supply voltage [mV] through the configured divider (Pico: VSYS/3 on GPIO29), 0 when not wired."""
        if self._supply_adc is None:
            return 0
        return self._supply_adc.read_u16() * 3300 * self._config.SUPPLY_DIVIDER // 65535

    def board_temp_cc(self):
        """Die temperature [0.01 °C], −32768 when the port has no sensor.

        rp2: T = 27 − (V − 0.706 V) / 0.001721 V/°C (RP2040 datasheet, temperature sensor; from memory).
        """
        if self._temp_adc is not None:
            volts = self._temp_adc.read_u16() * 3.3 / 65535
            return int((27 - (volts - 0.706) / 0.001721) * 100)
        try:
            import esp32

            return int(esp32.mcu_temperature() * 100)
        except (ImportError, AttributeError):
            return -32768

    def maintenance_requested(self):
        """True while the maintenance pin is held low, or (rp2) the BOOTSEL button is pressed."""
        if self._maintenance_pin is not None and self._maintenance_pin.value() == 0:
            return True
        if sys.platform == "rp2":
            import rp2

            return rp2.bootsel_button() == 1
        return False

    def reboot(self):
        """Let the last frame leave over USB, then a hard reset."""
        time.sleep_ms(50)
        machine.reset()
