"""Session files: round trip, crash safety under kill -9, disk full, and files that are not sessions."""

from __future__ import annotations

import os
import signal
import sqlite3
import subprocess
import sys
import textwrap

import pytest

from taprig.session.store import FORMAT_VERSION, SessionError, SessionReader, SessionWriter


def chunk_payload(i: int) -> bytes:
    return bytes((i + k) % 256 for k in range(100 + i % 50))


def test_round_trip_of_every_table(tmp_path):
    path = tmp_path / "run.taprig"
    w = SessionWriter(path, {"rig": "bench-a"})
    w.add_snapshot("rig", "bench-a.toml", "id = 'bench-a'\n")
    for i in range(50):
        w.append_chunk(chunk_payload(i), host_ns=1000 + i)
    w.add_event("note", {"text": "fan at 40 %"}, host_ns=5)
    w.add_link_event("lost", "read failed", host_ns=6)
    w.add_point("alpha 4", {"cl": 0.41}, host_ns=7)
    w.set_meta("stopped", "x")
    w.close()
    assert w.error is None and w.committed_chunks == 50
    with SessionReader(path) as r:
        assert r.meta["rig"] == "bench-a" and r.meta["format_version"] == str(FORMAT_VERSION)
        chunks = list(r.chunks(batch=7))
        assert [c.data for c in chunks] == [chunk_payload(i) for i in range(50)]
        assert [c.host_ns for c in chunks] == list(range(1000, 1050))
        assert r.chunk_summary() == (50, sum(len(chunk_payload(i)) for i in range(50)), 1000, 1049)
        assert r.events()[0].data == {"text": "fan at 40 %"}
        assert r.link_events()[0].kind == "lost"
        assert r.points()[0].kind == "alpha 4"
        assert r.snapshots("rig") == [("rig", "bench-a.toml", "id = 'bench-a'\n")]
        assert r.integrity_check() == "ok"


def test_never_overwrites(tmp_path):
    path = tmp_path / "run.taprig"
    path.write_bytes(b"precious")
    with pytest.raises(SessionError, match="already exists"):
        SessionWriter(path, {})
    assert path.read_bytes() == b"precious"


WRITER_CHILD = textwrap.dedent(
    """
    import sys, time
    from taprig.session.store import SessionWriter
    sys.path.insert(0, {testdir!r})
    from test_store import chunk_payload
    w = SessionWriter({path!r}, {{"rig": "kill-test"}}, commit_interval_s=0.05)
    reported = 0
    i = 0
    while True:
        w.append_chunk(chunk_payload(i), host_ns=i)
        i += 1
        if w.committed_chunks != reported:
            reported = w.committed_chunks
            print(reported, flush=True)
        time.sleep(0.0005)
    """
)


@pytest.mark.skipif(os.name != "posix", reason="kill -9 is POSIX")
def test_kill_minus_nine_keeps_every_committed_chunk(tmp_path):
    path = tmp_path / "killed.taprig"
    code = WRITER_CHILD.format(path=str(path), testdir=os.path.dirname(__file__))
    child = subprocess.Popen([sys.executable, "-c", code], stdout=subprocess.PIPE, text=True)
    try:
        committed = 0
        for line in child.stdout:  # the child reports each commit; kill it mid-stream after a few
            committed = int(line)
            if committed >= 300:
                break
        child.send_signal(signal.SIGKILL)
        child.wait(timeout=10)
    finally:
        if child.poll() is None:
            child.kill()
    assert committed >= 300
    with SessionReader(path) as r:
        assert r.integrity_check() == "ok"
        chunks = list(r.chunks())
        assert len(chunks) >= committed
        assert all(c.data == chunk_payload(c.host_ns) for c in chunks)
        assert [c.host_ns for c in chunks] == list(range(len(chunks)))


def test_disk_full_stops_recording_keeps_what_was_committed(tmp_path):
    path = tmp_path / "small.taprig"
    w = SessionWriter(path, {}, commit_interval_s=0.01, max_file_bytes=64 * 1024)
    for i in range(20):
        w.append_chunk(chunk_payload(i), host_ns=i)
    w.close()
    assert w.error is None
    # The second writer fills its cap: it must stop with a message, not raise to the caller.
    path2 = tmp_path / "full.taprig"
    w2 = SessionWriter(path2, {}, commit_interval_s=0.01, max_file_bytes=1024 * 1024)
    big = bytes(range(256)) * 40
    for i in range(300):
        w2.append_chunk(big, host_ns=i)
    w2.close()
    assert w2.error is not None and "disk is full" in w2.error and str(path2) in w2.error
    assert w2.dropped_chunks > 0
    w2.append_chunk(b"late", host_ns=999)  # after the error: counted, not raised
    with SessionReader(path2) as r:
        assert r.integrity_check() == "ok"
        n, _, _, _ = r.chunk_summary()
        assert n == w2.committed_chunks > 0


