"""Regressions of what the reliability campaign found (docs/reliability.md): each defect reproduced as a test.

Data loss and over-claiming first (a run that loses data must say so and exit non-zero; a summary counts only what
the file holds), then crashes and hangs on bad input (one clear line, exit 1 or 2), then unclear messages.
"""

from __future__ import annotations

import os
import shutil
import sqlite3
import subprocess
import threading
from pathlib import Path

import numpy as np
import pytest

from taprig.cli import main
from taprig.protocol import Description, Encoding, ChannelInfo, Samples, StreamDecoder, encode_message
from taprig.session.store import SessionError, SessionReader, SessionWriter

RIGS = Path(__file__).resolve().parents[2] / "rigs"
AIRFOIL = RIGS / "naca0012-20tap.toml"
SIM = "sim://?seed=5&speed=max&watchdog_ms=0"


def run_cli(capsys, *argv) -> tuple[int, str, str]:
    code = main([os.fsdecode(a) if isinstance(a, bytes) else str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out, err


def one_line(err: str) -> str:
    lines = [line for line in err.strip().splitlines() if line.strip()]
    assert len(lines) == 1 and "Traceback" not in err and "internal error" not in err, err
    return lines[0]


def wait_for(predicate, timeout: float = 10.0) -> bool:
    tick = threading.Event()
    for _ in range(int(timeout / 0.01)):
        if predicate():
            return True
        tick.wait(0.01)
    return predicate()


# -- 1. data loss and results that claim too much --------------------------------------------------------------

def test_a_rig_path_that_is_not_utf8_records_normally(tmp_path, capsys):
    rig = tmp_path / os.fsdecode(b"rig_\xe9.toml")
    shutil.copy(AIRFOIL, rig)
    out = tmp_path / "run.taprig"
    code, stdout, err = run_cli(capsys, "record", "--rig", rig, "--port", SIM, "--duration", "0.5", "--no-dashboard", "-o", out,
                                "--quiet")
    assert code == 0, err
    with SessionReader(out) as reader:
        n_chunks = reader.chunk_summary()[0]
        assert n_chunks > 0 and "rig_\\xe9.toml" in reader.snapshots("rig")[0][1]
    held = int(stdout.split("recorded ")[1].split()[0])
    assert held > 0 and "NOT in the file" not in stdout


def test_a_writer_failure_ends_the_run_with_a_message_and_the_file_says_why(tmp_path, monkeypatch):
    def broken(self, by_table, chunk_info):
        raise TypeError("a defect in the writer")

    monkeypatch.setattr(SessionWriter, "_write", broken)
    path = tmp_path / "w.taprig"
    writer = SessionWriter(path, {}, commit_interval_s=0.01)
    writer.append_chunk(b"\x01\x02", 1, scans=5)
    assert wait_for(lambda: writer.error is not None)
    writer.append_chunk(b"\x03", 2, scans=7)
    writer.close()
    assert "internal error" in writer.error and "TypeError" in writer.error
    assert writer.committed_scans == 0 and writer.dropped_scans == 12
    monkeypatch.undo()
    with SessionReader(path) as reader:
        assert "internal error" in reader.meta["recording_error"] and reader.chunk_summary()[0] == 0


def test_a_reduction_failure_ends_the_run_non_zero(tmp_path, capsys):
    rig = tmp_path / "inf.toml"
    text = AIRFOIL.read_text()
    assert "a_per_pa = 0.000009" in text  # the barometer, the example's one ratiometric sensor
    rig.write_text(text.replace("a_per_pa = 0.000009", "a_per_pa = inf", 1))
    shutil.copy(RIGS / "bump-profile.csv", tmp_path)
    code, stdout, err = run_cli(capsys, "record", "--rig", rig, "--port", SIM, "--duration", "30", "--no-dashboard",
                                "-o", tmp_path / "r.taprig", "--quiet")
    assert code == 1 and "live reduction stopped" in err, err


def test_the_output_folder_deleted_mid_run_is_detected(tmp_path):
    folder = tmp_path / "sessions"
    folder.mkdir()
    writer = SessionWriter(folder / "run.taprig", {}, commit_interval_s=0.01)
    writer.append_chunk(b"x" * 100, 1, scans=10)
    assert wait_for(lambda: writer.committed_scans == 10)
    shutil.rmtree(folder)
    writer.append_chunk(b"y" * 100, 2, scans=10)
    writer.close()
    assert writer.error is not None and "folder was deleted" in writer.error
    assert writer.committed_scans == 10 and writer.dropped_scans == 10


@pytest.fixture
def small_disk(tmp_path):
    """A 3 MiB tmpfs (needs the right to mount; skipped otherwise)."""
    mount = tmp_path / "small"
    mount.mkdir()
    done = subprocess.run(["mount", "-t", "tmpfs", "-o", "size=3m", "tmpfs", str(mount)], capture_output=True)
    if done.returncode != 0:
        pytest.skip("cannot mount a small tmpfs here (needs root)")
    try:
        yield mount
    finally:
        subprocess.run(["umount", "-l", str(mount)], check=False)


def test_a_full_disk_keeps_room_to_close_and_the_counts_say_what_the_file_holds(small_disk):
    path = small_disk / "full.taprig"
    writer = SessionWriter(path, {"rig_id": "x"}, commit_interval_s=0.005)
    block = bytes(range(256)) * 16
    i = 0
    while writer.error is None and i < 4000:
        writer.append_chunk(block, i, scans=4)
        i += 1
        if i % 50 == 0:
            wait_for(lambda: writer.committed_chunks + writer.dropped_chunks >= i - 50, 5)
    writer.set_meta("counters", "{}")
    writer.close()
    assert writer.error is not None and "disk is full" in writer.error
    assert not (small_disk / ".full.taprig.reserve").exists()
    with SessionReader(path) as reader:
        n = reader.chunk_summary()[0]
        assert n == writer.committed_chunks and n * 4 == writer.committed_scans > 0
        assert "disk is full" in reader.meta["recording_error"] and reader.meta["counters"] == "{}"
        assert reader.integrity_check() == "ok"


def test_a_damaged_wal_is_detected_and_said(tmp_path, capsys):
    path = tmp_path / "live.taprig"
    writer = SessionWriter(path, {}, commit_interval_s=0.001)
    for i in range(30):
        writer.append_chunk(bytes([i]) * 200, i, scans=1)
        assert wait_for(lambda: writer.committed_chunks == i + 1)
    copy = tmp_path / "killed.taprig"
    shutil.copy(path, copy)
    shutil.copy(f"{path}-wal", f"{copy}-wal")  # as a kill -9 leaves it: the WAL not yet folded back in
    writer.close()
    wal = bytearray(Path(f"{copy}-wal").read_bytes())
    page = int.from_bytes(wal[8:12], "big")
    wal[32 + 24 + (24 + page) * 2 + 100] ^= 0x40  # one flipped bit in the third frame's page
    Path(f"{copy}-wal").write_bytes(bytes(wal))
    with SessionReader(copy) as reader:
        assert reader.warnings and "damaged" in reader.warnings[0]
        assert reader.chunk_summary()[0] < 30
    assert "warning" in capsys.readouterr().err
    with SessionReader(copy) as reader:  # the WAL is left as it was: every later reader says it too
        assert reader.warnings


def test_two_recorders_racing_for_one_name_one_wins_no_leftovers(tmp_path):
    path = tmp_path / "race.taprig"
    results = []

    def make():
        try:
            results.append(SessionWriter(path, {}))
        except SessionError as exc:
            results.append(exc)

    threads = [threading.Thread(target=make) for _ in range(4)]
    for t in threads:
        t.start()
    for t in threads:
        t.join(10)
    writers = [r for r in results if isinstance(r, SessionWriter)]
    errors = [r for r in results if isinstance(r, SessionError)]
    assert len(writers) == 1 and len(errors) == 3 and all("already exists" in str(e) for e in errors)
    writers[0].close()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["race.taprig"]


def test_a_new_session_file_is_never_seen_half_made(tmp_path):
    # The file appears under its name only with its header committed (made under a temporary name, then linked).
    path = tmp_path / "new.taprig"
    writer = SessionWriter(path, {"rig_id": "r"})
    with SessionReader(path) as reader:
        assert reader.meta["rig_id"] == "r"
    writer.close()


# -- 2. crashes and hangs ------------------------------------------------------------------------------------

def _edited(tmp_path: Path, source: Path, sql: str, name: str) -> Path:
    path = tmp_path / f"{name}.taprig"
    shutil.copy(source, path)
    con = sqlite3.connect(path)
    con.execute(sql)
    con.commit()
    con.close()
    return path


@pytest.fixture(scope="module")
def session(tmp_path_factory):
    from taprig.bench.bench_replay import Setpoint, record_simulated
    from taprig.sim import SimOptions

    path = tmp_path_factory.mktemp("damage") / "ok.taprig"
    record_simulated(AIRFOIL, path, 0.5, 200.0, SimOptions(seed=3, fan_rate=0.0, fan_tau=0.1),
                     [Setpoint(0.0, "fan", 0.5), Setpoint(0.1, "alpha", 0.05)])
    return path


DAMAGE = {
    "version 1.0": "UPDATE meta SET value = '1.0' WHERE key = 'format_version'",
    "version one": "UPDATE meta SET value = 'one' WHERE key = 'format_version'",
    "broken event JSON": "UPDATE events SET data = '{\"actuator\": ' WHERE id = 1",
    "chunk holding text": "UPDATE chunks SET data = 'hello' WHERE id = 2",
    "chunk host_ns x": "UPDATE chunks SET host_ns = 'x' WHERE id = 2",
    "setpoint ten": "UPDATE events SET data = '{\"actuator\": \"alpha\", \"value\": \"ten\"}' WHERE kind = 'setpoint'",
}


@pytest.mark.parametrize("damage", sorted(DAMAGE))
@pytest.mark.parametrize("command", [["info"], ["replay", "--fast", "--quiet"], ["export", "-o", "OUT.csv"]])
def test_damaged_sessions_are_one_line_errors(tmp_path, capsys, session, damage, command):
    path = _edited(tmp_path, session, DAMAGE[damage], damage.replace(" ", "_"))
    argv = [command[0], path] + [str(tmp_path / a) if a == "OUT.csv" else a for a in command[1:]]
    code, _, err = run_cli(capsys, *argv)
    if code == 0:  # info reads no chunk payloads or setpoints: fine as long as it does not crash
        assert command[0] == "info" and damage in ("chunk holding text", "setpoint ten", "broken event JSON"), err
        return
    assert code == 1 and "damaged" in one_line(err), err


@pytest.mark.parametrize("option", ["speed=1e12", "speed=1e300", "clock_ppm=-2e6", "clock_ppm=-1e6",
                                    "seed=" + "9" * 400, "watchdog_ms=70000", "ambient_c=nan", "reset=1e300"])
def test_absurd_simulator_options_are_refused_in_one_line(tmp_path, capsys, option):
    code, _, err = run_cli(capsys, "record", "--rig", AIRFOIL, "--port", f"sim://?{option}", "--duration", "1",
                           "-o", tmp_path / "x.taprig")
    line = one_line(err)
    assert code == 1 and option.split("=")[0] in line and "must" in line
    assert not (tmp_path / "x.taprig").exists()


def test_rig_files_at_the_limits_are_one_line_errors(tmp_path, capsys):
    deep = tmp_path / "deep.toml"
    deep.write_text("a = " + "[" * 100_000 + "]" * 100_000 + "\n")
    zero = tmp_path / "zero.toml"
    zero.write_text(AIRFOIL.read_text().replace('naca = "0012"', 'coordinates_file = "/dev/zero"'))
    baud = tmp_path / "baud.toml"
    baud.write_text(AIRFOIL.read_text().replace("baud = 921600", "baud = 1e20"))
    assert "1e20" in baud.read_text() and "/dev/zero" in zero.read_text()
    for path, words in ((deep, "nested too deeply"), (zero, "not a regular file"), (baud, "link.baud")):
        code, _, err = run_cli(capsys, "check", path)
        assert code == 1 and words in err and "Traceback" not in err, err


def test_a_baud_rate_no_port_takes_is_a_link_error():
    from taprig.link import LinkError, open_port

    with pytest.raises(LinkError, match="baud"):
        open_port("loop://", baudrate=10**20)


def _samples_frames(n: int, jump_us: int) -> bytes:
    frames = []
    for i in range(n):
        body = Samples(t_us=(i * jump_us) & 0xFFFFFFFF, period_ns=1000, first_scan=i, channel_mask=1,
                       data=np.array([[i]], dtype=np.int32))
        frames.append(encode_message(body, i, encodings=[Encoding.I32]))
    return b"".join(frames)


def test_the_decoder_never_raises_on_long_time_jumps():
    description = Description(1, 0, "t", "uid", 1.0, 1000.0, 4096, 0, (ChannelInfo("p", Encoding.I32),), ())
    decoder = StreamDecoder(description)
    decoder._time_ref = (0, (1 << 52) - 10)  # as after ~2.3 M frames jumping 2000 s each (the campaign's case)
    decoder._scan_next = 0
    blocks = []
    for _ in range(3):
        blocks += decoder.feed(_samples_frames(50, 2_000_000_000))
    t = np.concatenate([b.t_ns for b in blocks])
    assert t.dtype == np.int64 and (t >= 0).all() and decoder.counters.undecodable == 0


# -- 3. unclear messages ---------------------------------------------------------------------------------------

def test_a_latin1_rig_file_is_called_what_it_is(tmp_path, capsys):
    rig = tmp_path / "latin.toml"
    rig.write_bytes(AIRFOIL.read_bytes().replace(b"Symmetric", "Symétrique".encode("latin-1"), 1))
    code, _, err = run_cli(capsys, "check", rig)
    assert code == 1 and "not UTF-8" in err and "session" not in err, err


def test_a_rig_file_with_a_byte_order_mark_loads(tmp_path, capsys):
    rig = tmp_path / "bom.toml"
    rig.write_bytes(b"\xef\xbb\xbf" + AIRFOIL.read_bytes())
    code, _, err = run_cli(capsys, "check", rig, "--quiet")
    assert code == 0, err


def test_a_huge_scan_rate_says_the_limit(capsys):
    with pytest.raises(SystemExit):
        main(["record", "--rig", str(AIRFOIL), "--port", SIM, "--rate", "1e39"])
    assert "at most 3.4e+38 Hz" in capsys.readouterr().err


def test_check_refuses_relative_to_loops_that_record_would_refuse(tmp_path, capsys):
    text = AIRFOIL.read_text()
    loop = tmp_path / "loop.toml"
    # two extra differential channels, each relative to the other: the reducer refuses such a rig
    extra = ('\n[[channels]]\nindex = {i}\nname = "{name}"\nencoding = "u16"\nsensor = "tap"\n'
             'measures = "differential"\nrelative_to = "{other}"\n')
    loop.write_text(text + extra.format(i=40, name="ring_a", other="ring_b")
                    + extra.format(i=41, name="ring_b", other="ring_a"))
    code, _, err = run_cli(capsys, "check", loop)
    assert code == 1 and "loop" in err and "ring_a → ring_b → ring_a" in err, err
