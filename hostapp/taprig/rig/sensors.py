"""Sensors described by their transfer function (never by brand): counts ↔ SI value, range, accuracy, saturation.

Every kind here is affine in counts, ``value = slope · counts + intercept``, so a block of scans converts with one
multiply-add per element, and a calibration only has to move the zero and scale the slope (see
:mod:`taprig.rig.calibration`). Each kind derives ``slope`` and ``intercept`` from the parameters a datasheet gives.

Kinds (the ``kind`` key of a ``[sensors.NAME]`` table):

``ratiometric``
    An analog output proportional to the supply, ``V = Vs · (a · p + b)``, read by an ADC of ``adc_bits`` bits
    against ``adc_ref_v``: ``counts = V / Vref · 2**bits`` (common practice: one LSB is Vref / 2**bits).
``digital_bridge``
    A 14-bit digital bridge whose output spans 10–90 % or 5–95 % of the 14-bit range between ``pmin`` and
    ``pmax`` (common practice: ``p = (counts − c_lo)·(pmax − pmin)/(c_hi − c_lo) + pmin``).
``linear``
    Raw counts with a gain and offset, ``value = gain · counts + offset`` (e.g. a 24-bit bridge ADC on a load cell
    in N, or a pre-scaled pressure in Pa).
``differential``
    A differential sensor with a scale factor in counts per Pa: ``p = (counts − zero_counts) / counts_per_pa``.

Accuracy. ``accuracy_pct_fs`` is the datasheet's total error band (± % of the full-scale span). A sensor may say
how that band splits (common practice for how datasheets build a total error band): ``offset_pct_fs`` (the zero
offset, with its temperature shift; a wind-off zero removes it), ``span_pct_fs`` (the gain error at full span; a
span calibration removes it) and ``linearity_pct_fs`` (non-linearity and hysteresis; a span fit's residuals take
its place). The parts and the unattributed rest combine in quadrature to the total. Without the split the whole
band is unattributed and nothing a calibration does removes any of it. Each part is a rectangular bound
(standard uncertainty bound/√3, JCGM 100:2008 §4.3.7); see :meth:`SensorBase.datasheet_uncertainty`.
"""

from __future__ import annotations

import math
from abc import abstractmethod
from enum import Enum
from typing import Annotated, Literal, Union

import numpy as np
from numpy.typing import ArrayLike
from pydantic import AfterValidator, BaseModel, ConfigDict, Field, model_validator

# Datasheet-style 14-bit output windows of digital bridges (from memory: 0x0666–0x3999 and 0x0333–0x3CCB).
BRIDGE_WINDOWS: dict[str, tuple[int, int]] = {"10-90": (1638, 14745), "5-95": (819, 15563)}
BRIDGE_RAILS = (0, 2**14 - 1)


class Quantity(str, Enum):
    """What a sensor measures, and so the SI unit of its values."""

    PRESSURE = "pressure"
    FORCE = "force"

    @property
    def unit(self) -> str:
        """SI unit of the quantity."""
        return {"pressure": "Pa", "force": "N"}[self.value]


def _ordered(pair: tuple[float, float]) -> tuple[float, float]:
    if not pair[0] < pair[1]:
        raise ValueError(f"expected [min, max] with min < max, got [{pair[0]:g}, {pair[1]:g}]")
    return pair


def _nonzero(value: float) -> float:
    if value == 0.0:
        raise ValueError("must not be 0 (the transfer function would not be invertible)")
    return value


Range = Annotated[tuple[float, float], AfterValidator(_ordered)]
NonZero = Annotated[float, AfterValidator(_nonzero)]


class CalibrationLevel(str, Enum):
    """How far a channel has been calibrated, which decides the datasheet parts still in its uncertainty."""

    NOMINAL = "nominal"  # the datasheet transfer function: the whole band
    ZEROED = "zeroed"  # a measured zero (wind-off or no-load): the band less its offset part
    SPANNED = "spanned"  # a span fit against a reference: only the unattributed rest of the band


#: Relative tolerance on "the parts fit inside the total band" (a file's rounded figures).
_PARTS_TOLERANCE = 1e-9


