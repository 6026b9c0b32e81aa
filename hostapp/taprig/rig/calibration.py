"""The calibration value type, its file format (TOML or JSON, versioned), and applying it to counts.

A channel's calibrated value is

    value = gain · slope · (counts − zero_counts)          [Pa or N]

with ``slope`` the sensor's nominal SI value per count (:mod:`taprig.rig.sensors`). So the calibration stores

- ``zero_counts``: the reading, in the channel's native counts, at zero measurand (wind off for a gauge or
  differential channel; no load for a load cell). Counts, not Pa, so a zero stays right when the gain is later
  corrected, and a session can be re-reduced with a new span and the same zero.
- ``gain``: a dimensionless correction of the nominal slope (1 = the datasheet transfer function).

and, for the uncertainty budget, the zero's standard error, the span fit's rms residual and number of points, and
``reference_u_rel``: the relative standard uncertainty the reference standard (manometer) gives the gain. That
last one is common to every channel spanned on the same manifold against the same manometer.

A channel without an entry uses its sensor's nominal transfer function (``zero_counts = −intercept/slope``,
``gain = 1``). Absolute channels are never wind-off zeroed (their zero is vacuum, not the room).
"""

from __future__ import annotations

import json
import tomllib
from collections.abc import Sequence
from dataclasses import dataclass
from datetime import datetime
from pathlib import Path
from typing import Literal

import numpy as np
from pydantic import BaseModel, ConfigDict, Field, ValidationError

from taprig.rig.errors import RigError, RigIssue, issues_from_validation
from taprig.rig.loader import WrongKindOfFile, read_text_file
from taprig.rig.model import Rig
from taprig.rig.sensors import CalibrationLevel

FORMAT_VERSION = 1


class ChannelCalibration(BaseModel):
    """Zero and gain of one channel, with the statistics of the fits that produced them."""

    model_config = ConfigDict(frozen=True, extra="forbid")

    zero_counts: float = Field(description="reading at zero measurand [counts]")
    gain: float = Field(1.0, gt=0.0, description="correction of the sensor's nominal slope [-]")
    zero_std_error: float | None = Field(None, ge=0.0, description="standard error of the zero [counts]")
    residual_rms: float | None = Field(None, ge=0.0, description="rms of the span-fit residuals [Pa or N]")
    linearity_pct_fs: float | None = Field(None, ge=0.0, description="largest span-fit residual [% FS]")
    n_points: int = Field(0, ge=0, description="span points behind the gain (0: nominal gain)")
    reference_u_rel: float | None = Field(
        None, ge=0.0, description="relative standard uncertainty of the gain from the reference standard [-]")
    flags: tuple[str, ...] = Field((), description="out-of-tolerance findings, for a person")

    @property
    def level(self) -> CalibrationLevel:
        """SPANNED after a span fit, ZEROED with a measured zero (its standard error known), else NOMINAL.

        A zero without a standard error (typed in, or from an older tool) is not trusted to have removed the
        sensor's offset: the datasheet band stays whole.
        """
        if self.n_points > 0:
            return CalibrationLevel.SPANNED
        return CalibrationLevel.ZEROED if self.zero_std_error is not None else CalibrationLevel.NOMINAL


class Calibration(BaseModel):
    """Per-channel calibration of one rig (channels keyed by channel name)."""

    model_config = ConfigDict(frozen=True, extra="forbid")

    format_version: Literal[1] = FORMAT_VERSION
    rig_id: str = Field(min_length=1)
    date: datetime
    operator_note: str = ""
    channels: dict[str, ChannelCalibration] = Field(default_factory=dict)

    def problems_with(self, rig: Rig) -> list[str]:
        """Why this calibration does not fit ``rig`` (another rig id, channels the rig lacks); [] if it fits."""
        out = []
        if self.rig_id != rig.id:
            out.append(f"calibration is for rig {self.rig_id!r}, not {rig.id!r}")
        names = {c.name for c in rig.channels}
        out += [f"calibration names channel {n!r}, which rig {rig.id!r} lacks" for n in self.channels if n not in names]
        return out

    @property
    def flagged(self) -> dict[str, tuple[str, ...]]:
        """Channels with out-of-tolerance flags → their flags."""
        return {n: c.flags for n, c in self.channels.items() if c.flags}

    def with_zero(self, zero: Calibration) -> Calibration:
        """This calibration with the zeros of ``zero`` (a fresh wind-off zero) and everything else kept.

        A channel's span (gain, fit statistics, reference uncertainty) survives a new zero: ``value = gain · slope ·
        (counts − zero_counts)``, so only ``zero_counts`` and its standard error change. Channels only ``zero``
        names are taken from it whole. Date and note are the new zero's.
        """
        channels = dict(self.channels)
        for name, new in zero.channels.items():
            old = channels.get(name)
            channels[name] = new if old is None else old.model_copy(
                update={"zero_counts": new.zero_counts, "zero_std_error": new.zero_std_error})
        return self.model_copy(update={"channels": channels, "date": zero.date, "operator_note": zero.operator_note})


