"""Options of the simulated rig: one table that drives the ``sim://`` query parameters and the ``taprig sim`` flags.

A ``sim://`` URL names the rig file and carries the options as query parameters::

    sim://rigs/naca0012.toml?seed=7&speed=max&ber=1e-5

``parse_sim_url`` splits such a URL into the rig path and a :class:`SimOptions`; ``taprig sim`` offers the same
options as ``--flags`` (``burst_rate`` → ``--burst-rate``). Units are SI except where the name says otherwise
(``_deg``, ``_c``, ``_mm``, ``_ms``, ``_ppm``), as at every edge of taprig. ``docs/simulator.md`` lists them all.
"""

from __future__ import annotations

import math
import os

from dataclasses import dataclass, field, fields, replace
from urllib.parse import parse_qsl, quote, unquote, urlsplit

#: Environment variable naming the rig of a bare ``sim://`` URL (set by a command's ``--rig``, or by the user).
RIG_ENVIRONMENT_VARIABLE = "TAPRIG_SIM_RIG"

# Characters of a rig path left as they are in a sim:// URL: directory separators and a Windows drive colon.
_PATH_SAFE = "/:\\"


#: Largest paced speed factor; beyond it the pacing is finer than the host's clock (use ``speed=max``).
MAX_SPEED_FACTOR = 1000.0
#: Largest simulated time [s] an option may name (a year): later times never come in a run.
MAX_TIME_S = 3.2e7


