"""Recovering the intact rows of a damaged session into a new file, with what was lost counted."""

from __future__ import annotations

from pathlib import Path

import pytest

from taprig.cli import main
from taprig.session.recover import recover_session
from taprig.session.store import SessionError, SessionReader, SessionWriter


def damaged_session(tmp_path) -> tuple[Path, int]:
    path = tmp_path / "run.taprig"
    w = SessionWriter(path, {"rig_id": "r"})
    n = 400
    for i in range(n):
        w.append_chunk(bytes([i % 251]) * 1000, i)
    w.add_event("note", {"text": "kept"}, 5)
    w.close()
    size = path.stat().st_size
    with open(path, "r+b") as fh:  # a bad stretch in the middle of the file (a sector gone bad, say)
        fh.seek(size // 2)
        fh.write(b"\xff" * 8192)
    return path, n


def test_the_intact_rows_are_copied_and_the_loss_counted(tmp_path):
    path, n = damaged_session(tmp_path)
    with pytest.raises(SessionError, match="taprig recover"):  # refused whole, with the way out named
        with SessionReader(path) as r:
            list(r.chunks())
    counts = recover_session(path, tmp_path / "recovered.taprig")
    assert counts["chunks"]["lost"] > 0 and counts["chunks"]["kept"] > 0
    assert counts["chunks"]["kept"] + counts["chunks"]["lost"] == n
    with SessionReader(tmp_path / "recovered.taprig") as r:
        assert r.integrity_check() == "ok"
        chunks = list(r.chunks())
        assert len(chunks) == counts["chunks"]["kept"]
        assert all(c.data == bytes([c.host_ns % 251]) * 1000 for c in chunks)  # each row intact, or not there
        assert r.meta["rig_id"] == "r" and "recovery" in r.meta


def test_the_command_line(tmp_path, capsys):
    path, _ = damaged_session(tmp_path)
    assert main(["recover", str(path), "-o", str(tmp_path / "new.taprig")]) == 0
    out = capsys.readouterr().out
    assert "could not be read" in out and "chunks" in out
    assert main(["recover", str(path), "-o", str(tmp_path / "new.taprig")]) == 1  # never overwrites
    assert "already exists" in capsys.readouterr().err
