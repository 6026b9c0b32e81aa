"""The reliability campaign (docs/reliability.md): each test measures a figure and checks the property behind it.

Short form by default (tens of seconds in all); ``TAPRIG_RELIABILITY=full`` runs the full campaign.
"""

from __future__ import annotations

import os
import random
import signal
import sqlite3
import subprocess
import sys
import textwrap
import threading
import time
import zlib
from pathlib import Path

import numpy as np
import pytest
import serial

from taprig.protocol import (
    ChannelInfo, Describe, Description, DeviceState, Encoding, Log, Reply, ReplyCode, Samples, Start, Status, StreamDecoder,
    encode_frame, encode_message,
)
from taprig.protocol.framing import MAX_ENCODED
from taprig.session.store import SessionError, SessionReader, SessionWriter

pytestmark = pytest.mark.reliability
FULL = os.environ.get("TAPRIG_RELIABILITY", "short") == "full"
RIGS = Path(__file__).resolve().parents[2] / "rigs"


def scale(short, full):
    return full if FULL else short


# -- decoder fuzzing -------------------------------------------------------------------------------------------

DESCRIPTION = Description(1, 0, "fuzz", "FUZZ-1", 1.0, 2000.0, 4096, 1000,
                          tuple(ChannelInfo(f"c{i}", e) for i, e in enumerate(
                              [Encoding.I16, Encoding.U16, Encoding.I32, Encoding.U32, Encoding.F32])), ())
ENCODINGS = [c.encoding for c in DESCRIPTION.channels]


def _valid_stream(rng: random.Random, n_frames: int, time_jump_us: int = 0) -> list[bytes]:
    frames = [encode_message(DESCRIPTION, 0, flags=1)]
    seq, scan, t_us = 1, 0, rng.randrange(2**32)
    for _ in range(n_frames):
        kind = rng.random()
        if kind < 0.8:
            n = rng.randrange(1, 6)
            data = np.array([[rng.randrange(0, 100) for _ in range(5)] for _ in range(n)], dtype=np.float64)
            msg = Samples(t_us=t_us & 0xFFFFFFFF, period_ns=500_000, first_scan=scan & 0xFFFFFFFF,
                          channel_mask=0b11111, data=data)
            frames.append(encode_message(msg, seq, encodings=ENCODINGS))
            scan += n
            t_us += time_jump_us or n * 500
        elif kind < 0.9:
            frames.append(encode_message(Status(5000, 2500, rng.randrange(2**32), 0, 0, DeviceState.STREAMING), seq))
        elif kind < 0.95:
            frames.append(encode_message(Reply(rng.randrange(1, 65535), ReplyCode.OK, ""), seq))
        else:
            frames.append(encode_message(Log(20, "note " * rng.randrange(5)), seq))
        seq += 1
    return frames


def _mutations(rng: random.Random):
    """Endless fuzz inputs by kind: (kind, list of chunks), mutated from a pool of valid streams."""
    kinds = ["random", "bit flips", "truncation", "reorder", "giant length", "type x length", "time jumps"]
    pool = [_valid_stream(rng, 6) for _ in range(64)]
    jumps = [_valid_stream(rng, 20, time_jump_us=rng.choice([2_000_000_000, 2**31 - 1])) for _ in range(16)]
    while True:
        kind = rng.choice(kinds)
        if kind == "random":
            yield kind, [rng.randbytes(rng.randrange(1, 400))]
        elif kind == "bit flips":
            data = bytearray(b"".join(rng.choice(pool)))
            for _ in range(rng.randrange(1, 8)):
                data[rng.randrange(len(data))] ^= 1 << rng.randrange(8)
            yield kind, [bytes(data)]
        elif kind == "truncation":
            data = b"".join(rng.choice(pool))
            cut = rng.randrange(len(data))
            yield kind, [data[:cut], data[rng.randrange(len(data)):]]
        elif kind == "reorder":
            frames = list(rng.choice(pool))
            rng.shuffle(frames)
            yield kind, frames
        elif kind == "giant length":
            yield kind, [bytes([rng.randrange(1, 256)]) * rng.randrange(MAX_ENCODED - 10, 3 * MAX_ENCODED), b"\x00"]
        elif kind == "type x length":
            msg_type = rng.randrange(256)
            body = rng.randbytes(rng.choice([0, 1, 2, 3, 7, 12, 13, 24, 25, 60, 255, 4000]))
            yield kind, [encode_frame(msg_type, rng.randrange(2**32), body, flags=rng.randrange(4))]
        else:
            yield kind, [b"".join(rng.choice(jumps))]


