"""Injected link faults show up in the host decoder's counters exactly as injected (PROTOCOL.md §5)."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from taprig.protocol import Start, StreamDecoder, encode_frame
from taprig.sim import SimOptions
from taprig.sim.faults import flip_bits


def _stream_with_faults(host, seconds: float, **faults):
    """Stream 64 channels at 2 kHz with the faults, until the latest sample frame went out intact."""
    h = host("bench-64", base=SimOptions(seed=faults.pop("seed", 5), watchdog_ms=0), **faults)
    h.send(Start(1, 2000.0, (1 << 64) - 1, 0))
    h.step(seconds, chunk_s=0.05)
    for _ in range(200):  # a lost frame is seen by the host only once a later one arrives
        if not h.device.faults.last_sample_lost:
            break
        h.step(0.01)
    return h


def _assert_counted_exactly(h) -> None:
    c, t = h.decoder.counters, h.device.tally
    assert c.crc_errors + c.framing_errors == t.frames_corrupted
    assert c.frames_lost == t.frames_lost
    assert c.gaps == t.gaps
    assert c.scans_lost == t.scans_lost
    assert c.duplicates == c.late == c.oversize == c.undecodable == 0


def test_bit_errors_are_counted_exactly(host):
    h = _stream_with_faults(host, 3.0, ber=3e-6)
    assert h.device.tally.frames_corrupted >= 20  # enough to mean something at this rate
    _assert_counted_exactly(h)


def test_burst_drops_are_counted_exactly(host):
    h = _stream_with_faults(host, 4.0, burst_rate=2.0, burst_frames=3, seed=8)
    t = h.device.tally
    assert t.bursts >= 3 and t.frames_dropped == 3 * t.bursts
    _assert_counted_exactly(h)


def test_bit_errors_and_bursts_together(host):
    h = _stream_with_faults(host, 3.0, ber=2e-6, burst_rate=3.0, burst_frames=2, seed=21)
    assert h.device.tally.frames_corrupted and h.device.tally.bursts
    _assert_counted_exactly(h)


def test_scheduled_resets_are_seen_as_resets(host):
    h = host("cylinder", reset=(0.5, 1.25), watchdog_ms=0)
    h.send(Start(1, 100.0, 1, 0))
    h.step(2.0, chunk_s=0.1)
    assert h.device.tally.resets == 2
    assert h.decoder.counters.resets == 1 + 2  # the boot at open, then each reboot
    assert h.decoder.counters.gaps == 0  # a reset restarts the sequence: not a gap (PROTOCOL.md §5)


def test_boot_text_is_one_framing_error(host):
    h = host("cylinder", boot_text=True)
    h.step(0.01)
    c = h.decoder.counters
    assert c.framing_errors + c.crc_errors == 1 and c.frames == 2


def test_disconnect_stops_the_board(host):
    h = host("cylinder", disconnect=0.3, watchdog_ms=0)
    h.send(Start(1, 100.0, 1, 0))
    h.step(1.0, chunk_s=0.1)
    assert h.device.disconnected
    assert h.blocks().t_ns[-1] <= 0.3e9
    assert h.device.read() == b""


def test_faults_are_deterministic_for_a_seed(host):
    a = _stream_with_faults(host, 1.0, ber=3e-6, burst_rate=2.0, seed=4)
    b = _stream_with_faults(host, 1.0, ber=3e-6, burst_rate=2.0, seed=4)
    assert a.raw == b.raw and a.device.tally == b.device.tally


@settings(max_examples=60)
@given(body=st.binary(min_size=0, max_size=600), flips=st.integers(1, 40), seed=st.integers(0, 2**32 - 1))
def test_a_corrupted_frame_is_exactly_one_error(body, flips, seed):
    frame = encode_frame(0x7E, 3, body)  # an unknown type: any body is well formed
    bad = flip_bits(frame, flips, np.random.default_rng(seed))
    assert len(bad) == len(frame) and bad[-1] == 0 and 0 not in bad[:-1]
    assert sum(a != b for a, b in zip(frame, bad)) == min(flips, len(frame) - 1)
    decoder = StreamDecoder()
    decoder.feed(bad + frame)
    c = decoder.counters
    # CRC-32 detects every error burst of up to 32 bits and all odd-weight errors; for the rest a chance of
    # 2^-32 (published property of CRC-32, from memory): the corrupted frame is one error, the clean one a frame
    assert c.crc_errors + c.framing_errors == 1 and c.frames == 1


@pytest.mark.parametrize("ber", [0.0, 1e-4])
def test_control_frames_pass_intact(host, ber):
    h = host("cylinder", ber=ber, watchdog_ms=0)
    h.send(Start(1, 200.0, 1, 0))
    h.step(1.0)
    assert [r.req for r in h.replies()] == [1]
