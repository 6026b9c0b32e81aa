"""Session metadata that more than one part reads: the ambient conditions, stored as text in ``meta``.

Keys (docs/session-format.md): ``ambient_pressure_pa``, ``ambient_temperature_k``, ``ambient_relative_humidity``,
``ambient_co2_fraction``; values are ``repr`` of the float, so they read back bit for bit and a replay reduces
with exactly the live run's fluid properties.
"""

from __future__ import annotations

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