def test_not_a_session(tmp_path):
    bogus = tmp_path / "notes.txt"
    bogus.write_text("hello")
    with pytest.raises(SessionError, match="not a taprig session file"):
        SessionReader(bogus)
    with pytest.raises(SessionError, match="no such session file"):
        SessionReader(tmp_path / "missing.taprig")
    other = tmp_path / "other.db"
    sqlite3.connect(other).execute("CREATE TABLE t (x)").connection.close()
    with pytest.raises(SessionError, match="missing tables"):
        SessionReader(other)


def test_truncated_file(tmp_path):
    path = tmp_path / "run.taprig"
    w = SessionWriter(path, {})
    for i in range(400):
        w.append_chunk(chunk_payload(i) * 10, host_ns=i)
    w.close()
    data = path.read_bytes()
    cut = tmp_path / "cut.taprig"
    cut.write_bytes(data[: len(data) // 3])
    with pytest.raises(SessionError, match="damaged|truncated"):
        with SessionReader(cut) as r:
            list(r.chunks())
            assert r.integrity_check() == "ok"


def test_newer_format_is_refused(tmp_path):
    path = tmp_path / "future.taprig"
    w = SessionWriter(path, {})
    w.set_meta("format_version", str(FORMAT_VERSION + 1))
    w.close()
    with pytest.raises(SessionError, match="newer than this taprig reads"):
        SessionReader(path)


def test_a_slow_disk_holds_the_producer_back_and_loses_nothing(tmp_path):
    # Queued-but-uncommitted bytes are bounded: append_chunk waits rather than letting memory grow.
    w = SessionWriter(tmp_path / "slow.taprig", {}, commit_interval_s=0.05, max_queued_bytes=1000)
    for i in range(60):
        w.append_chunk(chunk_payload(i), host_ns=i)
    w.close()
    assert w.waits > 0 and w.committed_chunks == 60 and w.error is None
    with SessionReader(tmp_path / "slow.taprig") as r:
        assert [c.data for c in r.chunks()] == [chunk_payload(i) for i in range(60)]


def test_a_directory_is_not_a_session_file(tmp_path):
    with pytest.raises(SessionError, match="is a directory; expected a session file"):
        SessionReader(tmp_path)


def test_a_good_session_on_read_only_storage_is_read_not_called_damaged():
    """A shared folder handed to a class: neither the file nor its folder may be written (SQLite cannot make its
    shared-memory file there). Checked as a user without write access (root ignores permissions, so as root the
    reader runs as nobody)."""
    import shutil
    import subprocess
    import sys
    import tempfile
    from pathlib import Path

    if os.name != "posix":
        pytest.skip("POSIX permissions")
    as_root = os.geteuid() == 0
    if as_root and shutil.which("setpriv") is None:
        pytest.skip("running as root without setpriv to drop the privileges")
    share = Path(tempfile.mkdtemp(prefix="taprig-share-"))
    try:
        path = share / "class.taprig"
        w = SessionWriter(path, {"rig_id": "r"})
        w.append_chunk(b"\x00abc", 1)
        w.close()
        assert not Path(f"{path}-wal").exists()
        path.chmod(0o444)
        share.chmod(0o555)
        code = ("import sys; from taprig.session.store import SessionReader\n"
                "with SessionReader(sys.argv[1]) as r: print(r.meta['rig_id'], r.chunk_summary()[0])")
        cmd = [sys.executable, "-c", code, str(path)]
        if as_root:
            cmd = ["setpriv", "--reuid=65534", "--regid=65534", "--clear-groups", *cmd]
        done = subprocess.run(cmd, capture_output=True, text=True, timeout=60, cwd="/")
        assert done.returncode == 0, done.stderr
        assert done.stdout.split() == ["r", "1"]
        assert not Path(f"{path}-wal").exists() and not Path(f"{path}-shm").exists()  # nothing written there
    finally:
        share.chmod(0o755)
        shutil.rmtree(share)
