"""Benchmark ``link``: bytes through a real pseudo-terminal into the link's reader and decoder, end to end.

A writer process pushes 64-channel i32 ``SAMPLES`` frames (15 scans each, the most that fit a 4096-byte frame) at
full speed into the master side of a POSIX pty, in large writes (pty buffers are small). The host reads the slave
side through pyserial with :class:`taprig.link.Link` (bulk reads, one decoder, subscribers), exactly as it reads a
board. In the same run, the same kind of data goes through two naive loops: ``read_until(b"\\x00")`` with one
decoder call per frame, and a ``readline()`` CSV logger (one text line per scan). Both read one byte per system
call inside pyserial, which is what the link avoids. Windows has no pty: the suite returns a note instead.
"""

from __future__ import annotations

import os
import subprocess
import sys
import threading
import time

import numpy as np

from taprig.bench import Record

N_CHANNELS = 64
SCANS_PER_FRAME = 15                      # 24 + 15 × 64 × 4 = 3864-byte body: the most that fits MAX_FRAME
TARGET_RATE = 10e6                        # channel-samples/s end to end (issue 2)
TARGET_RATIO = 500.0                      # × the naive loops
_WRITE_CHUNK = 1 << 16


def _description():
    from taprig.protocol import ChannelInfo, Description, Encoding

    channels = tuple(ChannelInfo(f"tap_{i}", Encoding.I32) for i in range(N_CHANNELS))
    return Description(1, 0, "bench-writer", "BENCH-0", 1.0, 20000.0, 4096, 1000, channels, ())


def _scans(first: int, n: int) -> np.ndarray:
    """Deterministic 24-bit bridge-ADC-like counts (sign-extended into i32), n scans from scan ``first``."""
    rng = np.random.default_rng(first)
    return rng.integers(-(1 << 23), 1 << 23, size=(n, N_CHANNELS), dtype=np.int32)


def _frames_payload(n_frames: int) -> bytes:
    from taprig.protocol import Encoding, Samples, encode_message

    encodings = [Encoding.I32] * N_CHANNELS
    parts = [b"\x00" + encode_message(_description(), 0)]
    data = _scans(0, SCANS_PER_FRAME)
    mask = (1 << N_CHANNELS) - 1
    for k in range(n_frames):
        first = k * SCANS_PER_FRAME
        block = Samples(t_us=first * 100, period_ns=100_000, first_scan=first, channel_mask=mask, data=data)
        parts.append(encode_message(block, k + 1, encodings=encodings))
    return b"".join(parts)


