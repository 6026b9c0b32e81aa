"""StreamDecoder behaviour beyond the golden vectors: merging, accounting corners (PROTOCOL.md §5, §6), bad paths,
and the encoders' refusals."""

from __future__ import annotations

import numpy as np
import pytest

from taprig.protocol import (
    FLAG_BOOT,
    ChannelInfo,
    Description,
    DeviceState,
    Encoding,
    Heartbeat,
    Log,
    RawBlock,
    Reply,
    ReplyCode,
    Samples,
    Status,
    StreamDecoder,
    channels_to_mask,
    encode_frame,
    encode_message,
    mask_to_channels,
)

DESC = Description(1, 0, "fw 1", "uid", 1.0, 1000.0, 4096, 1000,
                   (ChannelInfo("a", Encoding.I16), ChannelInfo("b", Encoding.I16), ChannelInfo("c", Encoding.F32)),
                   ())
STATUS = Status(5000, 2000, 1, 0, 0, DeviceState.STREAMING)
I16 = [Encoding.I16, Encoding.I16]


def _samples(seq, first_scan, t_us=0, n=3, mask=0b011, encodings=I16, period_ns=1_000_000):
    width = len(mask_to_channels(mask))
    data = (np.arange(n * width, dtype=np.float64).reshape(n, width) + first_scan) % 1000
    return encode_message(Samples(t_us, period_ns, first_scan, mask, data), seq, encodings=encodings)


def test_consecutive_samples_of_one_feed_merge_into_one_block():
    decoder = StreamDecoder(DESC)
    wire = b"".join(_samples(i, 3 * i, t_us=3000 * i) for i in range(4))
    (block,) = decoder.feed(wire)
    assert block.n_scans == 12 and block.channels == (0, 1)
    # scan k of a block is at t_us + k · period_ns / 1000 (§6); the blocks are contiguous here
    np.testing.assert_array_equal(block.t_ns, np.arange(12) * 1_000_000)
    np.testing.assert_array_equal(block.scan_index, np.arange(12))
    assert block.t_ns.dtype == np.int64 and block.scan_index.dtype == np.int64


def test_blocks_split_at_other_items_channel_sets_and_feed_calls():
    decoder = StreamDecoder(DESC)
    wire = (_samples(0, 0) + encode_message(STATUS, 1) + _samples(2, 3) + _samples(3, 6, mask=0b101,
            encodings=[Encoding.I16, Encoding.F32]))
    items = decoder.feed(wire)
    assert [type(i).__name__ for i in items] == ["RawBlock", "Status", "RawBlock", "RawBlock"]
    assert items[3].channels == (0, 2)
    assert len(decoder.feed(_samples(4, 9)) + decoder.feed(_samples(5, 12))) == 2


def test_mixed_encodings_decode_per_channel():
    data = np.array([[-32768.0, 1.5], [32767.0, -2.25]])
    wire = encode_message(Samples(0, 10, 0, 0b101, data), 0, encodings=[Encoding.I16, Encoding.F32])
    (block,) = StreamDecoder(DESC).feed(wire + _samples(1, 2, mask=0b101, encodings=[Encoding.I16, Encoding.F32]))
    np.testing.assert_array_equal(block.counts[:2], data)
    assert block.n_scans == 5


def test_a_new_description_changes_the_encodings_of_a_mask():
    decoder = StreamDecoder(DESC)
    as_i16 = decoder.feed(_samples(0, 0, n=1, mask=0b1, encodings=[Encoding.I16]))[0]
    other = Description(**{**DESC.__dict__, "channels": (ChannelInfo("a", Encoding.U32),)})
    items = decoder.feed(encode_message(other, 1) + encode_message(
        Samples(0, 1, 1, 0b1, np.array([[4e9]])), 2, encodings=[Encoding.U32]))
    assert as_i16.counts.tolist() == [[0.0]]
    assert items[0] == other and decoder.description == other
    assert items[1].counts.tolist() == [[4e9]]


def test_samples_need_a_description_and_known_channels():
    decoder = StreamDecoder(receiver="any")
    assert decoder.feed(_samples(0, 0)) == []
    assert decoder.counters.undecodable == 1
    decoder = StreamDecoder(DESC)
    assert decoder.feed(_samples(0, 0, mask=0b1011, encodings=I16 + [Encoding.I16])) == []
    assert decoder.counters.undecodable == 1


