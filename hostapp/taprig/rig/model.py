"""The rig model: immutable pydantic v2 types, validated once from a rig file's tables.

Field names are SI quantities (``chord`` [m], ``theta`` [rad], ``temperature`` [K]); the file keys that fill them
carry their unit (``chord_mm``, ``theta_deg``, ``temperature_c``) and are converted by the validators in
:mod:`taprig.rig.errors`. Every table forbids unknown keys, so a misspelt key is an error, not a silent default.
The cross-checks between tables (tap → channel → sensor, references, what the kind needs) are in
:mod:`taprig.rig.checks`; :class:`Rig` runs them after the per-table validation.
"""

from __future__ import annotations

import math
from enum import Enum
from functools import cached_property
from typing import Annotated, Literal

import numpy as np
from pydantic import BaseModel, BeforeValidator, ConfigDict, Field, PrivateAttr, ValidationInfo, model_validator

from taprig.physics.sections import SectionShape, from_coordinates, naca4
from taprig.protocol import ActuatorKind, Encoding
from taprig.rig.errors import Celsius, CrossCheckFailed, Degrees, Millimetres, SquareMillimetres
from taprig.rig.sensors import Quantity, Sensor

Name = Annotated[str, Field(min_length=1, max_length=64, pattern=r"^[A-Za-z0-9_.:+-]+$")]


def _enum_by_name(enum: type, names: str):
    """A before-validator mapping a file word (``"u16"``, ``"fan"``) onto an IntEnum member, with a clear error."""

    def convert(value):
        if isinstance(value, str):
            try:
                return enum[value.strip().upper()]
            except KeyError:
                raise ValueError(f"expected one of {names}") from None
        raise ValueError(f"expected one of {names} (as text)")

    return BeforeValidator(convert)


EncodingName = Annotated[Encoding, _enum_by_name(Encoding, "i16, u16, i32, u32, f32")]
ActuatorKindName = Annotated[ActuatorKind, _enum_by_name(ActuatorKind, "fan, angle, other")]


class Frozen(BaseModel):
    """Base of every rig table: immutable, unknown keys refused."""

    model_config = ConfigDict(frozen=True, extra="forbid", populate_by_name=False)


class RigKind(str, Enum):
    """What the rig is; decides which tap keys and references it needs."""

    AIRFOIL = "airfoil"
    VENTURI = "venturi"
    CYLINDER = "cylinder"
    BUMP = "bump"
    OTHER = "other"

    @property
    def coefficients(self) -> tuple[str, ...]:
        """The coefficients taprig claims for this kind of rig (reduced-coefficient names, its headline first):
        an airfoil's Cl, Cd_p and Cm¼; a cylinder's Cd_p; none for a venturi (its flow rate instead), a bump in a
        channel (its Cp distribution) or another rig. The one place that says so: ``taprig check``'s prediction,
        the sweep table and the reduction's users ask here."""
        return _KIND_COEFFICIENTS[self]


_KIND_COEFFICIENTS = {RigKind.AIRFOIL: ("cl", "cd_p", "cm_qc"), RigKind.CYLINDER: ("cd_p",), RigKind.VENTURI: (),
                      RigKind.BUMP: (), RigKind.OTHER: ()}


class Medium(str, Enum):
    """The working fluid."""

    AIR = "air"
    WATER = "water"


class Measures(str, Enum):
    """What a pressure channel's reading is relative to."""

    ABSOLUTE = "absolute"
    GAUGE = "gauge"  # relative to the room (atmosphere)
    DIFFERENTIAL = "differential"  # relative to a named reference (``relative_to``)


class Surface(str, Enum):
    """Side of a section a tap sits on."""

    UPPER = "upper"
    LOWER = "lower"