class SensorBase(BaseModel):
    """Methods shared by every sensor kind; a kind supplies ``slope``, ``intercept``, ``range`` and ``rails``."""

    model_config = ConfigDict(frozen=True, extra="forbid")

    accuracy_pct_fs: float = Field(ge=0.0, le=100.0, description="± total error band [% of full-scale span]")
    offset_pct_fs: float = Field(0.0, ge=0.0, le=100.0, description="± zero-offset part of the band [% FS]")
    span_pct_fs: float = Field(0.0, ge=0.0, le=100.0, description="± span (gain) part at full span [% FS]")
    linearity_pct_fs: float = Field(0.0, ge=0.0, le=100.0, description="± non-linearity and hysteresis part [% FS]")
    description: str = ""

    @model_validator(mode="after")
    def _parts_inside_band(self) -> SensorBase:
        parts = math.sqrt(self.offset_pct_fs**2 + self.span_pct_fs**2 + self.linearity_pct_fs**2)
        if parts > self.accuracy_pct_fs * (1.0 + _PARTS_TOLERANCE):
            raise ValueError(
                f"offset_pct_fs, span_pct_fs and linearity_pct_fs combine in quadrature to {parts:.4g} % FS, more "
                f"than accuracy_pct_fs = {self.accuracy_pct_fs:g}; the parts must fit inside the total band"
            )
        return self

    # -- supplied by each kind (pydantic's model metaclass is an ABCMeta, so these are enforced) ---------------
    @property
    @abstractmethod
    def slope(self) -> float:
        """SI value per count."""

    @property
    @abstractmethod
    def intercept(self) -> float:
        """SI value at zero counts."""

    @property
    @abstractmethod
    def range(self) -> tuple[float, float]:
        """Rated measuring range [SI unit]."""

    @property
    @abstractmethod
    def rails(self) -> tuple[int, int]:
        """Lowest and highest counts the converter can output (a reading there is clipped)."""

    @property
    def quantity(self) -> Quantity:
        """What the sensor measures (pressure unless a kind says otherwise)."""
        return Quantity.PRESSURE

    # -- derived ---------------------------------------------------------------------------------------------
    @property
    def unit(self) -> str:
        """SI unit of the values (``Pa`` or ``N``)."""
        return self.quantity.unit

    @property
    def full_scale(self) -> float:
        """Full-scale span, max − min of the range [SI unit]; the base of every % FS figure."""
        return self.range[1] - self.range[0]

    @property
    def accuracy_bound(self) -> float:
        """The ± accuracy bound from the file, ``accuracy_pct_fs / 100 · full_scale`` [SI unit]."""
        return self.accuracy_pct_fs / 100.0 * self.full_scale

    @property
    def accuracy(self) -> float:
        """Standard uncertainty [SI unit]: the bound read as a rectangular distribution, bound / √3 (GUM 4.3.7)."""
        return self.accuracy_bound / math.sqrt(3.0)

    @property
    def unattributed_pct_fs(self) -> float:
        """The band's unattributed part, √(total² − offset² − span² − linearity²) [% FS]."""
        rest = self.accuracy_pct_fs**2 - self.offset_pct_fs**2 - self.span_pct_fs**2 - self.linearity_pct_fs**2
        return math.sqrt(max(rest, 0.0))

    def datasheet_uncertainty(self, level: CalibrationLevel = CalibrationLevel.NOMINAL) -> tuple[float, float]:
        r"""The datasheet's share of a reading's standard uncertainty after a calibration at ``level``.

        .. math::
            u_{const} = \frac{FS}{100\sqrt3}\sqrt{a^2 - r^2}, \qquad u_{gain} = \frac{s}{100\sqrt3}

        with a the total band, o, s, l the offset, span and linearity parts, and r² what leaves the constant
        term: s² (NOMINAL), o² + s² (ZEROED) or o² + s² + l² (SPANNED, where the calibration's own uncertainty
        takes their place and u_gain = 0). The span part is a gain error: its effect on a reading p grows with
        the reading, u_gain · |p| (an error of s % of FS at the full span), and vanishes at zero. A sensor without
        the split (o = s = l = 0) keeps its whole band as the constant term at every level.

        Parameters
        ----------
        level : CalibrationLevel
            What the channel's calibration did.

        Returns
        -------
        tuple of float
            ``(u_const, u_gain)``: a constant standard uncertainty [SI unit] and a relative one of the gain [-],
            both rectangular bounds / √3 (JCGM 100:2008 §4.3.7).
        """
        fs, root3 = self.full_scale / 100.0, math.sqrt(3.0)
        a2, o2, s2 = self.accuracy_pct_fs**2, self.offset_pct_fs**2, self.span_pct_fs**2
        if level is CalibrationLevel.SPANNED:
            return fs * self.unattributed_pct_fs / root3, 0.0
        removed = s2 + (o2 if level is CalibrationLevel.ZEROED else 0.0)
        return fs * math.sqrt(max(a2 - removed, 0.0)) / root3, self.span_pct_fs / 100.0 / root3

    def counts_to_si(self, counts: ArrayLike) -> np.ndarray:
        """Convert counts to the SI value, ``slope · counts + intercept`` (vectorised) [Pa or N]."""
        return np.asarray(counts, dtype=float) * self.slope + self.intercept

    def si_to_counts(self, value: ArrayLike) -> np.ndarray:
        """Inverse of :meth:`counts_to_si`: the (unrounded) counts of a value [Pa or N] (vectorised)."""
        return (np.asarray(value, dtype=float) - self.intercept) / self.slope

    def counts_to_pa(self, counts: ArrayLike) -> np.ndarray:
        """Counts → pressure [Pa]; refuses a force sensor so a load cell is never read as a pressure."""
        self._require_pressure()
        return self.counts_to_si(counts)

    def pa_to_counts(self, pressure: ArrayLike) -> np.ndarray:
        """Pressure [Pa] → counts; inverse of :meth:`counts_to_pa`."""
        self._require_pressure()
        return self.si_to_counts(pressure)

    @property
    def range_pa(self) -> tuple[float, float]:
        """Rated range of a pressure sensor [Pa]."""
        self._require_pressure()
        return self.range

    @property
    def full_scale_pa(self) -> float:
        """Full-scale span of a pressure sensor [Pa]."""
        self._require_pressure()
        return self.full_scale

    @property
    def accuracy_pa(self) -> float:
        """Standard uncertainty of a pressure sensor [Pa]."""
        self._require_pressure()
        return self.accuracy

    def saturated(self, counts: ArrayLike) -> np.ndarray:
        """True where a reading sits at or beyond the converter's rails (the true value is unknown there)."""
        c = np.asarray(counts, dtype=float)
        lo, hi = self.rails
        return (c <= lo) | (c >= hi)

    def out_of_range(self, counts: ArrayLike) -> np.ndarray:
        """True where the converted value lies outside the rated range (accuracy no longer specified)."""
        v = self.counts_to_si(counts)
        return (v < self.range[0]) | (v > self.range[1])

    def _require_pressure(self) -> None:
        if self.quantity is not Quantity.PRESSURE:
            raise ValueError(f"this sensor measures {self.quantity.value} in {self.unit}, not pressure")


