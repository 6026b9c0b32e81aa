"""``taprig bench decode``: in-memory decoder throughput on 64-channel int32 ``SAMPLES`` frames.

The stream is 15 scans × 64 channels of 24-bit counts per frame (3878 encoded bytes, near the 4096-byte limit),
fed to a fresh :class:`~taprig.protocol.StreamDecoder` in 64 KiB chunks, as a serial link would hand them over.
Two baselines run on the same scans in the same process:

- *naive per-frame*: split on delimiters, a pure-Python COBS decoder, ``zlib.crc32`` and ``struct.unpack`` of every
  frame, values collected in a list and turned into one array at the end;
- *ASCII CSV*: the same scans as text lines, parsed with ``split(",")`` and ``float`` per line, the way a board
  printing comma-separated values is usually read.

All three produce the same float64 array (checked), so the figures compare like with like.
"""

from __future__ import annotations

import struct
import zlib

import numpy as np

from taprig.bench import Record, best_of
from taprig.protocol import ChannelInfo, Description, Encoding, Samples, StreamDecoder, encode_message

N_CHANNELS = 64
SCANS_PER_FRAME = 15  # (4084 − 24) // (64 × 4): the most 64 × i32 scans one frame holds
CHUNK = 65536
TARGET_RATE = 20e6
TARGET_RATIO = 3.0


def _description() -> Description:
    channels = tuple(ChannelInfo(f"tap{i:02d}", Encoding.I32) for i in range(N_CHANNELS))
    return Description(1, 0, "bench", "bench", 1.0, 2000.0, 4096, 1000, channels, ())


def _workload(n_frames: int) -> tuple[bytes, str, np.ndarray]:
    """Return the framed stream, the same scans as CSV text, and the scans themselves."""
    rng = np.random.default_rng(20240601)
    scans = rng.integers(-2**23, 2**23, (n_frames * SCANS_PER_FRAME, N_CHANNELS)).astype(np.float64)
    description = _description()
    encodings = [Encoding.I32] * N_CHANNELS
    frames = [encode_message(description, 0, flags=1)]
    for i in range(n_frames):
        block = scans[i * SCANS_PER_FRAME:(i + 1) * SCANS_PER_FRAME]
        msg = Samples(1000 * SCANS_PER_FRAME * i, 1_000_000, SCANS_PER_FRAME * i, 2**N_CHANNELS - 1, block)
        frames.append(encode_message(msg, i + 1, encodings=encodings))
    text = "".join(",".join(str(int(v)) for v in row) + "\n" for row in scans)
    return b"".join(frames), text, scans


def _decode_stream(wire: bytes) -> np.ndarray:
    decoder = StreamDecoder()
    blocks = []
    for start in range(0, len(wire), CHUNK):
        blocks += [item.counts for item in decoder.feed(wire[start:start + CHUNK]) if hasattr(item, "counts")]
    return np.concatenate(blocks)


def _python_cobs_decode(encoded: bytes) -> bytes:
    out = bytearray()
    pos = 0
    while pos < len(encoded):
        code = encoded[pos]
        if pos + code > len(encoded):
            raise ValueError("COBS block cut short")
        out += encoded[pos + 1:pos + code]
        pos += code
        if code != 0xFF and pos < len(encoded):
            out.append(0)
    return bytes(out)


def _decode_naive(wire: bytes) -> np.ndarray:
    values: list[float] = []
    data_format = struct.Struct(f"<{SCANS_PER_FRAME * N_CHANNELS}i")
    for encoded in wire.split(b"\x00"):
        if not encoded:
            continue
        raw = _python_cobs_decode(encoded)
        (crc,) = struct.unpack("<I", raw[-4:])
        if zlib.crc32(raw[:-4]) != crc:
            continue
        msg_type, _flags, length, _seq = struct.unpack("<BBHI", raw[:8])
        if msg_type != 0x02 or length != len(raw) - 12:
            continue
        _t_us, _period, _first, n_scans, _, _mask = struct.unpack("<IIIHHQ", raw[8:32])
        if n_scans == SCANS_PER_FRAME:
            values.extend(data_format.unpack(raw[32:-4]))
    return np.array(values, dtype=np.float64).reshape(-1, N_CHANNELS)


def _parse_csv(text: str) -> np.ndarray:
    rows = [[float(field) for field in line.split(",")] for line in text.splitlines() if line]
    return np.array(rows, dtype=np.float64)


def run(quick: bool) -> list[Record]:
    """Measure the decoder and both baselines; return rate records with ratios to the baselines."""
    n_frames, repeats = (150, 3) if quick else (2000, 5)
    wire, text, scans = _workload(n_frames)
    for decode, source in ((_decode_stream, wire), (_decode_naive, wire), (_parse_csv, text)):
        if not np.array_equal(decode(source), scans):
            raise AssertionError(f"{decode.__name__} does not reproduce the scans")
    samples = scans.size
    t_decoder = best_of(lambda: _decode_stream(wire), repeats)
    t_naive = best_of(lambda: _decode_naive(wire), repeats)
    t_csv = best_of(lambda: _parse_csv(text), repeats)
    rate, naive_rate, csv_rate = samples / t_decoder, samples / t_naive, samples / t_csv
    mb, naive_mb, csv_mb = len(wire) / t_decoder / 1e6, len(wire) / t_naive / 1e6, len(text) / t_csv / 1e6
    return [
        Record("decode 64×i32 frames vs naive per-frame", rate, "channel-samples/s", naive_rate, rate / naive_rate,
               f"≥ {TARGET_RATE:.0e} channel-samples/s and ≥ {TARGET_RATIO:g}× naive"),
        Record("decode 64×i32 frames vs naive per-frame, bytes", mb, "MB/s", naive_mb, mb / naive_mb),
        Record("decode 64×i32 frames vs ASCII CSV lines", rate, "channel-samples/s", csv_rate, rate / csv_rate),
        Record("ASCII CSV lines parsed", csv_mb, "MB/s"),
    ]
