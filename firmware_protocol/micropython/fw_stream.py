"""Timer-driven sampling: scans of the active channels packed into SAMPLES blocks.

The timer callback only raises a flag (no allocation in the callback). The main loop calls `Streamer.service`,
which, once the flag is up, takes the scan of the latest period boundary. Which boundary that is comes from the
clock, not from counting callbacks: a callback the scheduler had to drop (its queue is short) then shows up as a
missed period instead of shifting every later time stamp. Scan *k* belongs to boundary k + 1, so its device
time is ``start_us + (k + 1) · period`` exactly; a block's ``t_us`` is the time of its first scan.

When the loop falls behind by more than one period, the missed periods are counted as overruns and their scans
are not taken (a late reading stamped with the nominal time would be a wrong value at the right time): the block
in progress is sent as it is and the next one starts at the current scan index, so the host sees the hole as
``scans_lost``.
"""

import struct

from fw_wire import (
    ENCODING_SIZE,
    MIN_FRAME,
    OK,
    BAD_ARGUMENT,
    HARDWARE_FAULT,
    OUT_OF_RANGE,
    SAMPLES,
    SAMPLES_HEADER_SIZE,
    pack_samples_header,
    scan_format,
)

_TARGET_BLOCK_US = 50000  # the device's own choice of block length: about 20 frames a second
_MAX_BLOCK_US = 1 << 30  # stay well inside the 2³¹ µs a receiver can unwrap (PROTOCOL.md §6)


class Streamer:
    """Owns the sampling timer, the active channel set and the block being filled.

    ``send(msg_type, body) -> bool`` writes one frame and says whether all of it went out.
    """

    def __init__(self, hw, channels, max_frame, send):
        self._hw = hw
        self._channels = channels
        self._max_frame = max_frame
        self._send = send
        self.streaming = False
        self.overruns = 0
        self.dropped_scans = 0
        self.read_errors = [0] * len(channels)
        self.last_error = [""] * len(channels)
        self._last_value = [0] * len(channels)
        self._due = False
        self._ticks_served = 0

    def _tick(self, _timer=None):
        self._due = True

    def check(self, rate_hz, mask, scans_per_frame, rate_min, rate_max):
        """Validate START arguments; return ``(code, detail, scans_per_frame)`` with the block length to use."""
        if not rate_min <= rate_hz <= rate_max:  # also refuses NaN
            return OUT_OF_RANGE, "rate %s Hz outside [%s, %s]" % (rate_hz, rate_min, rate_max), 0
        n_channels = len(self._channels)
        if mask == 0 or mask >> n_channels:
            return BAD_ARGUMENT, "channel mask 0x%x: device has channels 0-%d" % (mask, n_channels - 1), 0
        period_us = _period_us(rate_hz)
        scan_bytes = 0
        for index in _mask_indices(mask):
            scan_bytes += ENCODING_SIZE[self._channels[index].encoding]
        most = min(65535, (self._max_frame - MIN_FRAME - SAMPLES_HEADER_SIZE) // scan_bytes)
        if most < 1:
            return OUT_OF_RANGE, "a scan of mask 0x%x takes %d bytes: too long for max_frame %d" % (
                mask, scan_bytes, self._max_frame), 0
        most = min(most, _MAX_BLOCK_US // period_us)
        if scans_per_frame == 0:
            return OK, "", max(1, min(most, _TARGET_BLOCK_US // period_us))
        if scans_per_frame > most:
            return OUT_OF_RANGE, "scans_per_frame %d: at most %d for this mask and rate" % (scans_per_frame, most), 0
        return OK, "", scans_per_frame

    def probe(self, mask):
        """Read every channel of ``mask`` once; return ``(HARDWARE_FAULT, detail)`` for the first that fails."""
        for index in _mask_indices(mask):
            try:
                self._last_value[index] = self._channels[index].read()
            except OSError as err:
                return HARDWARE_FAULT, "channel %d '%s': %s" % (index, self._channels[index].name, err)
        return OK, ""

    def start(self, rate_hz, mask, scans_per_frame):
        """Begin a new stream (after `check`): first scan index 0, timer running."""
        self.stop()
        self._active = _mask_indices(mask)
        self._mask = mask
        self._format = scan_format([self._channels[i].encoding for i in self._active])
        self._scan_bytes = struct.calcsize(self._format)
        self._spf = scans_per_frame
        self._block = bytearray(SAMPLES_HEADER_SIZE + scans_per_frame * self._scan_bytes)
        self._fill = 0
        self._block_first = 0
        self._period_us = _period_us(rate_hz)
        self._due = False
        self._ticks_served = 0
        self._start_us = self._hw.now_us()  # read before the timer starts, so its boundaries are never early
        self.streaming = True
        self._hw.start_timer(self._period_us, self._tick)

    def stop(self):
        """Stop the timer and send the block in progress (its scans were taken, so they are sent)."""
        if not self.streaming:
            return
        self._hw.stop_timer()
        self.streaming = False
        self._flush()

    def describe_stream(self):
        """One line for a LOG: the running stream's settings."""
        return "streaming %d channels, period %d us, %d scans per frame" % (
            len(self._active), self._period_us, self._spf)

    def service(self):
        """Take the scan of the latest period boundary, if the timer said one passed; send the block when full."""
        if not self.streaming or not self._due:
            return
        self._due = False
        ticks = (self._hw.now_us() - self._start_us) // self._period_us
        pending = ticks - self._ticks_served
        if pending <= 0:
            return
        self._ticks_served = ticks
        if pending > 1:
            self.overruns += pending - 1
            self._flush()
        scan_index = ticks - 1
        if self._fill == 0:
            self._block_first = scan_index
        struct.pack_into(
            self._format, self._block, SAMPLES_HEADER_SIZE + self._fill * self._scan_bytes, *self._read_scan())
        self._fill += 1
        if self._fill == self._spf:
            self._flush()

    def _read_scan(self):
        values = []
        last = self._last_value
        for index in self._active:
            try:
                value = self._channels[index].read()
                last[index] = value
            except OSError as err:
                # Keep the stream's timing whole; the repeat is reported in a LOG by the device.
                value = last[index]
                self.read_errors[index] += 1
                self.last_error[index] = str(err)
            values.append(value)
        return values

    def _flush(self):
        n_scans = self._fill
        if n_scans == 0:
            return
        self._fill = 0
        t_us = self._start_us + (self._block_first + 1) * self._period_us
        pack_samples_header(self._block, t_us, self._period_us * 1000, self._block_first, n_scans, self._mask)
        size = SAMPLES_HEADER_SIZE + n_scans * self._scan_bytes
        body = self._block if size == len(self._block) else memoryview(self._block)[:size]
        if not self._send(SAMPLES, body):
            self.dropped_scans += n_scans


def _period_us(rate_hz):
    return max(1, int(1000000 / rate_hz + 0.5))


def _mask_indices(mask):
    indices = []
    index = 0
    while mask:
        if mask & 1:
            indices.append(index)
        mask >>= 1
        index += 1
    return indices
