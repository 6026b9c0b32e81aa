"""Property tests of the codec: every message round-trips, feeding split anywhere changes nothing, and no input
makes the decoder raise (PROTOCOL.md §1, §3, §5)."""

from __future__ import annotations

import numpy as np
from hypothesis import given
from hypothesis import strategies as st

from taprig.protocol import (
    ActuatorInfo,
    ActuatorKind,
    AllowMoves,
    ChannelInfo,
    Describe,
    Description,
    DeviceState,
    Encoding,
    Heartbeat,
    Log,
    MsgType,
    RawBlock,
    Reply,
    ReplyCode,
    Reset,
    Samples,
    SetActuator,
    Start,
    Status,
    Stop,
    StreamDecoder,
    encode_frame,
    encode_message,
    mask_to_channels,
)

u8, u16, u32 = st.integers(0, 255), st.integers(0, 2**16 - 1), st.integers(0, 2**32 - 1)
f32 = st.floats(width=32, allow_nan=False)
short_text = st.text(max_size=8)
RANGES = {Encoding.I16: (-2**15, 2**15 - 1), Encoding.U16: (0, 2**16 - 1), Encoding.I32: (-2**31, 2**31 - 1),
          Encoding.U32: (0, 2**32 - 1)}

channel_infos = st.builds(ChannelInfo, name=short_text, encoding=st.sampled_from(Encoding))
actuator_infos = st.builds(ActuatorInfo, id=u8, kind=st.sampled_from(ActuatorKind), min=f32, max=f32, safe=f32,
                           unit=short_text, name=short_text)
descriptions = st.builds(
    Description, proto_major=st.just(1), proto_minor=u8, firmware=st.text(max_size=40), uid=st.text(max_size=40),
    rate_min_hz=f32, rate_max_hz=f32, max_frame=st.integers(12, 4096), heartbeat_timeout_ms=u16,
    channels=st.lists(channel_infos, min_size=1, max_size=64).map(tuple),
    actuators=st.lists(actuator_infos, max_size=16).map(tuple),
)
plain_messages = st.one_of(
    descriptions,
    st.builds(Status, supply_mv=u16, board_temp_cc=st.integers(-2**15, 2**15 - 1), uptime_ms=u32, overruns=u32,
              dropped_scans=u32, state=st.sampled_from(DeviceState)),
    st.builds(Reply, req=u16, code=st.sampled_from(ReplyCode), detail=st.text(max_size=60)),
    st.builds(Log, level=u8, text=st.text(max_size=300)),
    st.builds(Start, req=u16, rate_hz=f32, channel_mask=st.integers(0, 2**64 - 1), scans_per_frame=u16),
    st.builds(SetActuator, req=u16, actuator_id=u8, value=f32),
    *(st.builds(kind, req=u16) for kind in (Stop, Heartbeat, Describe, Reset, AllowMoves)),
)


def _column(rng: np.random.Generator, encoding: Encoding, n: int) -> np.ndarray:
    if encoding is Encoding.F32:
        return rng.normal(0, 1e4, n).astype(np.float32).astype(np.float64)
    lo, hi = RANGES[encoding]
    column = rng.integers(lo, hi, n, endpoint=True).astype(np.float64)
    column[: min(n, 2)] = [lo, hi][: min(n, 2)]  # the extremes of the encoding, always
    return column


