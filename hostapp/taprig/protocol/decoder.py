"""The stream decoder: bytes in, messages and :class:`RawBlock` s out, every loss counted (PROTOCOL.md §5, §6).

A decoder is a plain object fed chunks of bytes as they arrive, split anywhere. It keeps only the bytes after the
last delimiter between calls; each complete frame goes through the checks of §1 (length, COBS, size, CRC, header
length), then the sequence accounting, then its type's body decoder. It never raises, whatever the input.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from taprig.protocol.framing import CRC_SIZE, FLAG_BOOT, HEADER_SIZE, MAX_ENCODED, FrameError, open_frame
from taprig.protocol.messages import BODY_DECODERS, Description, MalformedBody, MsgType
from taprig.protocol.samples import SAMPLES_HEAD, RawBlock, SampleLayout, layout_for_mask

_U32 = 1 << 32
_HALF = 1 << 31
_MASK32 = _U32 - 1
_SAMPLES = int(MsgType.SAMPLES)
_SAMPLES_DATA = HEADER_SIZE + SAMPLES_HEAD.size
_NOT_CACHED = object()
#: which frame types each kind of receiver interprets (PROTOCOL.md §1: a frame of the other direction is unknown)
_RECEIVERS = {"host": lambda t: 0 < t < 0x80, "device": lambda t: t > 0x80, "any": lambda t: True}
_LAYOUT_CACHE_LIMIT = 256
#: Unwrapped device times [µs] and scan indices stay below this, so times in ns and indices fit int64 with room.
_UNWRAP_LIMIT = 1 << 52


@dataclass
class Counters:
    """What a receiver counts (PROTOCOL.md §5); every field starts at 0 and only grows."""

    frames: int = 0
    bytes: int = 0
    framing_errors: int = 0
    crc_errors: int = 0
    oversize: int = 0
    unknown_types: int = 0
    gaps: int = 0
    frames_lost: int = 0
    scans_lost: int = 0
    duplicates: int = 0
    late: int = 0
    resets: int = 0
    undecodable: int = 0

    def as_dict(self) -> dict[str, int]:
        """Return the counters as a plain dict (field name → count, in field order)."""
        return dict(self.__dict__)  # ints only: a shallow copy is asdict's result without its recursion


class StreamDecoder:
    """Decode a byte stream of frames, in either direction.

    ``feed`` returns, in arrival order, the message dataclasses of :mod:`taprig.protocol.messages` and
    :class:`RawBlock` for ``SAMPLES``; consecutive ``SAMPLES`` frames of one channel set within one call come out
    merged as one block. A frame that repeats the previous ``seq`` is counted as a duplicate and not delivered; a
    late frame is counted and delivered. ``description`` is the latest ``DESCRIPTION`` seen, or the one given;
    ``SAMPLES`` need one to be decoded.

    ``receiver`` says which end decodes (PROTOCOL.md §1): ``"host"`` (the default) interprets only device → host
    types and counts a well-formed host → device frame as an unknown type; ``"device"`` the converse (a board's
    command reader, the simulator); ``"any"`` interprets both (a capture of both directions, tests).

    Holding (``feed(data, tag=...)``): a reader that wants blocks of many chunks (a fast replay) gives each chunk a
    tag (its arrival time); the ``SAMPLES`` of tagged chunks are then held past the end of the call, so that runs
    of one channel set come out as one block spanning chunks, and each such block's per-scan tags are kept for
    :meth:`take_tags`. A block still comes out, as always, before any other message and on a change of channel
    set; :meth:`flush` hands out what is held. The items, their order and the counters are those of untagged
    feeding; only the blocks' boundaries differ.
    """

    def __init__(self, description: Description | None = None, receiver: str = "host"):
        if receiver not in _RECEIVERS:
            raise ValueError(f"receiver must be one of {', '.join(_RECEIVERS)}, not {receiver!r}")
        self._accepts = _RECEIVERS[receiver]
        #: well-formed frames of the receiver's own direction skipped so far (also counted in ``unknown_types``)
        self.foreign_frames = 0
        self._counters = Counters()
        self._description = description
        self._layouts: dict[int, SampleLayout | None] = {}
        self._carry = b""
        self._skipping = False
        self._seq_next: int | None = None
        self._seq_prev: int | None = None
        self._scan_next: int | None = None
        self._time_ref: tuple[int, int] | None = None
        self._pending: list[tuple] = []
        self._pending_layout: SampleLayout | None = None
        self._pending_scans = 0
        self._tag: object = None  # the tag of the chunk being fed (None: not holding)
        self._tags: list[np.ndarray] = []  # per tagged block handed out, its scans' tags
        self._after_boot = False  # a BOOT frame was seen: the next stream starts at scan 0
        self._after_outage = False  # the link was down: a sequence that went back means the board rebooted
        self._late_frame = False

    def link_restarted(self) -> None:
        """The link was down and is back (a reconnect): the frames that follow come from the same board, which
        may have rebooted meanwhile with its boot frame unseen. If the next frame's ``seq`` is behind the last
        one seen, that is counted as a reset (sequence and scan accounting restart), not as late frames."""
        self._after_outage = True

    @property
    def counters(self) -> Counters:
        """A snapshot of the counters."""
        return replace(self._counters)

    @property
    def description(self) -> Description | None:
        """The latest ``DESCRIPTION`` received, else the one given to the constructor."""
        return self._description

    @property
    def pending_scans(self) -> int:
        """Scans decoded but not yet handed out (held from tagged chunks)."""
        return self._pending_scans

    def flush(self) -> list:
        """Hand out the held ``SAMPLES`` as a block (a list of at most one item)."""
        items: list = []
        try:
            self._flush(items)
        except Exception:
            self._counters.undecodable += 1
            self._drop_pending()
        return items

    def take_tags(self) -> list[np.ndarray]:
        """The per-scan tags of each block from tagged chunks handed out since the last call, in order (int64)."""
        tags, self._tags = self._tags, []
        return tags

    def feed(self, data: bytes, tag: int | None = None) -> list:
        """Take the next chunk of the stream; return the items completed by it (possibly none).

        ``tag`` (an int, e.g. the chunk's arrival time): hold this chunk's ``SAMPLES`` (see the class docstring).
        """
        self._tag = tag
        if not isinstance(data, bytes):
            data = bytes(data)
        counters = self._counters
        counters.bytes += len(data)
        if self._carry:
            data = self._carry + data
        parts = data.split(b"\x00")
        tail = parts.pop()
        if self._skipping:
            if not parts:
                return []
            parts[0] = b""  # the end of an oversize frame, counted when it passed the limit
            self._skipping = False
        items: list = []
        for part in parts:
            if part:
                try:
                    self._frame(part, items)
                except Exception:  # never raise, whatever the input: a frame no check foresaw is undecodable
                    counters.undecodable += 1
                    self._drop_pending()
                    self._scan_next = self._time_ref = None
        if tag is None:  # an untagged chunk's blocks come out now
            try:
                self._flush(items)
            except Exception:
                counters.undecodable += 1
                self._drop_pending()
        if len(tail) > MAX_ENCODED:
            # counted now, skipped up to the next delimiter: the carry never grows past one legal frame
            counters.oversize += 1
            self._skipping = True
            tail = b""
        self._carry = tail
        return items

    def _frame(self, encoded: bytes, items: list) -> None:
        counters = self._counters
        try:
            raw, msg_type, flags, seq = open_frame(encoded)
        except FrameError as exc:
            setattr(counters, exc.counter, getattr(counters, exc.counter) + 1)
            return
        counters.frames += 1
        if not self._sequence(seq, flags):
            return
        if msg_type == _SAMPLES and self._accepts(msg_type):
            self._samples(raw, items)
            return
        if not self._accepts(msg_type):
            self.foreign_frames += 1
        parse = BODY_DECODERS.get(msg_type) if self._accepts(msg_type) else None
        if parse is None:
            counters.unknown_types += 1
            return
        try:
            msg = parse(raw[HEADER_SIZE:-CRC_SIZE])
        except MalformedBody:
            counters.framing_errors += 1
            return
        if isinstance(msg, Description):
            self._description = msg
            self._layouts.clear()
        self._flush(items)
        items.append(msg)

    def _sequence(self, seq: int, flags: int) -> bool:
        """Count gaps, duplicates, late frames and resets; return False for a duplicate (not delivered)."""
        counters = self._counters
        after_outage, self._after_outage = self._after_outage, False
        self._late_frame = False
        if flags & FLAG_BOOT:
            self._restart_stream()
        elif self._seq_next is not None:
            if seq == self._seq_prev:
                counters.duplicates += 1
                return False
            ahead = (seq - self._seq_next) & _MASK32
            if ahead > _HALF and after_outage:
                self._restart_stream()  # across an outage the boot frame can be lost: the sequence went back
            elif ahead > _HALF:
                counters.late += 1
                self._late_frame = True
                self._seq_prev = seq
                return True
            elif ahead:
                counters.gaps += 1
                counters.frames_lost += ahead
        self._seq_prev = seq
        self._seq_next = (seq + 1) & _MASK32
        return True

    def _restart_stream(self) -> None:
        self._counters.resets += 1
        self._scan_next = None
        self._time_ref = None
        self._after_boot = True

    def _samples(self, raw: bytes, items: list) -> None:
        counters = self._counters
        if len(raw) < _SAMPLES_DATA + CRC_SIZE:
            counters.framing_errors += 1
            return
        t_us, period_ns, first_scan, n_scans, _, mask = SAMPLES_HEAD.unpack_from(raw, HEADER_SIZE)
        if mask == 0:
            counters.framing_errors += 1
            return
        layout = None if self._description is None else self._layouts.get(mask, _NOT_CACHED)
        if layout is _NOT_CACHED:
            layout = self._cache_layout(mask)
        if layout is None:
            # §5: the header is readable, so the scans move the expectation (counted here, not as lost)
            counters.undecodable += 1
            if n_scans:
                self._scan_start(first_scan, n_scans)
            return
        if n_scans == 0 or len(raw) != _SAMPLES_DATA + CRC_SIZE + n_scans * layout.scan_bytes:
            counters.framing_errors += 1
            return
        view = layout.frombuffer(raw, _SAMPLES_DATA, n_scans)
        scan0 = self._scan_start(first_scan, n_scans)
        t0_ns = self._unwrap_us(t_us) * 1000
        if layout is not self._pending_layout:
            self._flush(items)
            self._pending_layout = layout
        if self._pending and (self._pending[-1][5] is None) != (self._tag is None):
            self._flush(items)  # held scans and untagged ones never share a block
        self._pending.append((view, t0_ns, period_ns, scan0, n_scans, self._tag))
        self._pending_scans += n_scans

    def _cache_layout(self, mask: int) -> SampleLayout | None:
        if len(self._layouts) >= _LAYOUT_CACHE_LIMIT:
            self._layouts.clear()  # only CRC-valid frames add masks; a bound keeps a chatty bug from hoarding
        layout = self._layouts[mask] = layout_for_mask(self._description, mask)
        return layout

    def _scan_start(self, first_scan: int, n_scans: int) -> int:
        """Return the unwrapped index of a block's first scan; count scans lost before it."""
        expected = self._scan_next
        after_boot, self._after_boot = self._after_boot, False
        if expected is None or (first_scan == 0 and expected & _MASK32):
            index = first_scan  # first block seen, or the first block after a START
            if after_boot and first_scan < _HALF:  # a stream after a boot starts at scan 0: those before were lost
                self._counters.scans_lost += first_scan  # (an index 2^31 on is a stream begun before the host saw it)
        else:
            ahead = (first_scan - expected) & _MASK32
            if ahead > _HALF and self._late_frame:
                return expected - (_U32 - ahead)  # a late block: the expectation stays
            if ahead > _HALF:  # in sequence, yet the scan index went back: a new START, its first frames lost
                self._counters.scans_lost += first_scan
                index = first_scan
            else:
                self._counters.scans_lost += ahead
                index = expected + ahead
        if index + n_scans > _UNWRAP_LIMIT:
            index = first_scan  # an unwrapped index this large is not a real stream: start the count again
        self._scan_next = index + n_scans
        return index

    def _unwrap_us(self, t_us: int) -> int:
        """Unwrap ``t_us`` (§6): a step back of more than 2³¹ µs is a wrap; smaller steps back move no reference."""
        if self._time_ref is None:
            self._time_ref = (t_us, t_us)
            return t_us
        raw_ref, unwrapped_ref = self._time_ref
        step = (t_us - raw_ref) & _MASK32
        if step < _HALF:
            unwrapped = unwrapped_ref + step
            if unwrapped > _UNWRAP_LIMIT:  # ~146 000 years of µs: no real clock; restart so ns fit in int64
                unwrapped = t_us
            self._time_ref = (t_us, unwrapped)
            return unwrapped
        return max(0, unwrapped_ref - (_U32 - step))

    def _flush(self, items: list) -> None:
        """Emit the pending ``SAMPLES`` frames as one :class:`RawBlock`."""
        pending = self._pending
        if not pending:
            return
        layout = self._pending_layout
        counts = layout.to_counts([p[0] for p in pending])
        tagged = pending[0][5] is not None
        if len(pending) == 1:
            _, t0_ns, period_ns, scan0, n_scans, tag = pending[0]
            k = np.arange(n_scans, dtype=np.int64)
            t_ns, scan_index = t0_ns + k * period_ns, scan0 + k
            tags = np.full(n_scans, tag, dtype=np.int64) if tagged else None
        else:
            heads = np.array([p[1:5] for p in pending], dtype=np.int64)
            sizes = heads[:, 3]
            k = np.arange(int(sizes.sum()), dtype=np.int64) - np.repeat(np.cumsum(sizes) - sizes, sizes)
            t_ns = np.repeat(heads[:, 0], sizes) + k * np.repeat(heads[:, 1], sizes)
            scan_index = np.repeat(heads[:, 2], sizes) + k
            tags = np.repeat(np.array([p[5] for p in pending], dtype=np.int64), sizes) if tagged else None
        block = RawBlock(counts, layout.channels, t_ns, scan_index)
        self._drop_pending()
        items.append(block)
        if tags is not None:
            self._tags.append(tags)

    def _drop_pending(self) -> None:
        self._pending = []
        self._pending_scans = 0
