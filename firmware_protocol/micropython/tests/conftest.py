"""Make the firmware modules importable by name, as MicroPython sees them on the board's flash (no install step),
and the shared test helpers in fw_testkit.py beside this file."""

import sys
from pathlib import Path

import pytest

TESTS_DIR = Path(__file__).resolve().parent
for folder in (TESTS_DIR.parent, TESTS_DIR):
    if str(folder) not in sys.path:
        sys.path.insert(0, str(folder))

from fw_testkit import Bench  # noqa: E402  (needs the path above)


@pytest.fixture
def bench():
    """A freshly booted device on fake hardware; its decoded boot output is in ``boot_items``."""
    rig = Bench()
    rig.boot_items = rig.boot()
    return rig