class Fluid(Frozen):
    """Working fluid; air properties normally come live from the run, water needs its temperature."""

    medium: Medium = Medium.AIR
    temperature: Celsius | None = Field(None, alias="temperature_c", description="[K] inside, °C in the file")
    ambient_pressure: float | None = Field(None, alias="ambient_pressure_pa", gt=0.0, description="[Pa]")

    @model_validator(mode="after")
    def _water_needs_temperature(self) -> Fluid:
        if self.medium is Medium.WATER and self.temperature is None:
            raise ValueError("a water rig needs temperature_c (water density depends on it)")
        p = self.ambient_pressure
        if p is not None and not 30000.0 <= p <= 110000.0:  # a room at 300–1100 hPa (common practice)
            hint = f"; {p:g} looks like hPa: ambient_pressure_pa = {p * 100:g}" if 300.0 <= p <= 1100.0 else ""
            raise ValueError(f"ambient_pressure_pa {p:g}: no room is at that pressure (30000–110000 Pa){hint}")
        if self.medium is Medium.AIR and self.temperature is not None and not 243.15 <= self.temperature <= 333.15:
            raise ValueError(f"temperature_c {self.temperature - 273.15:g}: expected a room air temperature of "
                             "−30 to 60 °C (in °C, not kelvin or Fahrenheit)")
        return self


class Channel(Frozen):
    """One device channel: its index on the board, its encoding, its sensor and what it measures."""

    index: int = Field(ge=0, le=63)
    name: Name
    encoding: EncodingName
    sensor: Name = Field(description="name of a [sensors.NAME] table")
    measures: Measures | None = Field(None, description="required for pressure channels")
    relative_to: Name | None = Field(None, description="'static', 'total' or a channel name (differential only)")


class Tap(Frozen):
    """A pressure tap: section taps use x_c/y_c/surface, venturi stations x/area, cylinder taps theta."""

    name: Name
    channel: Name
    x_c: float | None = Field(None, ge=0.0, le=1.0, description="chordwise position [-]")
    y_c: float | None = Field(None, ge=-1.0, le=1.0, description="height over chord [-] (from the shape if absent)")
    surface: Surface | None = None
    x: Millimetres | None = Field(None, alias="x_mm", description="axial station [m]")
    area: SquareMillimetres | None = Field(None, alias="area_mm2", gt=0.0, description="flow area [m²]")
    theta: Degrees | None = Field(None, alias="theta_deg", ge=-360.0, le=360.0, description="angle from the front [rad]")


class StaticSource(str, Enum):
    """Where a rig's freestream static pressure comes from (``[reference] static_source``)."""

    CHANNEL = "channel"  # a channel's port is the freestream static (``static = "…"``)
    SUCTION = "suction"  # open-circuit suction tunnel: p0 = room − K q, so p∞ = room − (1 + K) q
    FACTOR = "factor"  # a tunnel calibration factor: room − p∞ = f q, measured once with the empty tunnel
    ROOM = "room"  # an open jet discharging into the room: p∞ = room