def _float(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise ValueError("must be a number") from None
    if not math.isfinite(value):
        raise ValueError("must be a finite number")
    return value


def _speed(text: str) -> float:
    """``max`` → infinity (compressed time: as fast as the reader takes data), else a factor in (0, 1000]."""
    if text.strip().lower() in ("max", "fast", "inf"):
        return float("inf")
    value = _float(text)
    if not 0.0 < value <= MAX_SPEED_FACTOR:
        raise ValueError(f"must be in (0, {MAX_SPEED_FACTOR:g}] or 'max' (as fast as the host reads)")
    return value


def _times(text: str) -> tuple[float, ...]:
    """A comma-separated list of times [s], each in [0, a year]."""
    values = tuple(_float(t) for t in text.split(",") if t.strip())
    if any(not 0.0 <= v <= MAX_TIME_S for v in values):
        raise ValueError(f"times must be in [0, {MAX_TIME_S:g}] s")
    return values


def _time_or_never(text: str) -> float:
    """A time [s] in [0, a year], or a negative number for never."""
    value = _float(text)
    if value > MAX_TIME_S:
        raise ValueError(f"must be at most {MAX_TIME_S:g} s (or < 0 for never)")
    return value


def _nonnegative(text: str) -> float:
    value = _float(text)
    if not value >= 0.0:
        raise ValueError("must be >= 0")
    return value


def _fraction(text: str) -> float:
    value = _float(text)
    if not 0.0 <= value <= 1.0:
        raise ValueError("must lie in [0, 1]")
    return value


def _ranged_int(low: int, high: int, unit: str = ""):
    def parse(text: str) -> int:
        try:
            value = int(text)
        except ValueError:
            value = low - 1
        if not low <= value <= high:
            raise ValueError(f"must be a whole number in [{low}, {high}]{unit}")
        return value
    return parse


def _ranged(low: float, high: float, unit: str = ""):
    def parse(text: str) -> float:
        value = _float(text)
        if not low <= value <= high:
            raise ValueError(f"must be in [{low:g}, {high:g}]{unit}")
        return value
    return parse

def _discharge(text: str) -> float:
    value = float(text)
    if not 0.5 <= value <= 1.0:
        raise ValueError("must lie in [0.5, 1]")
    return value


def _count(text: str) -> int:
    value = int(text)
    if value < 0:
        raise ValueError("must be an integer >= 0")
    return value


def _switch(text: str) -> bool:
    word = text.strip().lower()
    if word in ("1", "on", "true", "yes"):
        return True
    if word in ("0", "off", "false", "no"):
        return False
    raise ValueError("must be 1/on/true or 0/off/false")


class OptionError(ValueError):
    """A bad option: ``name`` and ``text`` as given, ``reason`` what was expected."""

    def __init__(self, where: str, name: str, text: str, reason: str):
        super().__init__(f"{where}: option {name}={text!r} {reason}")
        self.name, self.text, self.reason = name, text, reason


def _tunnel(text: str) -> str:
    word = text.strip().lower()
    if word not in ("suction", "blower", "open-jet"):
        raise ValueError("must be suction, blower or open-jet")
    return word


def _option(default, parse, help_text: str):
    return field(default=default, metadata={"parse": parse, "help": help_text})


@dataclass(frozen=True)
class SimOptions:
    """Every option of the simulated rig, with its default (see ``docs/simulator.md``)."""

    seed: int = _option(0, _ranged_int(0, 2**32 - 1), "seed of every random draw (noise, faults); same seed, same bytes")
    speed: float = _option(1.0, _speed, "simulated time per wall time: 1 real time, 20 paced, 'max' compressed")
    noise: float = _option(1.0, _nonnegative, "scale of sensor noise and flow fluctuations (0 = none)")
    thermal: bool = _option(True, _switch, "offset drift of the sensors as the board warms up")
    lag: bool = _option(True, _switch, "pneumatic lag of the tubing")
    viscous: bool = _option(True, _switch, "viscous lift-slope reduction of the airfoil (0 = inviscid panel Cp)")
    walls: bool = _option(True, _switch, "floor and ceiling of a closed test section round an airfoil (0 = free air)")
    stall_deg: float = _option(12.0, _nonnegative, "critical angle of the airfoil above zero lift [deg]")
    venturi_c: float = _option(1.0, _discharge, "discharge coefficient of a simulated venturi (1 = ideal)")
    max_speed: float = _option(0.0, _nonnegative, "stream speed at full fan [m/s] (0 = 20 for air, 0.5 for water, "
                                                   "at most the rig's max_speed_m_s)")
    fan_tau: float = _option(1.5, _nonnegative, "time constant of the stream's response to the fan [s]")
    fan_rate: float = _option(0.5, _nonnegative, "slew-rate limit of the fan [fraction of its range per s] (0 = none)")
    angle_rate_deg: float = _option(30.0, _nonnegative, "slew-rate limit of the angle servo [deg/s] (0 = none)")
    tube_mm: float = _option(500.0, _nonnegative, "length of each tap's tubing [mm]")
    bore_mm: float = _option(1.0, _nonnegative, "inner diameter of the tubing [mm]")
    tunnel: str = _option("suction", _tunnel, "where the test-section static lies: suction (room − (1 + inlet_loss) q), "
                          "blower (room + 0.3 q) or open-jet (room)")
    inlet_loss: float = _option(0.1, _nonnegative, "total-pressure loss of a suction tunnel's inlet, × q [-]")
    ambient_pa: float = _option(101325.0, _nonnegative, "barometric pressure of the room [Pa]")
    ambient_c: float = _option(20.0, _ranged(-50.0, 100.0, " °C"), "room temperature [°C]")
    humidity: float = _option(0.5, _fraction, "relative humidity of the room [-]")
    watchdog_ms: int = _option(1000, _ranged_int(0, 65535, " ms (the protocol's u16 field)"), "heartbeat timeout advertised and enforced [ms] (0 = never trips)")
    ber: float = _option(0.0, _fraction, "bit-error rate of the link, device to host [-]")
    burst_rate: float = _option(0.0, _nonnegative, "burst drops of sample frames per second [1/s]")
    burst_frames: int = _option(5, _ranged_int(0, 1_000_000), "sample frames lost per burst")
    disconnect: float = _option(-1.0, _time_or_never, "the device vanishes after this many seconds (< 0 = never) [s]")
    reset: tuple[float, ...] = _option((), _times, "times at which the board reboots, comma-separated [s]")
    clock_ppm: float = _option(0.0, _ranged(-1e5, 1e5, " ppm"), "device crystal error: its clock runs fast by this much [ppm]")
    write_stall: float = _option(-1.0, _time_or_never, "time at which the board stops taking host bytes (< 0 = never) [s]")
    write_stall_for: float = _option(1.0, _nonnegative, "how long the write stall lasts [s]")
    boot_text: bool = _option(False, _switch, "print a line of text before the first frame after each boot")

    @classmethod
    def names(cls) -> tuple[str, ...]:
        """Names of every option, as used in URLs."""
        return tuple(f.name for f in fields(cls))

    @classmethod
    def help_of(cls, name: str) -> str:
        """One-line description of an option."""
        return {f.name: f.metadata["help"] for f in fields(cls)}[name]

    @classmethod
    def from_pairs(cls, pairs: list[tuple[str, str]], where: str) -> SimOptions:
        """Build options from (name, text) pairs; ValueError names ``where``, the option and what was expected."""
        known = {f.name: f for f in fields(cls)}
        values = {}
        for name, text in pairs:
            if name not in known:
                raise ValueError(f"{where}: unknown option {name!r}; expected one of {', '.join(known)}")
            try:
                values[name] = known[name].metadata["parse"](text)
            except ValueError as exc:
                raise OptionError(where, name, text, str(exc)) from None
        return replace(cls(), **values)


@dataclass(frozen=True)
class SimTarget:
    """A parsed ``sim://`` URL: the rig file and the options."""

    rig_path: str
    options: SimOptions


def parse_sim_url(url: str, default_rig: str | None = None) -> SimTarget:
    """Split ``sim://PATH?name=value&…`` into the rig path and the options.

    A bare ``sim://`` (no PATH) simulates ``default_rig`` (the pyserial handler passes the value of the
    ``TAPRIG_SIM_RIG`` environment variable). Raises ValueError naming the URL and what was expected.
    """
    parts = urlsplit(url)
    if parts.scheme.lower() != "sim":
        raise ValueError(f"{url!r}: expected a URL of the form sim://RIG.toml?option=value&...")
    path = unquote(parts.netloc + parts.path, errors="surrogateescape")
    if not path:
        path = default_rig or ""
    if not path:
        raise ValueError(
            f"{url!r} names no rig: give sim://PATH/TO/RIG.toml, a command's --rig RIG, "
            f"or set {RIG_ENVIRONMENT_VARIABLE}"
        )
    pairs = parse_qsl(parts.query, keep_blank_values=True, strict_parsing=False)
    return SimTarget(path, SimOptions.from_pairs(pairs, url))


def sim_url(rig_path: str, query: str = "") -> str:
    """The ``sim://`` URL of a rig file with an optional query (``name=value&…``); inverse of ``parse_sim_url``.

    The path is percent-quoted, keeping only ``/``, ``:`` and ``\\`` as they are, so a ``#``, ``?``, ``%`` or
    space in a file name reaches the rig loader unchanged instead of starting a fragment or the query.
    """
    path = quote(os.fsencode(str(rig_path)), safe=_PATH_SAFE)  # a file name that is not UTF-8 survives too
    return f"sim://{path}?{query}" if query else f"sim://{path}"


def with_rig(url: str, rig_path: str) -> str:
    """Return ``url`` with ``rig_path`` filled in when it is a bare ``sim://`` (other URLs come back unchanged).

    This is how a command with ``--rig RIG`` opens ``sim://?seed=3``: it passes ``with_rig(url, RIG)`` to
    ``serial.serial_for_url``. The path is quoted as by :func:`sim_url`.
    """
    parts = urlsplit(url)
    if parts.scheme.lower() != "sim" or parts.netloc or parts.path:
        return url
    return sim_url(rig_path, parts.query)


def to_query(options: SimOptions) -> str:
    """The query string of the options that differ from their defaults (inverse of ``parse_sim_url``)."""
    default = SimOptions()
    pairs = []
    for f in fields(SimOptions):
        value = getattr(options, f.name)
        if value == getattr(default, f.name):
            continue
        if isinstance(value, tuple):
            text = ",".join(repr(v) for v in value)
        elif isinstance(value, bool):
            text = "1" if value else "0"
        elif value == float("inf"):
            text = "max"
        else:
            text = repr(value)
        pairs.append(f"{f.name}={text}")
    return "&".join(pairs)