def test_decoder_fuzzing_never_raises(figure):
    n_inputs = scale(6_000, 1_050_000)
    rng = random.Random(1)
    exceptions = 0
    by_kind: dict[str, int] = {}
    decoder = StreamDecoder()
    holding = False
    for i, (kind, chunks) in zip(range(n_inputs), _mutations(rng)):
        by_kind[kind] = by_kind.get(kind, 0) + 1
        if i % 50 == 0:
            try:
                decoder.flush(), decoder.take_tags()  # what a holding decoder still held
            except Exception:
                exceptions += 1
            decoder = StreamDecoder()  # fresh state now and then; otherwise one long, ever-confused stream
            holding = (i // 50) % 2 == 1  # every other decoder holds its SAMPLES across chunks (a fast replay)
        for chunk in chunks:
            try:
                decoder.feed(chunk, tag=i if holding else None)
            except Exception:  # the property under test: never
                exceptions += 1
    # Long time jumps for millions of frames (the campaign's OverflowError): one decoder fed a long stream.
    jumper = StreamDecoder()
    stream = b"".join(_valid_stream(rng, 2000, time_jump_us=2_000_000_000))
    for _ in range(scale(5, 1200)):
        try:
            jumper.feed(stream)
        except Exception:
            exceptions += 1
    figure("decoder fuzz inputs", n_inputs, "inputs", exceptions=exceptions, **by_kind)
    assert exceptions == 0


def test_crc32_false_accepts_stay_at_crc32s_rate(figure):
    # Corrupt valid frames by random bit flips (≥ 2 bits; COBS kept intact by flipping within non-zero bytes) and
    # count corrupted frames the decoder accepted as valid. CRC-32 catches every 1–3-bit error in frames this
    # short and lets through about 2⁻³² of random corruptions (Koopman, "32-Bit Cyclic Redundancy Codes for
    # Internet Applications", DSN 2002).
    n_frames = scale(6_000, 200_000)
    rng = random.Random(2)
    frames = _valid_stream(rng, 200)[1:]
    nonzero = [[p for p in range(len(f) - 1) if f[p]] for f in frames]
    decoder = StreamDecoder(DESCRIPTION)
    accepted = corrupted = 0
    for i in range(n_frames):
        frame = bytearray(frames[i % len(frames)])
        positions = nonzero[i % len(frames)]
        for _ in range(rng.randrange(2, 9)):
            p = rng.choice(positions)
            bit = 1 << rng.randrange(8)
            if frame[p] ^ bit:
                frame[p] ^= bit
        if bytes(frame) == frames[i % len(frames)]:
            continue
        corrupted += 1
        before = decoder.counters.frames
        decoder.feed(bytes(frame))
        accepted += decoder.counters.frames - before
    rate = accepted / corrupted
    figure("corrupted frames accepted", accepted, f"of {corrupted}", rate=rate, crc32_rate=2**-32)
    # With 2⁻³² per frame, a single accept in this many frames has odds below 1e-4.
    assert accepted == 0


# -- kill -9 at random moments ---------------------------------------------------------------------------------

CHILD = textwrap.dedent("""
    import sys, time
    from taprig.session.store import SessionWriter
    w = SessionWriter(sys.argv[1], {"rig_id": "kill"})
    print("open", flush=True)
    i = 0
    while True:
        w.append_chunk(i.to_bytes(8, "little") * 16, time.time_ns(), scans=1)
        i += 1
        time.sleep(0.001)
""")


@pytest.mark.skipif(os.name != "posix", reason="kill -9 is POSIX")
def test_kill_minus_nine_at_random_moments(tmp_path, figure):
    kills = scale(4, 60)
    rng = random.Random(3)
    windows, intact, at_creation = [], 0, 0
    for k in range(kills):
        path = tmp_path / f"k{k}.taprig"
        child = subprocess.Popen([sys.executable, "-c", CHILD, str(path)], stdout=subprocess.PIPE, text=True)
        early = k % 5 == 0  # every fifth kill lands around the file's creation
        if not early:
            child.stdout.readline()
        threading.Event().wait(rng.uniform(0.0, 0.05) if early else rng.uniform(0.1, 0.8))  # the random moment
        kill_ns = time.time_ns()
        child.send_signal(signal.SIGKILL)
        child.wait(10)
        child.stdout.close()
        if not path.exists():
            at_creation += 1
            SessionWriter(path, {}).close()  # the name is free for the next run
            continue
        with SessionReader(path) as reader:
            assert reader.integrity_check() == "ok" and reader.meta["rig_id"] == "kill"
            chunks = list(reader.chunks())
        numbers = [int.from_bytes(c.data[:8], "little") for c in chunks]
        assert numbers == list(range(len(numbers)))  # every committed chunk, in order, none torn
        intact += 1
        if chunks:
            windows.append((kill_ns - chunks[-1].host_ns) / 1e6)
    worst = max(windows) if windows else float("nan")
    figure("kill -9: sessions intact", intact, f"of {kills - at_creation} kills after creation",
           killed_at_creation=at_creation, loss_window_ms_max=round(worst, 1),
           loss_window_ms_median=round(float(np.median(windows)), 1) if windows else None, commit_bound_ms=250)
    assert intact == kills - at_creation
    # The loss window (newest committed chunk to the kill) is the commit interval plus the disk's commit time and
    # the child's scheduling; 1 s leaves room for a loaded CI machine while catching a writer that stops committing.
    assert worst < 1000


# -- storage faults: read-only, full, deleted -------------------------------------------------------------------

@pytest.fixture
def tmpfs(tmp_path):
    mount = tmp_path / "fs"
    mount.mkdir()
    if subprocess.run(["mount", "-t", "tmpfs", "-o", "size=4m", "tmpfs", str(mount)], capture_output=True).returncode:
        pytest.skip("cannot mount a tmpfs here (needs root)")
    try:
        yield mount
    finally:
        subprocess.run(["umount", "-l", str(mount)], check=False)


def test_storage_faults_each_end_recording_with_the_reason(tmpfs, figure):
    outcomes = {}
    # read-only at the start
    subprocess.run(["mount", "-o", "remount,ro", str(tmpfs)], check=True)
    with pytest.raises(SessionError, match="read-only") as info:
        SessionWriter(tmpfs / "ro.taprig", {})
    outcomes["read-only folder"] = str(info.value)
    subprocess.run(["mount", "-o", "remount,rw", str(tmpfs)], check=True)
    # read-only in the middle of a run
    writer = SessionWriter(tmpfs / "mid.taprig", {}, commit_interval_s=0.005)
    writer.append_chunk(b"a" * 100, 1, scans=1)
    writer.close()
    outcomes["closed normally"] = writer.error
    # full
    writer = SessionWriter(tmpfs / "full.taprig", {}, commit_interval_s=0.002)
    i = 0
    while writer.error is None and i < 5000:
        writer.append_chunk(bytes(4096), i, scans=2)
        i += 1
        if i % 64 == 0:
            writer._room.acquire()
            writer._room.wait_for(lambda: writer._queued_bytes == 0 or writer.error is not None, 5)
            writer._room.release()
    writer.close()
    with SessionReader(tmpfs / "full.taprig") as reader:
        held = reader.chunk_summary()[0]
        assert "disk is full" in reader.meta["recording_error"] and reader.integrity_check() == "ok"
    assert held * 2 == writer.committed_scans
    outcomes["disk full"] = f"{held} chunks held, {writer.dropped_chunks} refused, recording_error written"
    figure("storage faults", len(outcomes), "cases", **outcomes)
    assert outcomes["closed normally"] is None


# -- damaged sessions ---------------------------------------------------------------------------------------------

def _reads(path: Path) -> str:
    """Read a session the ways the commands do; return 'ok' or 'refused' (a SessionError); anything else raises."""
    from taprig.session.api import open_session
    from taprig.session.replay import Replay

    try:
        session = open_session(path)
        session.summary()
        with Replay(path) as replay:
            for _ in replay:
                pass
        return "ok"
    except SessionError:
        return "refused"


@pytest.fixture(scope="module")
def recorded(tmp_path_factory):
    from taprig.bench.bench_replay import Setpoint, record_simulated
    from taprig.sim import SimOptions

    path = tmp_path_factory.mktemp("campaign") / "base.taprig"
    record_simulated(RIGS / "naca0012-20tap.toml", path, 1.0, 200.0, SimOptions(seed=4, fan_tau=0.1),
                     [Setpoint(0.0, "fan", 0.5)])
    return path


def test_damaged_sessions_are_read_or_refused_never_crash(tmp_path, recorded, figure):
    rng = random.Random(5)
    data = recorded.read_bytes()
    outcomes = {"ok": 0, "refused": 0}
    n = scale(12, 200)
    for i in range(n):
        path = tmp_path / f"d{i}.taprig"
        kind = i % 3
        if kind == 0:
            path.write_bytes(data[: rng.randrange(100, len(data))])
        elif kind == 1:
            damaged = bytearray(data)
            for _ in range(rng.randrange(1, 20)):
                damaged[rng.randrange(100, len(damaged))] ^= 1 << rng.randrange(8)
            path.write_bytes(bytes(damaged))
        else:
            path.write_bytes(data)
            con = sqlite3.connect(path)
            table, column, value = rng.choice([
                ("chunks", "data", "'text'"), ("chunks", "host_ns", "'x'"), ("events", "data", "'{'"),
                ("meta", "value", "'1.0'"), ("snapshots", "text", "'[[['"), ("chunks", "data", "x'00ff00'"),
                ("events", "data", "'{\"actuator\": \"fan\", \"value\": \"ten\"}'")])
            con.execute(f"UPDATE {table} SET {column} = {value} WHERE rowid = "
                        f"(SELECT rowid FROM {table} ORDER BY random() LIMIT 1)")
            con.commit()
            con.close()
        outcomes[_reads(path)] += 1
    figure("damaged sessions", n, "files", **outcomes)
    assert outcomes["ok"] + outcomes["refused"] == n


# -- link faults on the simulated rig: the host's counters equal the simulator's tally --------------------------

@pytest.mark.parametrize("faults", ["ber=1e-5", "ber=1e-3", "burst_rate=2&burst_frames=4", "reset=0.6,1.4"])
def test_link_faults_counted_exactly(faults, figure):
    from taprig.link import Link

    ports = []

    def opener(url):
        port = serial.serial_for_url(url, timeout=0.05)
        ports.append(port)
        return port

    seconds = scale(2.0, 30.0)
    url = f"sim://{RIGS / 'naca0012-20tap.toml'}?seed=8&speed=max&watchdog_ms=0&{faults}"
    link = Link(url, heartbeat=False, opener=opener)
    link.open()
    try:
        link.start_stream(1000.0)
        device = ports[0].device
        deadline = time.monotonic() + 120
        tick = threading.Event()
        while device.now_ns < seconds * 1e9 and time.monotonic() < deadline:
            tick.wait(0.01)
        link.stop_stream()
    finally:
        link.close()
    tally, live = device.tally, link.counters
    figure(f"link faults {faults}", live.frames, "frames", counters=live.as_dict(), tally=tally.as_dict())
    assert live.crc_errors + live.framing_errors == tally.frames_corrupted
    assert live.resets - 1 == tally.resets
    if not device.faults.last_sample_lost:
        assert (live.gaps, live.frames_lost, live.scans_lost) == (tally.gaps, tally.frames_lost, tally.scans_lost)