@dataclass(frozen=True, eq=False)
class Conversion:
    """Per-column counts → SI conversion for one channel set: ``value = (counts − zero) · scale``."""

    channels: tuple[int, ...]
    scale: np.ndarray  # gain · slope per column [SI per count]
    zero: np.ndarray  # counts at zero measurand per column

    def apply(self, counts: np.ndarray) -> np.ndarray:
        """Convert a block (scans × columns) of counts to SI values (vectorised)."""
        return (np.asarray(counts, dtype=float) - self.zero) * self.scale


def conversion_for(rig: Rig, channels: Sequence[int], calibration: Calibration | None = None) -> Conversion:
    """Build the conversion for the device channel indices ``channels`` (e.g. ``RawBlock.channels``).

    Raises
    ------
    ValueError
        If the calibration belongs to another rig, or a channel index is not in the rig.
    """
    if calibration is not None and calibration.rig_id != rig.id:
        raise ValueError(f"calibration is for rig {calibration.rig_id!r}, not {rig.id!r}")
    scale = np.empty(len(channels))
    zero = np.empty(len(channels))
    for col, index in enumerate(channels):
        try:
            channel = rig.channel(int(index))
        except KeyError as exc:
            raise ValueError(str(exc.args[0])) from None
        sensor = rig.sensors[channel.sensor]
        entry = calibration.channels.get(channel.name) if calibration is not None else None
        scale[col] = sensor.slope * (entry.gain if entry else 1.0)
        zero[col] = entry.zero_counts if entry else -sensor.intercept / sensor.slope
    return Conversion(tuple(int(c) for c in channels), scale, zero)


def apply_calibration(
    counts: np.ndarray, rig: Rig, channels: Sequence[int], calibration: Calibration | None = None
) -> np.ndarray:
    """Counts (scans × len(channels)) → calibrated SI values [Pa or N]; pure and vectorised.

    ``value = gain · slope · (counts − zero_counts)`` per column (see the module docstring); without a calibration
    (or for a channel it does not list) the sensor's nominal transfer function.
    """
    return conversion_for(rig, channels, calibration).apply(counts)


# -- files ---------------------------------------------------------------------------------------------------------
def _toml_value(value) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, (int, float)):
        return repr(float(value)) if isinstance(value, float) else str(value)
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(_toml_value(v) for v in value) + "]"
    return json.dumps(str(value), ensure_ascii=False)  # a JSON string is a valid TOML basic string


def calibration_to_text(calibration: Calibration, fmt: Literal["toml", "json"] = "toml") -> str:
    """Serialise a calibration as TOML (the default) or JSON; :func:`calibration_from_text` reads both."""
    data = calibration.model_dump(mode="json", exclude_none=True)
    if fmt == "json":
        return json.dumps(data, indent=2, ensure_ascii=False) + "\n"
    lines = ["# taprig calibration: value = gain * slope * (counts - zero_counts); see docs/calibration.md"]
    lines += [f"{k} = {_toml_value(v)}" for k, v in data.items() if k != "channels"]
    for name, entry in data["channels"].items():
        lines += ["", f"[channels.{json.dumps(name)}]"] + [f"{k} = {_toml_value(v)}" for k, v in entry.items()]
    return "\n".join(lines) + "\n"


def _is_rig_file(data) -> bool:
    """True for the parsed text of a rig file: it has ``kind`` or ``sensors``, or ``channels`` as an array of
    tables (a calibration's ``channels`` is one table keyed by channel name, and it has neither other key)."""
    if not isinstance(data, dict):
        return False
    channels = data.get("channels")
    listed = isinstance(channels, list) and bool(channels) and all(isinstance(c, dict) for c in channels)
    return "kind" in data or "sensors" in data or listed


def calibration_from_text(text: str, source: str = "<string>", fmt: Literal["toml", "json"] | None = None) -> Calibration:
    """Parse and validate a calibration (TOML, or JSON when ``fmt="json"`` or the text starts with ``{``).

    Raises
    ------
    RigError
        Naming the source and every bad key; a :class:`~taprig.rig.loader.WrongKindOfFile` for a rig file's text.
    """
    fmt = fmt or ("json" if text.lstrip().startswith("{") else "toml")
    try:
        data = json.loads(text) if fmt == "json" else tomllib.loads(text)
    except (json.JSONDecodeError, tomllib.TOMLDecodeError) as exc:
        raise RigError(source, [RigIssue("", f"not valid {fmt.upper()}: {exc}")]) from None
    if _is_rig_file(data):
        raise WrongKindOfFile(source, "is a rig file, not a calibration (taprig calibrate writes one)")
    try:
        return Calibration.model_validate(data)
    except ValidationError as exc:
        raise RigError(source, issues_from_validation(exc)) from None


def load_calibration(path: str | Path) -> Calibration:
    """Read a calibration file (TOML or JSON, by its suffix or first character); RigError on a bad file.

    A :class:`~taprig.rig.loader.WrongKindOfFile` (a RigError) for a binary file or a rig file.
    """
    path = Path(path)
    text = read_text_file(path, "calibration file", "TOML or JSON")
    return calibration_from_text(text, str(path), "json" if path.suffix.lower() == ".json" else None)