class Reference(Frozen):
    """Which channels give the freestream reference pressures."""

    static: Name | None = Field(None, description="channel whose port is the freestream static pressure")
    total: Name | None = Field(None, description="channel whose port is the total (pitot) pressure")
    pitot: Name | None = Field(None, description="differential channel total − static of a pitot-static probe")
    pitot_coefficient: float = Field(1.0, gt=0.0, description="q = pitot_coefficient · Δp_pitot [-]")
    atmosphere: Name | None = Field(None, description="absolute channel giving the room (barometric) pressure")
    inlet: Name | None = Field(None, description="venturi: tap name of the inlet (reference) station")
    static_source: StaticSource | None = Field(
        None, description="where the freestream static comes from when no channel is its port (see StaticSource)")
    inlet_loss: float | None = Field(None, ge=0.0, le=2.0, description="suction: total-pressure loss of the inlet, × q [-]")
    inlet_loss_u: float | None = Field(None, ge=0.0, le=1.0, description="standard uncertainty of inlet_loss [-]")
    static_factor: float | None = Field(None, ge=-5.0, le=5.0,
                                        description="factor: (p_room − p∞)/q measured with the empty tunnel [-]")
    static_factor_u: float | None = Field(None, ge=0.0, le=1.0, description="standard uncertainty of static_factor [-]")

    def static_offset(self) -> tuple[float, float] | None:
        """(f, u(f)) with p_room − p∞ = f·q for a stated room-referred static, else None (a channel, or unstated).

        ``suction``: an open-circuit tunnel drawing from the room, total pressure p0 = p_room − K q, so
        f = 1 + K; ``factor``: f measured once with the empty tunnel (docs/calibration.md); ``room``: an open jet
        discharging into the room, f = 0.
        """
        if self.static_source is StaticSource.SUCTION and self.inlet_loss is not None:
            return 1.0 + self.inlet_loss, self.inlet_loss_u or 0.0
        if self.static_source is StaticSource.FACTOR and self.static_factor is not None:
            return self.static_factor, self.static_factor_u or 0.0
        if self.static_source is StaticSource.ROOM:
            return 0.0, 0.0
        return None

    def static_short(self) -> str:
        """A few words for a live line: ``p∞ = port of p_static``, ``p∞ = room − 1.1 q (suction)`` …"""
        offset = self.static_offset()
        if self.static is not None:
            return f"p∞ port {self.static}"
        if offset is None:
            return "p∞ unstated"
        if self.static_source is StaticSource.ROOM:
            return "p∞ = room (open jet)"
        word = "suction" if self.static_source is StaticSource.SUCTION else "tunnel factor"
        return f"p∞ = room − {offset[0]:.3g}q ({word})"

    def static_statement(self) -> str:
        """One sentence for people: where the freestream static pressure comes from."""
        offset = self.static_offset()
        if self.static is not None:
            return f"freestream static pressure measured at the port of channel {self.static!r}"
        if self.static_source is StaticSource.SUCTION and offset is not None:
            return (f"freestream static = room − (1 + K)·q: open-circuit suction tunnel, inlet loss K = "
                    f"{self.inlet_loss:.3g} ± {offset[1]:.2g} (stated in the rig file, not measured)")
        if self.static_source is StaticSource.FACTOR and offset is not None:
            return (f"freestream static = room − {offset[0]:.4g}·q ± {offset[1]:.2g}·q (tunnel calibration factor "
                    f"measured with the empty tunnel)")
        if self.static_source is StaticSource.ROOM:
            return "freestream static = room pressure (open jet discharging into the room, stated in the rig file)"
        return "freestream static: not stated"


class AreaTable(Frozen):
    """Venturi flow area against axial station, interpolated linearly for taps without their own area."""

    x: tuple[Millimetres, ...] = Field(alias="x_mm", min_length=2)
    area: tuple[Annotated[SquareMillimetres, Field(gt=0.0)], ...] = Field(alias="area_mm2", min_length=2)

    @model_validator(mode="after")
    def _consistent(self) -> AreaTable:
        if len(self.x) != len(self.area):
            raise ValueError(f"x_mm has {len(self.x)} values but area_mm2 has {len(self.area)}")
        if np.any(np.diff(self.x) <= 0):
            raise ValueError("x_mm must increase strictly")
        return self

    def area_at(self, x: float) -> float:
        """Flow area at station x [m] → [m²] (linear interpolation of the table)."""
        return float(np.interp(x, self.x, self.area))


Length = Annotated[Millimetres, Field(gt=0.0)]


class Geometry(Frozen):
    """Model and tunnel dimensions [m] inside (``*_mm`` in the file)."""

    chord: Length | None = Field(None, alias="chord_mm")
    span: Length | None = Field(None, alias="span_mm")
    tunnel_height: Length | None = Field(None, alias="tunnel_height_mm")
    tunnel_width: Length | None = Field(None, alias="tunnel_width_mm")
    diameter: Length | None = Field(None, alias="diameter_mm")
    pivot_x_c: float | None = Field(None, ge=0.0, le=1.0, description="angle-of-attack pivot from the leading edge [-]")
    area_table: AreaTable | None = None


class Coordinates(Frozen):
    """An inline coordinate table (unit chord, closed contour TE → upper → LE → lower → TE)."""

    x: tuple[float, ...] = Field(min_length=5)
    y: tuple[float, ...] = Field(min_length=5)