def _csv_payload(n_lines: int) -> bytes:
    rows = np.vstack([_scans(0, SCANS_PER_FRAME)] * (n_lines // SCANS_PER_FRAME + 1))[:n_lines]
    return "".join(f"{i}," + ",".join(map(str, row)) + "\n" for i, row in enumerate(rows.tolist())).encode("ascii")


def _writer_main(argv: list[str]) -> None:
    """Writer process: build the payload, say its length on stdout, then push it into the pty master fd."""
    fd, kind, count = int(argv[0]), argv[1], int(argv[2])
    payload = _frames_payload(count) if kind == "frames" else _csv_payload(count)
    print(len(payload), flush=True)
    view = memoryview(payload)
    while view:
        view = view[os.write(fd, view[:_WRITE_CHUNK]):]


class _Writer:
    """A writer process on a fresh pty; ``path`` is the slave to open, ``size`` known once ``ready()`` returns."""

    def __init__(self):
        import tty

        self.master, self._slave = os.openpty()
        tty.setraw(self._slave)
        self.path = os.ttyname(self._slave)
        self.proc: subprocess.Popen | None = None
        self.size = 0

    def start(self, kind: str, count: int) -> None:
        code = "import sys; from taprig.bench.bench_link import _writer_main; _writer_main(sys.argv[1:])"
        self.proc = subprocess.Popen([sys.executable, "-c", code, str(self.master), kind, str(count)],
                                     pass_fds=[self.master], stdout=subprocess.PIPE, text=True)

    def ready(self) -> int:
        """Block until the payload is built; return its size [bytes]. Writing starts right after."""
        line = self.proc.stdout.readline()
        if not line.strip():
            raise RuntimeError(f"bench writer exited before writing (code {self.proc.wait(10)})")
        self.size = int(line)
        return self.size

    def close(self) -> None:
        if self.proc is not None:
            if self.proc.poll() is None:
                self.proc.kill()
            self.proc.wait(10)
            self.proc.stdout.close()
        for fd in (self.master, self._slave):
            os.close(fd)


def _run_link(n_frames: int) -> dict:
    """Frames through :class:`Link` (reader thread, bulk reads, decoder, a subscriber counting samples)."""
    import serial

    from taprig.link import Link
    from taprig.protocol import RawBlock

    writer = _Writer()
    totals = {"bytes": 0, "samples": 0, "t_last": 0.0}
    done = threading.Event()

    def on_chunk(chunk, host_time_ns, items):
        totals["bytes"] += len(chunk)
        totals["samples"] += sum(item.counts.size for item in items if isinstance(item, RawBlock))
        totals["t_last"] = time.perf_counter()
        if writer.size and totals["bytes"] >= writer.size:
            done.set()

    link = Link(writer.path, heartbeat=False, reconnect=False,
                opener=lambda path: serial.Serial(path, timeout=0.05, exclusive=True))
    link.subscribe(on_chunk=on_chunk)
    try:
        link.open(handshake=False)
        writer.start("frames", n_frames)
        writer.ready()
        t0 = time.perf_counter()
        done.wait(60.0)
        elapsed = totals["t_last"] - t0
        counters = link.counters
    finally:
        link.close()
        writer.close()
    complete = counters.frames == n_frames + 1 and counters.frames_lost == 0 and counters.crc_errors == 0
    return {"elapsed": elapsed, "samples": totals["samples"], "frames": counters.frames - 1,
            "bytes": totals["bytes"], "complete": complete}


def _run_naive(kind: str, count: int) -> dict:
    """The naive loops on their own pty: ``read_until`` + per-frame decode, or a ``readline`` CSV logger."""
    import serial

    from taprig.protocol import RawBlock, StreamDecoder

    writer = _Writer()
    port = serial.Serial(writer.path, timeout=1.0, exclusive=True)
    samples = units = 0
    try:
        writer.start(kind, count)
        writer.ready()
        t0 = time.perf_counter()
        if kind == "frames":
            decoder = StreamDecoder()
            while units < count:
                frame = port.read_until(b"\x00")
                if not frame:
                    break
                items = decoder.feed(frame)
                samples += sum(item.counts.size for item in items if isinstance(item, RawBlock))
                units = decoder.counters.frames - 1
        else:
            while units < count:
                line = port.readline()
                if not line:
                    break
                samples += len([int(v) for v in line.split(b",")[1:]])
                units += 1
        elapsed = time.perf_counter() - t0
    finally:
        port.close()
        writer.close()
    return {"elapsed": elapsed, "samples": samples, "units": units}


def run(quick: bool) -> list[Record]:
    """Measure the link end to end over a pty, beside the two naive loops on the same kind of data."""
    if not hasattr(os, "openpty") or sys.platform == "win32":
        return [Record("link: skipped, needs POSIX pseudo-terminals (os.openpty), which Windows lacks", 0.0, "-")]
    n_frames, repeats, n_naive_frames, n_lines = (3_000, 1, 8, 60) if quick else (12_000, 3, 40, 400)
    # The median of a few runs: the writer, the kernel's pty worker and the reader share the cores.
    runs = sorted((_run_link(n_frames) for _ in range(repeats)), key=lambda r: r["samples"] / r["elapsed"])
    fast = runs[len(runs) // 2]
    until = _run_naive("frames", n_naive_frames)
    lines = _run_naive("csv", n_lines)
    rate = fast["samples"] / fast["elapsed"]
    frame_rate = fast["frames"] / fast["elapsed"]
    until_rate = until["samples"] / until["elapsed"]
    until_frame_rate = until["units"] / until["elapsed"]
    lines_rate = lines["samples"] / lines["elapsed"]
    note = "" if all(r["complete"] for r in runs) else " [INCOMPLETE: frames lost or corrupt on the pty]"
    target = f">= {TARGET_RATE:.0e} /s and >= {TARGET_RATIO:g}x naive"
    return [
        Record(f"link.pty_end_to_end vs read_until+decode{note}", rate, "channel-samples/s", until_rate,
               rate / until_rate, target),
        Record("link.pty_end_to_end vs readline CSV logger", rate, "channel-samples/s", lines_rate,
               rate / lines_rate, target),
        Record("link.pty_frames vs read_until+decode", frame_rate, "frames/s", until_frame_rate,
               frame_rate / until_frame_rate),
        Record("link.pty_measured_byte_rate", fast["bytes"] / fast["elapsed"] / 1e6, "MB/s"),
    ]
