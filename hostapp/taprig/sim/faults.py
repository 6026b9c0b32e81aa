"""Link faults of the simulated rig, injected deterministically and tallied exactly.

Faults act on whole encoded ``SAMPLES`` frames on their way to the host. Control frames (``DESCRIPTION``,
``REPLY``, ``STATUS``, ``LOG``) pass intact, so a handshake always completes and every injected loss shows up
in the host's sample accounting; device resets, disconnects and stalled writes exercise the control path.

* bit errors: each frame suffers ``Binomial(8 · len, ber)`` flipped bits. A flip never touches the delimiter and
  never produces a zero byte (the bit to flip is chosen among those whose flip leaves the byte non-zero), so one
  corrupted frame is exactly one CRC or framing error at the receiver and never splits or merges frames;
* burst drops: each frame starts a burst of ``burst_frames`` dropped frames with probability
  ``burst_rate · frame duration`` (a Poisson process in device time, drawn per frame).

Random draws are consumed in frame order from a generator of their own, so the outcome depends on the seed and
the frame sequence only, never on how the reader happens to chunk its reads.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass

import numpy as np


@dataclass
class FaultTally:
    """What was injected so far, for comparison with the host decoder's counters.

    ``frames_corrupted`` should equal the host's ``crc_errors + framing_errors`` (on a clean line),
    ``frames_lost`` its ``frames_lost`` and ``gaps`` its ``gaps`` (once a later frame has arrived),
    ``scans_lost`` its ``scans_lost`` (once a later ``SAMPLES`` frame of the same stream has arrived) and
    ``resets`` its ``resets`` minus the boot at open. Scans lost before the first frame of a stream that does
    arrive are counted by a receiver too (a stream starts at scan 0), so they join ``scans_lost`` once that frame
    passes. Scans no receiver can count (the tail of a stream that a reset or a new START ended before another
    of its frames passed, or a stream of which no frame passed) are in ``scans_unseen``.
    """

    frames_corrupted: int = 0
    bits_flipped: int = 0
    frames_dropped: int = 0
    bursts: int = 0
    frames_lost: int = 0
    gaps: int = 0
    scans_lost: int = 0
    scans_unseen: int = 0
    resets: int = 0

    def as_dict(self) -> dict[str, int]:
        """Return the tally as a plain dict."""
        return asdict(self)


class LinkFaults:
    """Corrupts and drops sample frames by a seeded plan and keeps the :class:`FaultTally`.

    Parameters
    ----------
    rng : numpy.random.Generator
        The generator reserved for link faults.
    bit_error_rate : float
        Probability that a given bit of an encoded frame is flipped [-].
    burst_rate : float
        Mean number of burst drops per second of device time [1/s].
    burst_frames : int
        Frames dropped per burst.
    """

    def __init__(self, rng: np.random.Generator, bit_error_rate: float, burst_rate: float, burst_frames: int):
        self._rng = rng
        self._ber = float(bit_error_rate)
        self._burst_rate = float(burst_rate)
        self._burst_frames = int(burst_frames)
        self._dropping = 0
        self._previous_lost = False
        #: True while the latest SAMPLES frame was lost: its scans reach the host's ``scans_lost`` only once a
        #: later SAMPLES frame of the same stream arrives.
        self.last_sample_lost = False
        self._delivered_in_stream = False
        self._pending_scans = 0  # lost scans of this stream, countable once a later frame of it passes
        self.tally = FaultTally()

    @property
    def active(self) -> bool:
        """Whether any frame can be touched at all (False lets the device skip the per-frame work)."""
        return self._ber > 0.0 or (self._burst_rate > 0.0 and self._burst_frames > 0)

    def passed(self) -> None:
        """Note that a frame went out untouched (it ends a run of lost frames)."""
        self._previous_lost = False

    def restart(self) -> None:
        """Forget the run in progress (the device rebooted: its sequence starts again)."""
        self._previous_lost = self.last_sample_lost = False
        self._dropping = 0
        self.new_stream()

    def new_stream(self) -> None:
        """A START began a stream: the previous stream's lost scans not yet followed by a frame are unseen."""
        self.tally.scans_unseen += self._pending_scans
        self._pending_scans = 0
        self._delivered_in_stream = False

    def sample_frame(self, frame: bytes, n_scans: int, duration_s: float) -> bytes | None:
        """Pass one encoded ``SAMPLES`` frame (delimiter included) through the faults.

        Returns the frame, a corrupted copy, or ``None`` when it is dropped.
        """
        if self._burst_rate > 0.0 and self._dropping == 0:
            if self._rng.random() < self._burst_rate * duration_s:
                self._dropping = self._burst_frames
                self.tally.bursts += 1 if self._burst_frames > 0 else 0
        self.last_sample_lost = True
        if self._dropping > 0:
            self._dropping -= 1
            self.tally.frames_dropped += 1
            self._lost(n_scans)
            return None
        if self._ber > 0.0:
            n_flips = int(self._rng.binomial(8 * (len(frame) - 1), self._ber))
            if n_flips:
                self.tally.frames_corrupted += 1
                self.tally.bits_flipped += n_flips
                self._lost(n_scans)
                return flip_bits(frame, n_flips, self._rng)
        self._previous_lost = self.last_sample_lost = False
        self._delivered_in_stream = True
        self.tally.scans_lost += self._pending_scans
        self._pending_scans = 0
        return frame

    def _lost(self, n_scans: int) -> None:
        self.tally.frames_lost += 1
        self._pending_scans += n_scans
        if not self._previous_lost:
            self.tally.gaps += 1
        self._previous_lost = True


def flip_bits(frame: bytes, n_flips: int, rng: np.random.Generator) -> bytes:
    """Flip ``n_flips`` bits of an encoded frame, sparing its final delimiter and never making a zero byte.

    A byte whose value is a single bit (say 0x04) has one bit that must not flip; the flip is moved to the next
    bit up, which keeps the byte non-zero. The flips land on distinct bytes (at most one per byte), so they never
    cancel.

    Parameters
    ----------
    frame : bytes
        An encoded frame ending in its ``0x00`` delimiter.
    n_flips : int
        Number of bit flips, ≥ 1.
    rng : numpy.random.Generator
        Source of the positions.

    Returns
    -------
    bytes
        The corrupted frame, same length, same delimiter.
    """
    data = np.frombuffer(frame, dtype=np.uint8).copy()
    body_len = len(frame) - 1
    positions = rng.choice(body_len, size=min(n_flips, body_len), replace=False)
    bits = rng.integers(0, 8, size=positions.size).astype(np.uint8)
    masks = np.left_shift(np.uint8(1), bits)
    would_zero = data[positions] == masks
    masks[would_zero] = np.left_shift(np.uint8(1), (bits[would_zero] + 1) % 8)
    data[positions] ^= masks
    return data.tobytes()