class Section(Frozen):
    """The section's shape: a NACA 4-digit designation or a coordinate table (inline or a CSV beside the file)."""

    naca: str | None = None
    coordinates: Coordinates | None = None
    coordinates_file: str | None = None
    surface_tolerance_c: float = Field(0.005, gt=0.0, le=0.1, description="allowed |y_c − shape| of a tap [-]")

    @model_validator(mode="after")
    def _builds(self) -> Section:
        if (self.naca is None) == (self.coordinates is None):
            raise ValueError("give exactly one of naca = \"NNNN\", coordinates = {x = [...], y = [...]} or coordinates_file")
        self._build()  # a bad designation or table fails here, at parse
        return self

    def _build(self) -> SectionShape:
        try:
            if self.naca is not None:
                return naca4(self.naca)
            name = self.coordinates_file or "table"
            return from_coordinates(np.array(self.coordinates.x), np.array(self.coordinates.y), name=name)
        except ValueError as exc:
            raise ValueError(f"cannot build the section shape: {exc}") from None

    @cached_property
    def shape(self) -> SectionShape:
        """The section as a :class:`taprig.physics.sections.SectionShape` (built once)."""
        return self._build()


class Balance(Frozen):
    """Load-cell balance channels (force sensors) measuring the section's lift and drag."""

    lift: Name | None = None
    drag: Name | None = None


class Actuator(Frozen):
    """A board actuator. Angle actuators use ``*_deg`` keys (radians inside); others ``min``/``max``/``safe``."""

    id: int = Field(ge=0, le=255)
    kind: ActuatorKindName
    name: Name
    unit_: str | None = Field(None, alias="unit", description="unit of a fan/other value, e.g. 'duty' or 'rpm'")
    min_: float | None = Field(None, alias="min")
    max_: float | None = Field(None, alias="max")
    safe_: float | None = Field(None, alias="safe")
    min_deg: Degrees | None = None
    max_deg: Degrees | None = None
    safe_deg: Degrees | None = None

    @model_validator(mode="after")
    def _limits(self) -> Actuator:
        angle = self.kind is ActuatorKind.ANGLE
        want = ("min_deg", "max_deg", "safe_deg") if angle else ("min", "max", "safe")
        other = ("min", "max", "safe", "unit") if angle else ("min_deg", "max_deg", "safe_deg")
        present = {type(self).model_fields[n].alias or n for n in self.model_fields_set}  # keys as in the file
        wrong = [k for k in other if k in present]
        if wrong:
            raise ValueError(f"a {self.kind.name.lower()} actuator takes {', '.join(want)}, not {', '.join(wrong)}")
        missing = [k for k in want if k not in present]
        if missing:
            raise ValueError(f"needs {', '.join(missing)}")
        return self  # the order of the limits is a cross-check, so its message can name the exact key

    @property
    def min(self) -> float:
        """Lower limit [rad for an angle, else the actuator's unit]."""
        return self.min_deg if self.kind is ActuatorKind.ANGLE else self.min_

    @property
    def max(self) -> float:
        """Upper limit [rad for an angle, else the actuator's unit]."""
        return self.max_deg if self.kind is ActuatorKind.ANGLE else self.max_

    @property
    def safe(self) -> float:
        """Value the board falls back to when the host goes quiet [same unit as min/max]."""
        return self.safe_deg if self.kind is ActuatorKind.ANGLE else self.safe_

    @property
    def unit(self) -> str:
        """Unit of min/max/safe inside taprig: ``rad`` for an angle, else the file's unit."""
        return "rad" if self.kind is ActuatorKind.ANGLE else (self.unit_ or "")

    def to_device(self, value: float) -> float:
        """A value inside taprig → the board's unit (an angle board takes degrees, PROTOCOL.md §3)."""
        return math.degrees(value) if self.kind is ActuatorKind.ANGLE else value

    def from_device(self, value: float) -> float:
        """A value in the board's unit → taprig's unit (inverse of :meth:`to_device`)."""
        return math.radians(value) if self.kind is ActuatorKind.ANGLE else value


class Operating(Frozen):
    """What the rig is built to do: the speed its sensors are sized for and the limits past which a number is not
    believed (``[operating]``, optional)."""

    design_speed: float | None = Field(None, alias="design_speed_m_s", gt=0.0,
                                       description="speed the sensors are sized for [m/s] (taprig check predicts u there)")
    max_speed: float | None = Field(None, alias="max_speed_m_s", gt=0.0,
                                    description="highest speed the fan can make [m/s]; above 1.1× it a speed is flagged")
    max_mach: float = Field(0.3, gt=0.0, le=0.8, description="Mach number past which a value is flagged [-]")

    @model_validator(mode="after")
    def _design_within_max(self) -> Operating:
        if self.design_speed is not None and self.max_speed is not None and self.design_speed > self.max_speed:
            raise ValueError(f"design_speed_m_s {self.design_speed:g} is above max_speed_m_s {self.max_speed:g}")
        return self


