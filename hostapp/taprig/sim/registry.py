"""Running ``taprig sim`` boards, so that ``taprig ports`` can list them beside the hardware ports.

The operating system lists serial hardware, never a pseudo-terminal, so each ``taprig sim`` announces itself: a
small JSON file ``<pid>.json`` (device path, rig id and file, process id, start time) in :func:`registry_dir`,
written when the terminal opens and removed when the simulator stops. A reader lists only entries whose process
is alive and whose device path exists, and removes the stale ones (a simulator killed with ``kill -9``).
"""

from __future__ import annotations

import json
import os
import tempfile
import time
from dataclasses import asdict, dataclass
from pathlib import Path

#: Environment variable naming the directory of the registry (tests, several users of one machine).
ENV = "TAPRIG_RUNTIME_DIR"


@dataclass(frozen=True)
class SimEntry:
    """One running simulated board."""

    device: str
    rig_id: str
    rig_file: str
    pid: int
    started_unix_s: float

    def as_dict(self) -> dict:
        """The fields as a JSON-ready dict."""
        return asdict(self)


def registry_dir() -> Path:
    """``$TAPRIG_RUNTIME_DIR/sims``, else ``$XDG_RUNTIME_DIR/taprig/sims``, else ``<temp>/taprig-<uid>/sims``."""
    if os.environ.get(ENV):
        return Path(os.environ[ENV]) / "sims"
    if os.environ.get("XDG_RUNTIME_DIR"):
        return Path(os.environ["XDG_RUNTIME_DIR"]) / "taprig" / "sims"
    uid = os.getuid() if hasattr(os, "getuid") else "user"
    return Path(tempfile.gettempdir()) / f"taprig-{uid}" / "sims"


def announce(device: str, rig_id: str, rig_file: str) -> Path | None:
    """Register this process's simulated board; returns the entry's file (None when it cannot be written:
    the simulator runs anyway, it is only not listed)."""
    entry = SimEntry(device, rig_id, str(Path(rig_file).resolve()), os.getpid(), time.time())
    folder = registry_dir()
    path = folder / f"{entry.pid}.json"
    try:
        folder.mkdir(parents=True, exist_ok=True, mode=0o700)
        partial = folder / f".{entry.pid}.json.partial"
        partial.write_text(json.dumps(entry.as_dict()), encoding="utf-8")
        os.replace(partial, path)
    except OSError:
        return None
    return path


def withdraw(path: Path | None) -> None:
    """Remove an entry written by :func:`announce` (idempotent)."""
    if path is not None:
        try:
            path.unlink()
        except OSError:
            pass


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:  # another user's process: alive
        return True
    except OSError:
        return False
    return True


def running() -> list[SimEntry]:
    """The simulated boards running now, by device path; stale entries are removed on the way."""
    folder = registry_dir()
    found = []
    try:
        files = sorted(folder.glob("*.json"))
    except OSError:
        return []
    for path in files:
        try:
            entry = SimEntry(**json.loads(path.read_text(encoding="utf-8")))
        except (OSError, ValueError, TypeError):
            continue
        if _alive(entry.pid) and os.path.exists(entry.device):
            found.append(entry)
        elif path.stem == str(entry.pid):
            withdraw(path)
    return sorted(found, key=lambda e: e.device)
