"""Fixtures for the link tests: pseudo-terminals with a fake board on the master side.

The tests run with ``--import-mode=importlib``, so the helper module is loaded by file path and registered as
``link_fakedevice`` for the test modules to import.
"""

from __future__ import annotations

import importlib.util
import sys
from pathlib import Path

import pytest

_spec = importlib.util.spec_from_file_location("link_fakedevice", Path(__file__).with_name("fakedevice.py"))
fakedevice = importlib.util.module_from_spec(_spec)
sys.modules.setdefault("link_fakedevice", fakedevice)
_spec.loader.exec_module(sys.modules["link_fakedevice"])


@pytest.fixture
def ptys():
    """Make pseudo-terminals on demand (``ptys()``); all are closed after the test."""
    made = []

    def make():
        pty = sys.modules["link_fakedevice"].Pty()
        made.append(pty)
        return pty

    yield make
    for pty in made:
        pty.close()


@pytest.fixture
def devices():
    """Make fake boards on demand (``devices(pty, start=True, behaviour=..., description=...)``); all stopped after."""
    started = []

    def make(pty, start=True, **kwargs):
        device = sys.modules["link_fakedevice"].FakeDevice(pty, **kwargs)
        started.append(device)
        return device.start() if start else device

    yield make
    for device in started:
        device.stop()


@pytest.fixture
def links():
    """Make :class:`taprig.link.Link` objects on demand; every one is closed after the test (no stray threads)."""
    from taprig.link import Link

    made = []

    def make(port, **kwargs):
        kwargs.setdefault("settle_s", 0.0)
        kwargs.setdefault("handshake_timeout_s", 2.0)
        kwargs.setdefault("describe_interval_s", 0.1)
        kwargs.setdefault("backoff_initial_s", 0.02)
        kwargs.setdefault("backoff_max_s", 0.2)
        link = Link(port, **kwargs)
        made.append(link)
        return link

    yield make
    for link in made:
        link.close()
        assert not link.running, "a link thread outlived close()"
