"""``SAMPLES`` bodies (PROTOCOL.md §3): channel masks, numpy layouts of a scan, the decoded ``RawBlock``, the encoder.

A scan's bytes are described once per channel set by a :class:`SampleLayout`: a plain numpy dtype when every channel
shares one encoding (the common case, and the fast one), else a packed structured dtype with one field per channel.
Decoding a frame is then one ``numpy.frombuffer``; converting a run of frames to float64 counts is one concatenate
(a mixed layout: one strided cast per run of adjacent channels of one encoding).
"""

from __future__ import annotations

import struct
from dataclasses import dataclass
from typing import Sequence

import numpy as np

from taprig.protocol.messages import Description, Encoding, Samples

SAMPLES_HEAD = struct.Struct("<IIIHHQ")
"""``t_us``, ``period_ns``, ``first_scan``, ``n_scans``, reserved, ``channel_mask``: 24 bytes."""

WIRE_DTYPES: dict[Encoding, np.dtype] = {
    Encoding.I16: np.dtype("<i2"),
    Encoding.U16: np.dtype("<u2"),
    Encoding.I32: np.dtype("<i4"),
    Encoding.U32: np.dtype("<u4"),
    Encoding.F32: np.dtype("<f4"),
}


def mask_to_channels(mask: int) -> tuple[int, ...]:
    """Return the channel indices whose bits are set in ``mask``, in increasing order.

    >>> mask_to_channels(0b1011)
    (0, 1, 3)
    """
    return tuple(i for i in range(64) if mask >> i & 1)


def channels_to_mask(channels: Sequence[int]) -> int:
    """Return the channel mask with a bit set for each index in ``channels`` (each 0–63).

    >>> hex(channels_to_mask([0, 1, 3]))
    '0xb'
    """
    mask = 0
    for index in channels:
        if not 0 <= index < 64:
            raise ValueError(f"channel index {index} is outside 0–63")
        mask |= 1 << index
    return mask


@dataclass(frozen=True)
class SampleLayout:
    """How one scan of a channel set is laid out on the wire.

    ``dtype`` is the scalar dtype when ``shared`` (every channel has one encoding), else a packed structured dtype
    of one record per scan.
    """

    channels: tuple[int, ...]
    encodings: tuple[Encoding, ...]
    dtype: np.dtype
    scan_bytes: int
    shared: bool
    #: For a mixed layout, the runs of adjacent columns of one encoding: (first column, last column + 1, byte
    #: offset of the first within a scan, wire dtype); each run is one strided view of the scans cast to float64
    #: in one copy (no byte gather, no field-by-field structured copy).
    runs: tuple[tuple[int, int, int, np.dtype], ...] = ()

    def frombuffer(self, buffer: bytes, offset: int, n_scans: int) -> np.ndarray:
        """Return a read-only view of ``n_scans`` scans in ``buffer`` from ``offset`` (no copy)."""
        if self.shared:
            width = len(self.channels)
            return np.frombuffer(buffer, self.dtype, n_scans * width, offset).reshape(n_scans, width)
        return np.frombuffer(buffer, self.dtype, n_scans, offset)

    def to_counts(self, views: Sequence[np.ndarray]) -> np.ndarray:
        """Return the scans of ``views`` (from :meth:`frombuffer`) stacked as one float64 array (scans × channels)."""
        if self.shared:
            if len(views) == 1:
                return views[0].astype(np.float64)
            return np.concatenate(views, dtype=np.float64)
        # as bytes: concatenating structured arrays promotes their dtypes field by field, which costs far more
        raw = views[0].view(np.uint8) if len(views) == 1 else np.concatenate([v.view(np.uint8) for v in views])
        n = raw.size // self.scan_bytes
        out = np.empty((n, len(self.channels)), np.float64)
        if n == 0:
            return out
        base = raw.reshape(n, self.scan_bytes)
        for start, stop, offset, wire in self.runs:
            out[:, start:stop] = np.ndarray((n, stop - start), wire, base, offset,
                                            (self.scan_bytes, wire.itemsize))
        return out


