"""Fixtures for the simulator tests: a scripted host that drives a SimulatedDevice on an explicit clock."""

from __future__ import annotations

from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest

from taprig.protocol import RawBlock, Reply, StreamDecoder, encode_message
from taprig.rig.loader import load_rig
from taprig.sim import SimOptions, SimulatedDevice

RIGS = Path(__file__).resolve().parents[2] / "rigs"
#: Options of a noiseless, lag-free, drift-free board whose fan and servo move at once.
IDEAL = SimOptions(noise=0.0, thermal=False, lag=False, fan_tau=0.0, fan_rate=0.0, angle_rate_deg=0.0)


class ScriptedHost:
    """Sends commands to a device, steps its clock and keeps everything it sent back, decoded."""

    def __init__(self, device: SimulatedDevice):
        self.device = device
        self.decoder = StreamDecoder()
        self.items: list = []
        self.raw = bytearray()
        self._seq = 0

    def send(self, *messages) -> None:
        """Encode and hand the messages to the device at its current time."""
        for msg in messages:
            self.device.receive(encode_message(msg, self._seq))
            self._seq += 1

    def step(self, seconds: float, chunk_s: float | None = None) -> list:
        """Advance the device's clock by ``seconds`` (in ``chunk_s`` steps) and decode what it sent."""
        end = self.device.now_ns + int(seconds * 1e9)
        step = int((chunk_s or seconds) * 1e9)
        new = []
        while self.device.now_ns < end:
            self.device.produce_until(min(end, self.device.now_ns + step))
            data = self.device.read()
            self.raw += data
            new += self.decoder.feed(data)
        self.items += new
        return new

    def blocks(self, items=None) -> RawBlock | None:
        """All sample blocks among ``items`` (default: everything so far), concatenated; None if there are none."""
        found = [i for i in (self.items if items is None else items) if isinstance(i, RawBlock)]
        return RawBlock.concat(found) if found else None

    def replies(self) -> list[Reply]:
        """Every REPLY received so far."""
        return [i for i in self.items if isinstance(i, Reply)]

    def values(self, block: RawBlock) -> dict[str, np.ndarray]:
        """Each rig channel of ``block`` converted to SI with the rig's own transfer function."""
        rig = self.device.rig
        out = {}
        for column, index in enumerate(block.channels):
            ch = next((c for c in rig.channels if c.index == index), None)
            if ch is not None:
                out[ch.name] = rig.sensors[ch.sensor].counts_to_si(block.counts[:, column])
        return out


@pytest.fixture(scope="session")
def rigs():
    """Load an example rig by file stem (cached for the session)."""
    cache = {}

    def load(stem: str):
        if stem not in cache:
            cache[stem] = load_rig(RIGS / f"{stem}.toml")
        return cache[stem]

    return load


@pytest.fixture
def host(rigs):
    """``host(stem, **options)``: a ScriptedHost on a fresh device of that rig (options over IDEAL's)."""

    def make(stem: str, base: SimOptions = IDEAL, **options) -> ScriptedHost:
        return ScriptedHost(SimulatedDevice(rigs(stem), replace(base, **options)))

    return make


@pytest.fixture
def host_of():
    """``host_of(rig, **options)``: a ScriptedHost on a fresh device of a Rig object (options over IDEAL's)."""

    def make(rig, base: SimOptions = IDEAL, **options) -> ScriptedHost:
        return ScriptedHost(SimulatedDevice(rig, replace(base, **options)))

    return make