def test_duplicate_is_dropped_and_late_is_delivered():
    decoder = StreamDecoder(receiver="any")
    seqs = [10, 11, 11, 9, 9, 12]
    items = decoder.feed(b"".join(encode_message(Heartbeat(s), s) for s in seqs))
    assert [i.req for i in items] == [10, 11, 9, 12]
    c = decoder.counters
    # 11 and the second 9 repeat the previous seq; 9 is behind the expected 12 (§5)
    assert (c.duplicates, c.late, c.gaps, c.frames) == (2, 1, 0, 6)


def test_a_jump_of_half_the_range_is_a_gap_and_beyond_it_is_late():
    decoder = StreamDecoder(receiver="any")
    decoder.feed(encode_message(Heartbeat(0), 0) + encode_message(Heartbeat(0), 2**31 + 1))
    assert (decoder.counters.gaps, decoder.counters.frames_lost) == (1, 2**31)
    decoder.feed(encode_message(Heartbeat(0), 5))  # expected 2**31 + 2: 5 is behind it by 2**31 - 3
    assert (decoder.counters.late, decoder.counters.gaps) == (1, 1)
    decoder.feed(encode_message(Heartbeat(0), 1))  # behind by 2**31 + 1, i.e. ahead by 2**31 - 1: a gap
    assert (decoder.counters.late, decoder.counters.gaps) == (1, 2)


def test_boot_flag_restarts_accounting_even_on_a_repeated_seq():
    decoder = StreamDecoder(DESC)
    wire = (encode_message(DESC, 0, FLAG_BOOT) + _samples(1, 0, t_us=4_000_000_000) + encode_message(DESC, 0, FLAG_BOOT)
            + _samples(1, 0, t_us=10))
    items = decoder.feed(wire)
    c = decoder.counters
    assert (c.resets, c.duplicates, c.gaps, c.late, c.scans_lost) == (2, 0, 0, 0, 0)
    assert items[3].t_ns[0] == 10_000  # the device clock restarted: no wrap is assumed across a reset


def test_time_unwraps_twice_and_a_late_block_does_not_move_the_reference():
    decoder = StreamDecoder(DESC)
    step = 2**31 - 1  # the largest forward step that cannot be a wrap (§6)
    t = 0
    times = []
    for seq in range(6):
        times.append(t)
        decoder.feed(_samples(seq, seq * 3, t_us=t % 2**32))
        t += step
    late = decoder.feed(_samples(4, 12, t_us=times[4] % 2**32))[0]  # a step back of less than 2**31 µs
    assert late.t_ns[0] == times[4] * 1000
    following = decoder.feed(_samples(6, 18, t_us=t % 2**32))[0]
    assert following.t_ns[0] == t * 1000 and t > 2 * 2**32
    assert decoder.counters.late == 1


def test_scan_index_unwraps_and_counts_losses():
    decoder = StreamDecoder(DESC)
    first = decoder.feed(_samples(0, 2**32 - 2))[0]
    after_wrap = decoder.feed(_samples(1, 1))[0]  # expected 2**32 + 1 ≡ 1: no loss
    gap = decoder.feed(_samples(2, 10))[0]  # expected 4: 6 lost
    np.testing.assert_array_equal(first.scan_index, [2**32 - 2, 2**32 - 1, 2**32])
    assert after_wrap.scan_index[0] == 2**32 + 1 and gap.scan_index[0] == 2**32 + 10
    assert decoder.counters.scans_lost == 6


def test_oversize_run_across_feeds_counts_once_and_keeps_no_backlog():
    decoder = StreamDecoder(receiver="any")
    for _ in range(300):
        decoder.feed(b"\x55" * 1000)
    assert decoder.counters.oversize == 1 and not decoder._carry
    items = decoder.feed(b"\x55" * 10 + b"\x00" + encode_message(Heartbeat(7), 0))
    assert items == [Heartbeat(7)] and decoder.counters.oversize == 1 and decoder.counters.framing_errors == 0


def test_feed_accepts_bytearray_and_memoryview():
    wire = encode_message(Log(20, "hi"), 0)
    decoder = StreamDecoder(receiver="any")
    assert decoder.feed(bytearray(wire[:5])) + decoder.feed(memoryview(wire)[5:]) == [Log(20, "hi")]


