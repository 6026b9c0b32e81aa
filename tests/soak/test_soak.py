"""Soak: a long run of the simulated bench rig in compressed time, with link faults and board resets, recorded.

Bounded by TAPRIG_SOAK_SECONDS of wall time (CI runs a short form). Checks what hours of running would break:
the host's counters equal what the simulator injected, the session is sound and replays to the same counters,
streaming resumes after every reset, and memory stays flat.
"""

from __future__ import annotations

import os
import time
import tracemalloc
from pathlib import Path

import psutil
import pytest
import serial

from taprig.link import Link
from taprig.reduce import Reducer
from taprig.rig import load_rig
from taprig.runtime.acquisition import Acquisition, AcquisitionError
from taprig.runtime.recording import new_session
from taprig.runtime.sweep import wait_device_time
from taprig.session.replay import Replay
from taprig.session.store import SessionReader

pytestmark = pytest.mark.soak

RIG = Path(__file__).resolve().parents[2] / "rigs" / "bench-64.toml"
SECONDS = float(os.environ.get("TAPRIG_SOAK_SECONDS", "120"))


def test_soak_with_faults(tmp_path):
    ports = []

    def opener(url):
        port = serial.serial_for_url(url, timeout=0.05)
        ports.append(port)
        return port

    rig = load_rig(RIG)
    reducer = Reducer(rig)
    writer = new_session(tmp_path / "soak.taprig", rig, "sim", reducer.ambient, rig_source=str(RIG))  # + tap CSV
    url = f"sim://{RIG}?seed=11&speed=max&watchdog_ms=0&ber=3e-7&burst_rate=0.05&reset=200,900"
    acq = Acquisition(Link(url, heartbeat=False, opener=opener), rig, reducer, writer)
    acq.open(2000)
    rss, traced = [], []
    deadline = time.monotonic() + SECONDS
    tracemalloc.start()
    try:
        acq.set_actuator("fan", 0.5)
        while time.monotonic() < deadline:
            try:
                wait_device_time(acq, 30.0, timeout_s=120)
            except AcquisitionError:  # an injected reset halts the run: the soak plays the operator who resumes
                assert acq.halted.is_set() and "restarted" in acq.halt_reason
                acq.clear_halt()
                acq.set_actuator("fan", 0.5)
                continue
            rss.append(psutil.Process().memory_info().rss / 2**20)
            traced.append(tracemalloc.get_traced_memory()[0] / 2**20)
    finally:
        tracemalloc.stop()
        acq.close()
    assert len(ports) == 1, "the simulated link must not have dropped"
    tally = ports[0].device.tally
    live = acq.link.counters
    # Exact accounting (the simulator's tally, docs/simulator.md): every injected fault is counted once.
    assert live.crc_errors + live.framing_errors == tally.frames_corrupted
    assert live.gaps == tally.gaps and live.frames_lost == tally.frames_lost
    assert live.resets - 1 == tally.resets  # the boot at open is a reset too
    if not ports[0].device.faults.last_sample_lost:
        assert live.scans_lost == tally.scans_lost
    assert tally.frames_corrupted > 0 or SECONDS < 20  # the soak really was faulty
    # The record is sound and decodes to the live counters.
    with SessionReader(tmp_path / "soak.taprig") as reader:
        assert reader.integrity_check() == "ok"
    with Replay(tmp_path / "soak.taprig") as replay:
        scans = sum(b.raw.n_scans for step in replay for b in step.blocks)
        assert replay.counters.as_dict() == live.as_dict() and scans == acq.scans
    # Memory flat once the 30 s raw window and the caches are full (from the second sample on): what Python and
    # numpy hold must not grow beyond the bounded backlogs (the recorder's queue of at most 16 MiB of chunks and
    # the reducer's 32 chunks, both of which fill when the machine is busy); the resident size may breathe with
    # the allocator but must not run away.
    if len(traced) >= 4:
        assert max(traced[2:]) - traced[1] < 16 + 40, [round(m) for m in traced]
        assert max(rss[2:]) - rss[1] < 150, [round(m) for m in rss]
