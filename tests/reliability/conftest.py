"""The reliability campaign's scale and figures.

``TAPRIG_RELIABILITY=full`` runs the full campaign (docs/reliability.md gives the command and its figures); by
default the tests marked ``reliability`` run a short form bounded to tens of seconds. Each campaign test reports
its figures through the ``figure`` fixture: printed (``-s`` shows them) and, with
``TAPRIG_RELIABILITY_REPORT=FILE``, appended to FILE as JSON lines.
"""

from __future__ import annotations

import json
import os

import pytest

FULL = os.environ.get("TAPRIG_RELIABILITY", "short") == "full"


def scale(short, full):
    """The short-form size, or the full campaign's."""
    return full if FULL else short


@pytest.fixture
def figure(request):
    """``figure(name, value, unit="", **detail)``: report one measured figure of the campaign."""
    def report(name: str, value, unit: str = "", **detail) -> None:
        record = {"test": request.node.name, "name": name, "value": value, "unit": unit,
                  "form": "full" if FULL else "short", **detail}
        print(f"\n[reliability] {name}: {value} {unit} {detail if detail else ''}".rstrip())
        path = os.environ.get("TAPRIG_RELIABILITY_REPORT")
        if path:
            with open(path, "a", encoding="utf-8") as fh:
                fh.write(json.dumps(record, default=str) + "\n")

    return report