def _integer_rails(bits: int, signed: bool) -> tuple[int, int]:
    if signed:
        return -(2 ** (bits - 1)), 2 ** (bits - 1) - 1
    return 0, 2**bits - 1


class RatiometricSensor(SensorBase):
    """Analog ratiometric sensor: ``V = Vs · (a · p + b)`` read as ``counts = V / Vref · 2**bits`` (common practice)."""

    kind: Literal["ratiometric"]
    supply_v: float = Field(gt=0.0, description="sensor supply Vs [V]")
    a_per_pa: NonZero = Field(description="sensitivity a of the transfer function [1/Pa]")
    b: float = Field(description="offset b of the transfer function [-] (output fraction of Vs at 0 Pa)")
    adc_bits: int = Field(ge=8, le=32)
    adc_ref_v: float = Field(gt=0.0, description="ADC reference voltage [V]")
    range_pa_: Range = Field(alias="range_pa", description="rated range [Pa]")

    @property
    def slope(self) -> float:
        return self.adc_ref_v / (2**self.adc_bits * self.supply_v * self.a_per_pa)

    @property
    def intercept(self) -> float:
        return -self.b / self.a_per_pa

    @property
    def range(self) -> tuple[float, float]:
        return self.range_pa_

    @property
    def rails(self) -> tuple[int, int]:
        return _integer_rails(self.adc_bits, signed=False)