def test_counters_are_a_snapshot():
    decoder = StreamDecoder(receiver="any")
    snapshot = decoder.counters
    decoder.feed(encode_message(Heartbeat(1), 0))
    assert snapshot.frames == 0 and decoder.counters.frames == 1
    assert set(decoder.counters.as_dict()) == {
        "frames", "bytes", "framing_errors", "crc_errors", "oversize", "unknown_types", "gaps", "frames_lost",
        "scans_lost", "duplicates", "late", "resets", "undecodable"}


@pytest.mark.parametrize("msg_type,body", [
    (0x01, bytes([1, 0, 0, 0]) + bytes(13) + bytes([65])),  # 65 channels > 64
    (0x01, bytes([1, 0, 2, 0xC3, 0x28, 0]) + bytes(13) + bytes([0])),  # firmware is not UTF-8
    (0x03, bytes(16) + bytes([7])),  # state 7 unknown
    (0x04, bytes([1, 0, 9, 0])),  # reply code 9 unknown
])
def test_bad_field_values_are_framing_errors(msg_type, body):
    decoder = StreamDecoder(receiver="any")
    assert decoder.feed(encode_frame(msg_type, 0, body)) == []
    assert decoder.counters.framing_errors == 1 and decoder.counters.frames == 1


def test_an_unknown_encoding_is_kept_as_its_code():
    # PROTOCOL.md §2 (vector unknown_encoding): the description stays usable, that channel alone cannot be decoded
    (desc,) = StreamDecoder().feed(encode_frame(0x01, 0, bytes([1, 0, 0, 0]) + bytes(12) + bytes([1, 9, 0, 0])))
    assert desc.channels[0].encoding == 9 and not isinstance(desc.channels[0].encoding, Encoding)


def test_text_for_people_tolerates_bad_utf8_and_bodies_may_grow():
    wire = encode_frame(0x04, 0, bytes([5, 0, 0, 2, 0xC3, 0x28]) + b"future field")
    assert StreamDecoder(receiver="any").feed(wire) == [Reply(5, ReplyCode.OK, "\ufffd(")]


@pytest.mark.parametrize("make", [
    lambda: encode_message(Status(70000, 0, 0, 0, 0, DeviceState.IDLE), 0),
    lambda: encode_message(Reply(1, ReplyCode.OK, "x" * 256), 0),
    lambda: encode_message(Log(20, "x" * 5000), 0),
    lambda: encode_message(Samples(0, 0, 0, 0b11, np.zeros((2, 2))), 0),
    lambda: encode_message(Samples(0, 0, 0, 0b11, np.zeros((2, 3))), 0, encodings=I16),
    lambda: encode_message(Samples(0, 0, 0, 0b11, np.full((2, 2), 40000.0)), 0, encodings=I16),
    lambda: encode_message(Samples(0, 0, 0, 0b11, np.full((2, 2), np.nan)), 0, encodings=I16),
    lambda: encode_message(Samples(-1, 0, 0, 0b11, np.zeros((2, 2))), 0, encodings=I16),
    lambda: encode_message(Samples(0, 0, 0, 0, np.zeros((2, 0))), 0, encodings=[]),
])
def test_encoders_refuse_what_does_not_fit(make):
    with pytest.raises(ValueError):
        make()


def test_encode_message_refuses_other_objects():
    with pytest.raises(TypeError):
        encode_message(object(), 0)


def test_integer_counts_are_rounded_to_nearest():
    wire = encode_message(Samples(0, 0, 0, 0b11, np.array([[1.4, -1.6]])), 0, encodings=I16)
    assert StreamDecoder(DESC).feed(wire)[0].counts.tolist() == [[1.0, -2.0]]


def test_raw_block_concat():
    a = RawBlock(np.zeros((2, 1)), (3,), np.array([0, 1]), np.array([0, 1]))
    b = RawBlock(np.ones((1, 1)), (3,), np.array([2]), np.array([2]))
    joined = RawBlock.concat([a, b])
    assert joined.n_scans == 3 and joined.counts[:, 0].tolist() == [0, 0, 1] and joined.t_ns.tolist() == [0, 1, 2]
    assert RawBlock.concat([a]) is a
    with pytest.raises(ValueError):
        RawBlock.concat([])
    with pytest.raises(ValueError):
        RawBlock.concat([a, RawBlock(np.zeros((1, 1)), (4,), np.array([0]), np.array([0]))])


def test_mask_helpers():
    assert mask_to_channels(1 << 63 | 1) == (0, 63)
    assert channels_to_mask([63, 0]) == 1 << 63 | 1
    with pytest.raises(ValueError):
        channels_to_mask([64])
