"""Soak: the dashboard served over a live simulated run while viewers keep connecting and leaving.

Bounded by TAPRIG_SOAK_SECONDS of wall time (CI runs a short form; an hour is
``TAPRIG_SOAK_SECONDS=3600 make soak``). Checks that memory stays flat with viewers coming and going, that every
stream is let go when its viewer leaves, and that the recording never gaps or loses a scan meanwhile.
"""

from __future__ import annotations

import http.client
import os
import threading
import time
import tracemalloc
from pathlib import Path

import pytest

from taprig.link import Link
from taprig.reduce import Reducer
from taprig.rig import load_rig
from taprig.runtime.acquisition import Acquisition
from taprig.runtime.recording import new_session
from taprig.runtime.station import Station
from taprig.web.app import Sources
from taprig.web.server import serve

pytestmark = pytest.mark.soak

RIG = Path(__file__).resolve().parents[2] / "rigs" / "naca0012-20tap.toml"
SECONDS = float(os.environ.get("TAPRIG_SOAK_SECONDS", "120"))


def _viewer(host: str, port: int, key: str, frames: int) -> None:
    """One viewer: open the event stream, read a few updates, leave."""
    conn = http.client.HTTPConnection(host, port, timeout=20)
    conn.request("GET", f"/api/live/stream?key={key}")
    resp = conn.getresponse()
    assert resp.status == 200
    seen = 0
    while seen < frames:
        line = resp.fp.readline()
        if not line:
            break
        seen += line.startswith(b"data: ")
    conn.close()


def test_memory_stays_flat_with_viewers_coming_and_going(tmp_path):
    rig = load_rig(RIG)
    url = f"sim://{RIG}?seed=21&speed=4&watchdog_ms=0"
    reducer = Reducer(rig)
    acq = Acquisition(Link(url, heartbeat=False), rig, reducer, new_session(tmp_path / "soak.taprig", rig, url,
                                                                            reducer.ambient))
    acq.open(500)
    station = Station(acq)
    dashboard = serve(Sources(station, None), "127.0.0.1", 0, tries=1)
    key = dashboard.keys.view
    traced, visits = [], 0
    tracemalloc.start()
    try:
        acq.set_actuator("fan", 0.7)
        deadline = time.monotonic() + SECONDS
        while time.monotonic() < deadline:
            crowd = [threading.Thread(target=_viewer, args=("127.0.0.1", dashboard.port, key, 5)) for _ in range(10)]
            for t in crowd:
                t.start()
            for t in crowd:
                t.join(60)
            visits += len(crowd)
            traced.append(tracemalloc.get_traced_memory()[0] / 2**20)
        counters = acq.link.counters.as_dict()
        # every stream lets its subscription go at its next write after its viewer left
        with acq.hub.subscribe() as sub:
            for _ in range(100):
                if station.frames.subscriber_count == 0:
                    break
                sub.get(timeout=0.1)
        left_open = station.frames.subscriber_count
    finally:
        tracemalloc.stop()
        dashboard.close()
        station.close()
        acq.close()
    print(f"\n{visits} viewer visits in {SECONDS:g} s; traced memory {traced[0]:.1f} → {traced[len(traced) // 2]:.1f} → {traced[-1]:.1f} MiB "
          f"(peak {max(traced):.1f})")
    assert visits >= 50
    assert counters["gaps"] == 0 and counters["scans_lost"] == 0
    # flat: after the first round (imports, caches), growth stays within a few MiB however long it runs
    assert traced[-1] - traced[min(1, len(traced) - 1)] < 8.0
    assert left_open == 0
