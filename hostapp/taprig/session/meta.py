"""Session metadata that more than one part reads: the ambient conditions, stored as text in ``meta``.

Keys (docs/session-format.md): ``ambient_pressure_pa``, ``ambient_temperature_k``, ``ambient_relative_humidity``,
``ambient_co2_fraction``; values are ``repr`` of the float, so they read back bit for bit and a replay reduces
with exactly the live run's fluid properties.
"""

from __future__ import annotations

import json

from taprig.protocol import ActuatorInfo, ActuatorKind, ChannelInfo, Description, Encoding
from taprig.reduce import Ambient

_KEYS = {
    "pressure": "ambient_pressure_pa",
    "temperature": "ambient_temperature_k",
    "relative_humidity": "ambient_relative_humidity",
    "co2_fraction": "ambient_co2_fraction",
}


def ambient_to_meta(ambient: Ambient) -> dict[str, str]:
    """Ambient conditions → meta rows (exact: ``repr`` of each float)."""
    return {key: repr(float(getattr(ambient, field))) for field, key in _KEYS.items()}


def ambient_from_meta(meta: dict[str, str]) -> Ambient | None:
    """Meta rows → ambient conditions; ``None`` when the session stored none (then the rig's defaults apply)."""
    if _KEYS["pressure"] not in meta:
        return None
    values = {field: float(meta[key]) for field, key in _KEYS.items() if key in meta}
    return Ambient(**values)


def description_from_meta(meta: dict[str, str]) -> Description | None:
    """The board's self-description stored in ``meta`` (``device_description``, JSON), or None if absent or unreadable.

    A recording started mid-run has no DESCRIPTION frame among its bytes; its samples decode with this one.
    """
    try:
        d = json.loads(meta["device_description"])
        channels = tuple(ChannelInfo(c["name"], Encoding(c["encoding"])) for c in d["channels"])
        actuators = tuple(ActuatorInfo(a["id"], ActuatorKind(a["kind"]), a["min"], a["max"], a["safe"], a["unit"],
                                       a["name"]) for a in d["actuators"])
        return Description(d["proto_major"], d["proto_minor"], d["firmware"], d["uid"], d["rate_min_hz"],
                           d["rate_max_hz"], d["max_frame"], d["heartbeat_timeout_ms"], channels, actuators)
    except (KeyError, TypeError, ValueError):
        return None