class Link(Frozen):
    """How to open and re-find the board."""

    port: str | None = None
    baud: int = Field(115200, gt=0, le=50_000_000)  # above any serial bridge made; beyond it a typo
    touch_control_lines: bool = Field(False, description="False leaves DTR/RTS alone (no reset on open)")
    serial_number: str | None = None
    vid_pid: str | None = Field(None, pattern=r"^[0-9A-Fa-f]{4}:[0-9A-Fa-f]{4}$")


class Rig(Frozen):
    """The validated rig: every layer reads this, nobody re-parses the file."""

    format: Literal[1] = 1
    id: Annotated[str, Field(pattern=r"^[a-z0-9][a-z0-9_.-]{0,63}$")]
    name: str = Field(min_length=1)
    description: str = ""
    kind: RigKind
    fluid: Fluid = Fluid()
    sensors: dict[Name, Sensor] = Field(min_length=1)
    channels: tuple[Channel, ...] = Field(min_length=1)
    taps: tuple[Tap, ...] = ()
    reference: Reference = Reference()
    geometry: Geometry = Geometry()
    section: Section | None = None
    balance: Balance | None = None
    actuators: tuple[Actuator, ...] = ()
    operating: Operating = Operating()
    link: Link = Link()

    _source_text: str = PrivateAttr("")
    _attachments: dict[str, str] = PrivateAttr(default_factory=dict)

    @model_validator(mode="after")
    def _cross_check(self, info: ValidationInfo) -> Rig:
        from taprig.rig.checks import cross_check

        if info.context is not None and not info.context.get("cross_check", True):
            return self  # parse_rig_unchecked: the caller runs the cross-checks itself (to draw a faulty rig)
        issues = cross_check(self)
        if issues:
            raise CrossCheckFailed(issues)
        return self

    # -- lookups -----------------------------------------------------------------------------------------------
    @cached_property
    def _by_name(self) -> dict[str, Channel]:
        return {c.name: c for c in self.channels}

    @cached_property
    def _by_index(self) -> dict[int, Channel]:
        return {c.index: c for c in self.channels}

    def channel(self, key: str | int) -> Channel:
        """The channel with this name (str) or device index (int); KeyError names what is known."""
        table = self._by_index if isinstance(key, int) else self._by_name
        if key not in table:
            raise KeyError(f"rig {self.id!r} has no channel {key!r}; it has {', '.join(map(str, table))}")
        return table[key]

    def index_of(self, name: str) -> int:
        """Device index of the channel called ``name``."""
        return self.channel(name).index

    def sensor_of(self, key: str | int) -> Sensor:
        """The sensor of a channel (by name or device index)."""
        return self.sensors[self.channel(key).sensor]

    def actuator_of_kind(self, kind: ActuatorKind) -> Actuator | None:
        """The rig's first actuator of ``kind`` (the fan, the angle servo), or None when it has none."""
        return next((a for a in self.actuators if a.kind is kind), None)

    def is_pressure(self, key: str | int) -> bool:
        """True if the channel's sensor measures pressure."""
        return self.sensor_of(key).quantity is Quantity.PRESSURE

    @property
    def source_text(self) -> str:
        """The rig file's text exactly as parsed (the recorder stores it; replay re-parses it)."""
        return self._source_text

    @property
    def attachments(self) -> dict[str, str]:
        """Texts of the files the rig names (a coordinate CSV), by name; pass back to ``parse_rig``."""
        return dict(self._attachments)

    def tap_layout(self):
        """Tap arrays in integration order: see :func:`taprig.rig.checks.tap_layout`."""
        from taprig.rig.checks import tap_layout

        return tap_layout(self)

    def capabilities(self) -> tuple[str, ...]:
        """What this rig can compute: see :func:`taprig.rig.checks.capabilities`."""
        from taprig.rig.checks import capabilities

        return capabilities(self)

    def differences(self, description) -> list[str]:
        """Human-readable differences from a device's ``Description`` (empty when they match)."""
        from taprig.rig.checks import compare_with_description

        return compare_with_description(self, description)