def make_layout(channels: Sequence[int], encodings: Sequence[Encoding]) -> SampleLayout:
    """Return the :class:`SampleLayout` of ``channels`` with these ``encodings`` (one per channel, same order)."""
    if len(channels) != len(encodings):
        raise ValueError(f"{len(channels)} channels but {len(encodings)} encodings")
    if not channels:
        raise ValueError("a SAMPLES block needs at least one channel")
    encodings = tuple(Encoding(e) for e in encodings)
    wire = [WIRE_DTYPES[e] for e in encodings]
    if len(set(encodings)) == 1:
        return SampleLayout(tuple(channels), encodings, wire[0], wire[0].itemsize * len(wire), True)
    dtype = np.dtype({"names": [f"c{i}" for i in channels], "formats": wire})
    offsets = np.cumsum([0] + [w.itemsize for w in wire[:-1]])
    runs, start = [], 0
    for j in range(1, len(encodings) + 1):
        if j == len(encodings) or encodings[j] is not encodings[start]:
            runs.append((start, j, int(offsets[start]), wire[start]))
            start = j
    return SampleLayout(tuple(channels), encodings, dtype, dtype.itemsize, False, tuple(runs))


def layout_for_mask(description: Description, mask: int) -> SampleLayout | None:
    """Return the layout of ``mask`` under ``description``; ``None`` when the mask names a channel it lacks or a
    channel whose encoding this host does not know (PROTOCOL.md §2)."""
    channels = mask_to_channels(mask)
    if not channels or channels[-1] >= len(description.channels):
        return None
    encodings = [description.channels[i].encoding for i in channels]
    if not all(isinstance(e, Encoding) for e in encodings):
        return None
    return make_layout(channels, encodings)


def _wire_column(values: np.ndarray, encoding: Encoding, channel: int) -> np.ndarray:
    """Convert one column of counts to its wire type: integers rounded to nearest, range checked."""
    target = WIRE_DTYPES[encoding]
    if encoding is Encoding.F32:
        return values.astype(target)
    rounded = np.rint(values)
    info = np.iinfo(target)
    if not np.all(np.isfinite(rounded)) or rounded.min() < info.min or rounded.max() > info.max:
        raise ValueError(f"channel {channel}: counts outside the {encoding.name.lower()} range "
                         f"[{info.min}, {info.max}] (or not finite)")
    return rounded.astype(target)


def encode_samples(msg: Samples, encodings: Sequence[Encoding]) -> bytes:
    """Return the ``SAMPLES`` body of ``msg``; ``encodings`` are those of the channels of its mask, in order.

    Integer encodings take the data rounded to the nearest count; a value out of range raises ``ValueError``.
    """
    data = np.asarray(msg.data, dtype=np.float64)
    layout = make_layout(mask_to_channels(msg.channel_mask), encodings)
    if data.ndim != 2 or data.shape[1] != len(layout.channels) or data.shape[0] < 1:
        raise ValueError(f"Samples.data must be scans × {len(layout.channels)} channels with ≥ 1 scan, "
                         f"got shape {data.shape}")
    if layout.shared:
        wire = _wire_column(data, layout.encodings[0], layout.channels[0])
    else:
        wire = np.empty(data.shape[0], layout.dtype)
        for j, (channel, encoding) in enumerate(zip(layout.channels, layout.encodings)):
            wire[f"c{channel}"] = _wire_column(data[:, j], encoding, channel)
    try:
        head = SAMPLES_HEAD.pack(msg.t_us, msg.period_ns, msg.first_scan, data.shape[0], 0, msg.channel_mask)
    except struct.error as exc:
        raise ValueError(f"Samples: a header field is out of range for its wire type ({exc})") from None
    return head + wire.tobytes()


@dataclass(frozen=True, slots=True, eq=False)
class RawBlock:
    """Decoded scans of one channel set.

    ``counts`` float64 (scans × channels, the board's native counts); ``channels`` the device channel index of each
    column; ``t_ns`` int64 (scans,) the unwrapped device time of each scan [ns]; ``scan_index`` int64 (scans,) the
    unwrapped index of each scan since ``START``.
    """

    counts: np.ndarray
    channels: tuple[int, ...]
    t_ns: np.ndarray
    scan_index: np.ndarray

    @property
    def n_scans(self) -> int:
        """Number of scans (rows) in the block."""
        return self.counts.shape[0]

    @staticmethod
    def concat(blocks: Sequence[RawBlock]) -> RawBlock:
        """Return one block holding the scans of ``blocks`` in order; all must have the same ``channels``."""
        if not blocks:
            raise ValueError("RawBlock.concat needs at least one block")
        channels = blocks[0].channels
        for block in blocks[1:]:
            if block.channels != channels:
                raise ValueError(f"RawBlock.concat: channels {block.channels} differ from {channels}")
        if len(blocks) == 1:
            return blocks[0]
        return RawBlock(
            np.concatenate([b.counts for b in blocks]),
            channels,
            np.concatenate([b.t_ns for b in blocks]),
            np.concatenate([b.scan_index for b in blocks]),
        )