@st.composite
def sample_streams(draw):
    """A description and SAMPLES messages of random channel sets under it."""
    description = draw(descriptions)
    n_channels = len(description.channels)
    rng = np.random.default_rng(draw(st.integers(0, 2**32 - 1)))
    blocks = []
    for _ in range(draw(st.integers(1, 4))):
        mask = draw(st.integers(1, 2**n_channels - 1))
        channels = mask_to_channels(mask)
        encodings = [description.channels[i].encoding for i in channels]
        scan_bytes = sum(2 if e in (Encoding.I16, Encoding.U16) else 4 for e in encodings)
        n = draw(st.integers(1, min(50, (4096 - 36) // scan_bytes)))
        data = np.column_stack([_column(rng, e, n) for e in encodings])
        blocks.append((Samples(draw(u32), draw(u32), draw(u32), mask, data), encodings))
    return description, blocks


@given(plain_messages, u32, u8)
def test_every_plain_message_round_trips(msg, seq, flags):
    decoder = StreamDecoder(receiver="any")
    assert decoder.feed(encode_message(msg, seq, flags)) == [msg]
    assert decoder.counters.frames == 1


@given(plain_messages, u32)
def test_each_end_interprets_only_the_other_ends_types(msg, seq):
    # PROTOCOL.md §1: a frame of a receiver's own direction is skipped and counted as an unknown type
    command = isinstance(msg, (Start, Stop, SetActuator, Heartbeat, Describe, Reset, AllowMoves))
    wire = encode_message(msg, seq)
    for receiver, interprets in (("host", not command), ("device", command)):
        decoder = StreamDecoder(receiver=receiver)
        assert decoder.feed(wire) == ([msg] if interprets else [])
        assert (decoder.counters.frames, decoder.counters.unknown_types) == (1, 0 if interprets else 1)


@given(sample_streams(), u32)
def test_samples_round_trip(stream, seq):
    description, blocks = stream
    decoder = StreamDecoder(description, receiver="any")
    for i, (msg, encodings) in enumerate(blocks):
        (block,) = decoder.feed(encode_message(msg, (seq + i) % 2**32, encodings=encodings))
        assert block.channels == mask_to_channels(msg.channel_mask)
        np.testing.assert_array_equal(block.counts, msg.data)
        assert block.counts.dtype == np.float64 and block.n_scans == msg.data.shape[0]
    assert decoder.counters.undecodable == 0 and decoder.counters.framing_errors == 0


def _normalised(items: list) -> list:
    """Merge consecutive RawBlocks of one channel set: how many frames one feed call merges is not a property."""
    out: list = []
    for item in items:
        if isinstance(item, RawBlock) and out and isinstance(out[-1], list) and out[-1][0].channels == item.channels:
            out[-1].append(item)
        else:
            out.append([item] if isinstance(item, RawBlock) else item)
    return [RawBlock.concat(x) if isinstance(x, list) else x for x in out]


def _same_items(a: list, b: list) -> bool:
    if len(a) != len(b):
        return False
    for x, y in zip(a, b):
        if isinstance(x, RawBlock):
            if not isinstance(y, RawBlock) or x.channels != y.channels:
                return False
            if not all(np.array_equal(getattr(x, f), getattr(y, f)) for f in ("counts", "t_ns", "scan_index")):
                return False
        elif x != y:
            return False
    return True


@st.composite
def mixed_wire(draw):
    """A stream of frames (messages, samples, skipped and repeated seq numbers, BOOT flags) and garbage."""
    description, blocks = draw(sample_streams())
    pieces = [encode_message(description, 0, flags=1)]
    seq = 1
    for msg, encodings in blocks:
        for _ in range(draw(st.integers(0, 2))):
            pieces.append(encode_message(draw(plain_messages.filter(lambda m: not isinstance(m, Description))),
                                         seq))
            seq += draw(st.sampled_from([1, 1, 1, 0, 3]))
        if draw(st.booleans()):
            pieces.append(draw(st.binary(max_size=40)) + b"\x00")
        pieces.append(encode_message(msg, seq % 2**32, encodings=encodings))
        seq += 1
    return b"".join(pieces)


@given(mixed_wire(), st.lists(st.integers(0, 10**6), max_size=12))
def test_split_anywhere_gives_the_same_items_and_counters(wire, cuts):
    whole = StreamDecoder(receiver="any")
    expected = _normalised(whole.feed(wire))
    pieced = StreamDecoder(receiver="any")
    got = []
    bounds = sorted({c % (len(wire) + 1) for c in cuts} | {0, len(wire)})
    for lo, hi in zip(bounds, bounds[1:]):
        got += pieced.feed(wire[lo:hi])
    assert _same_items(_normalised(got), expected)
    assert pieced.counters == whole.counters
    assert whole.counters.bytes == len(wire)


@given(st.lists(st.binary(max_size=600), max_size=8))
def test_random_bytes_never_raise(chunks):
    decoder = StreamDecoder(receiver="any")
    for chunk in chunks:
        decoder.feed(chunk)
    assert decoder.counters.bytes == sum(map(len, chunks))


@given(st.sampled_from(MsgType), st.binary(max_size=200), u32, descriptions)
def test_well_formed_frames_with_random_bodies_never_raise(msg_type, body, seq, description):
    # CRC-valid frames reach the body decoders, which random bytes alone almost never do
    decoder = StreamDecoder(description, receiver="any")
    items = decoder.feed(encode_frame(msg_type, seq, body))
    counters = decoder.counters
    assert counters.frames == 1
    assert len(items) + counters.framing_errors + counters.undecodable == 1
