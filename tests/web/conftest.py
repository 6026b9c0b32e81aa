"""Fixtures for the dashboard: a live station on the simulated rig (in this process, compressed time) and the
Flask app over it, called through Flask's test client."""

from __future__ import annotations

from pathlib import Path

import pytest

from taprig.link import Link
from taprig.reduce import Reducer
from taprig.rig import load_rig
from taprig.runtime.acquisition import Acquisition
from taprig.runtime.recording import new_session
from taprig.runtime.station import Station
from taprig.web.app import Keys, Sources, create_app

RIGS = Path(__file__).resolve().parents[2] / "rigs"
AIRFOIL = RIGS / "naca0012-20tap.toml"
VENTURI = RIGS / "venturi-8.toml"


def replayed_mean(session: Path, scan_index: tuple[int, int], alpha_rad: float):
    """The reducer's mean of the recorded scans ``scan_index[0]`` … ``[1]`` of ``session``, replayed from the file
    (the independent computation a display update is checked against)."""
    from taprig.protocol import RawBlock
    from taprig.session.replay import Replay

    with Replay(session) as replay:
        raws = [b.raw for s in replay for b in s.blocks]
        reducer = replay.reducer_in_force(replay.start_ns + 10**12)
    raw = RawBlock.concat(raws)
    keep = (raw.scan_index >= scan_index[0]) & (raw.scan_index <= scan_index[1])
    window = RawBlock(raw.counts[keep], raw.channels, raw.t_ns[keep], raw.scan_index[keep])
    return reducer.reduce_mean(window, alpha_rad=alpha_rad)


class Live:
    """A station on the simulated rig with the app over it, and the keys to call it."""

    def __init__(self, tmp_path: Path, rig_path: Path, query: str, real_board: bool = False, calibration=None):
        self.rig = load_rig(rig_path)
        self.url = f"sim://{rig_path}?{query}"
        self.acq = Acquisition(Link(self.url, heartbeat=False), self.rig, Reducer(self.rig, calibration))
        self.acq.open(500)
        self.sessions = tmp_path / "sessions"
        self.sessions.mkdir()
        self.count = 0

        def writer():
            self.count += 1
            return new_session(self.sessions / f"run{self.count}.taprig", self.rig, self.url, self.acq.reducer.ambient)

        self.station = Station(self.acq, new_writer=writer, real_board=real_board)
        self.keys = Keys()
        self.sources = Sources(self.station, self.sessions)
        self.app = create_app(self.sources, self.keys, log=self.log.append)
        self.client = self.app.test_client()

    log: list = []

    def post(self, path: str, body=None, key: str | None = "control", headers: dict | None = None):
        headers = dict(headers or {})
        if key is not None:
            headers["X-Taprig-Key"] = self.keys.control if key == "control" else self.keys.view if key == "view" else key
        return self.client.post(path, json=body if body is not None else {}, headers=headers)

    def get(self, path: str, key: str | None = "view"):
        headers = {"X-Taprig-Key": self.keys.view if key == "view" else self.keys.control} if key else {}
        return self.client.get(path, headers=headers)

    def close(self) -> None:
        self.sources.close()
        self.station.close()
        self.acq.close()


@pytest.fixture
def live(tmp_path):
    station = Live(tmp_path, AIRFOIL, "seed=4&speed=10&watchdog_ms=0")
    yield station
    station.close()


@pytest.fixture
def venturi(tmp_path):
    station = Live(tmp_path, VENTURI, "seed=5&speed=10&watchdog_ms=0")
    yield station
    station.close()
