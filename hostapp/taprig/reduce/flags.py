"""Flag bits of a reduced block: one mask per scan and one per channel sample.

Flags are bit masks (``numpy`` unsigned integer arrays) so a block of scans carries them at the cost of one small
integer per scan; the enums give the bits their names for people and exports.
"""

from __future__ import annotations

from enum import IntFlag

import numpy as np

#: dtype of the per-scan mask and of the per-channel-sample mask.
SCAN_FLAG_DTYPE = np.uint16
CHANNEL_FLAG_DTYPE = np.uint8


class ScanFlag(IntFlag):
    """What is wrong with (or worth knowing about) one scan.

    ``NO_FLOW``: q below the no-flow threshold (set from the q channels' accuracy); Cp and coefficients are NaN.
    ``REFERENCE_INVALID``: a channel that q or the freestream static depends on is saturated or not finite; Cp and
    coefficients are NaN.
    ``SATURATED``: at least one channel of the scan is at its converter's rails.
    ``OUT_OF_RANGE``: at least one channel reads beyond its sensor's rated range (accuracy not specified there).
    ``NOT_FINITE``: at least one channel sample is NaN or infinite.
    ``DEGRADED``: the integral of this scan left out one or more taps (saturated, not finite or not streamed).
    ``NO_INTEGRAL``: too few usable taps to integrate; Cl, Cd_p, Cm are NaN.
    ``COMPRESSIBLE``: Mach above 0.3, where Cp = (p − p∞)/q by the incompressible q stops being accurate.
    ``MISSING_TAPS``: the block does not stream every tap channel of the rig.
    ``REVERSED``: q (or a venturi's differential) negative beyond its noise: the pitot lines swapped, or flow the
    wrong way; also NO_FLOW.
    ``BEYOND_RIG``: a speed above what the rig's fan can make (``[operating] max_speed_m_s``, 10 % margin) or a
    Mach number above the rig's limit (``max_mach``): not a plausible measurement (a bad calibration, a wrong
    sensor); shown as implausible, never as a plain number.
    """

    NO_FLOW = 1 << 0
    REFERENCE_INVALID = 1 << 1
    SATURATED = 1 << 2
    OUT_OF_RANGE = 1 << 3
    NOT_FINITE = 1 << 4
    DEGRADED = 1 << 5
    NO_INTEGRAL = 1 << 6
    COMPRESSIBLE = 1 << 7
    MISSING_TAPS = 1 << 8
    REVERSED = 1 << 9
    BEYOND_RIG = 1 << 10


class ChannelFlag(IntFlag):
    """What is wrong with one channel sample.

    ``SATURATED``: the counts sit at or beyond the converter's rails (the true value is unknown).
    ``OUT_OF_RANGE``: the converted value lies outside the sensor's rated range.
    ``NOT_FINITE``: the sample is NaN or infinite (an ``f32`` channel can send them).
    """

    SATURATED = 1 << 0
    OUT_OF_RANGE = 1 << 1
    NOT_FINITE = 1 << 2


#: Channel-sample flags that make a sample unusable (left out of Cp integrals and block means).
UNUSABLE = ChannelFlag.SATURATED | ChannelFlag.NOT_FINITE


def flag_names(mask: int, kind: type[IntFlag]) -> tuple[str, ...]:
    """Names of the bits of ``kind`` set in ``mask``, lowest bit first (``()`` when clear).

    Examples
    --------
    >>> flag_names(int(ScanFlag.NO_FLOW | ScanFlag.SATURATED), ScanFlag)
    ('NO_FLOW', 'SATURATED')
    """
    return tuple(member.name for member in kind if int(mask) & int(member))


def count_flags(masks: np.ndarray, kind: type[IntFlag]) -> dict[str, int]:
    """How many elements of ``masks`` carry each bit of ``kind`` (only bits that occur), for summaries.

    Examples
    --------
    >>> count_flags(np.array([1, 0, 5], dtype=np.uint16), ScanFlag)
    {'NO_FLOW': 2, 'SATURATED': 1}
    """
    masks = np.asarray(masks)
    counts = {member.name: int(np.count_nonzero(masks & int(member))) for member in kind}
    return {name: n for name, n in counts.items() if n}