class DigitalBridgeSensor(SensorBase):
    """14-bit digital bridge: ``pmin``–``pmax`` mapped onto the 10–90 % or 5–95 % window of the counts (common practice)."""

    kind: Literal["digital_bridge"]
    pmin_pa: float
    pmax_pa: float
    output: Literal["10-90", "5-95"] = "10-90"

    @model_validator(mode="after")
    def _check_order(self) -> DigitalBridgeSensor:
        _ordered((self.pmin_pa, self.pmax_pa))
        return self

    @property
    def slope(self) -> float:
        lo, hi = BRIDGE_WINDOWS[self.output]
        return (self.pmax_pa - self.pmin_pa) / (hi - lo)

    @property
    def intercept(self) -> float:
        return self.pmin_pa - self.slope * BRIDGE_WINDOWS[self.output][0]

    @property
    def range(self) -> tuple[float, float]:
        return (self.pmin_pa, self.pmax_pa)

    @property
    def rails(self) -> tuple[int, int]:
        return BRIDGE_RAILS


class LinearSensor(SensorBase):
    """Raw counts with gain and offset, ``value = gain · counts + offset``, in Pa (``*_pa`` keys) or N (``*_n`` keys)."""

    kind: Literal["linear"]
    gain_pa_per_count: NonZero | None = None
    offset_pa: float | None = None
    range_pa_: Range | None = Field(None, alias="range_pa")
    gain_n_per_count: NonZero | None = None
    offset_n: float | None = None
    range_n: Range | None = None
    adc_bits: int = Field(24, ge=8, le=32)
    signed: bool = True

    @model_validator(mode="after")
    def _one_quantity(self) -> LinearSensor:
        pressure = (self.gain_pa_per_count, self.offset_pa, self.range_pa_)
        force = (self.gain_n_per_count, self.offset_n, self.range_n)
        if any(v is not None for v in pressure) and any(v is not None for v in force):
            raise ValueError("mixes pressure keys (*_pa) and force keys (*_n); a sensor measures one quantity")
        chosen = ("gain_n_per_count", "range_n") if any(v is not None for v in force) else ("gain_pa_per_count", "range_pa")
        missing = [k for k, v in zip(chosen, (self.gain, self._range)) if v is None]
        if missing:
            raise ValueError(f"needs {' and '.join(missing)}")
        return self

    @property
    def quantity(self) -> Quantity:
        force = (self.gain_n_per_count, self.offset_n, self.range_n)
        return Quantity.FORCE if any(v is not None for v in force) else Quantity.PRESSURE

    @property
    def gain(self) -> float | None:
        """Value per count [Pa or N]."""
        return self.gain_n_per_count if self.gain_n_per_count is not None else self.gain_pa_per_count

    @property
    def _range(self) -> tuple[float, float] | None:
        return self.range_n if self.range_n is not None else self.range_pa_

    @property
    def slope(self) -> float:
        return float(self.gain)

    @property
    def intercept(self) -> float:
        offset = self.offset_n if self.quantity is Quantity.FORCE else self.offset_pa
        return offset or 0.0

    @property
    def range(self) -> tuple[float, float]:
        return self._range

    @property
    def rails(self) -> tuple[int, int]:
        return _integer_rails(self.adc_bits, self.signed)


class DifferentialSensor(SensorBase):
    """Differential sensor with a scale factor: ``p = (counts − zero_counts) / counts_per_pa`` (common practice)."""

    kind: Literal["differential"]
    counts_per_pa: NonZero
    zero_counts: float = 0.0
    range_pa_: Range = Field(alias="range_pa")
    adc_bits: int = Field(16, ge=8, le=32)
    signed: bool = True

    @property
    def slope(self) -> float:
        return 1.0 / self.counts_per_pa

    @property
    def intercept(self) -> float:
        return -self.zero_counts / self.counts_per_pa

    @property
    def range(self) -> tuple[float, float]:
        return self.range_pa_

    @property
    def rails(self) -> tuple[int, int]:
        return _integer_rails(self.adc_bits, self.signed)


Sensor = Annotated[
    Union[RatiometricSensor, DigitalBridgeSensor, LinearSensor, DifferentialSensor],
    Field(discriminator="kind"),
]
SENSOR_KINDS = frozenset({"ratiometric", "digital_bridge", "linear", "differential"})
