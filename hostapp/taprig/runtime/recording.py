"""A new session file for a run: its metadata and the snapshots a replay needs (rig, section, calibration)."""

from __future__ import annotations

from pathlib import Path

from taprig.rig import Calibration, Rig, calibration_to_text
from taprig.runtime.acquisition import session_meta
from taprig.session.store import SessionWriter


def new_session(path: str | Path, rig: Rig, port: str, ambient, calibration: Calibration | None = None,
                rig_source: str = "rig", calibration_source: str = "calibration") -> SessionWriter:
    """Create the session file ``path`` with the run's metadata and the rig (and calibration) snapshots.

    Raises :class:`taprig.session.store.SessionError` when the file cannot be made (it exists, the folder is
    read-only, ...), with the reason.
    """
    writer = SessionWriter(path, session_meta(rig, port, ambient))
    writer.add_snapshot("rig", rig_source, rig.source_text)
    for name, text in (rig.attachments or {}).items():
        writer.add_snapshot("section", name, text)
    if calibration is not None:
        writer.add_snapshot("calibration", calibration_source, calibration_to_text(calibration))
    return writer
