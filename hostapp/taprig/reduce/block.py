"""The reduced block: calibrated pressures, Cp, q, speed, Re, Mach, plain coefficients and flags per scan.

A :class:`ReducedBlock` is a frozen value: every array is read-only, so a hub can hand the same block to many
readers. :meth:`ReducedBlock.to_columns` flattens it into named 1-D arrays for export (CSV, Parquet).
"""

from __future__ import annotations

from dataclasses import dataclass, fields

import numpy as np

from taprig.reduce.flags import ChannelFlag, ScanFlag, count_flags


def frozen_array(value) -> np.ndarray | None:
    """``value`` as a read-only numpy array (None stays None); the value types hold only these."""
    if value is None:
        return None
    arr = np.asarray(value)
    if arr.flags.writeable:
        arr = arr.view()
        arr.setflags(write=False)
    return arr


def finite_mean(values) -> float:
    """Mean of the finite entries of ``values`` (NaN marks no flow or an unusable sample); NaN when there are
    none or ``values`` is None.

    >>> finite_mean([1.0, float("nan"), 3.0]), finite_mean([float("nan")])
    (2.0, nan)
    """
    if values is None:
        return float("nan")
    values = np.asarray(values, dtype=float)
    finite = values[np.isfinite(values)]
    return float(finite.mean()) if finite.size else float("nan")


@dataclass(frozen=True, eq=False)
class ReducedBlock:
    """One block of scans, reduced. Arrays are per scan (``scans``), per scan and channel (``scans × channels``,
    in the block's column order) or per scan and tap (``scans × taps``, in the rig's integration order).

    Attributes
    ----------
    t_ns, scan_index : int64 (scans,)
        Device time [ns] and scan index, copied from the raw block.
    channels, column_names : tuple
        Device index of each column of ``p_pa`` and its name (the tap's name for a tap channel, else the channel's).
    tap_names : tuple of str
        Tap of each column of ``cp`` (contour order for sections, station order for a venturi).
    p_pa : (scans, channels)
        Calibrated channel values [Pa] (a force channel holds newtons).
    cp : (scans, taps)
        Pressure coefficient (p − p∞)/q [-]; NaN where the scan has no flow, the reference is invalid or the tap's
        sample is unusable.
    q_pa, v_ms, re, mach, alpha_rad : (scans,)
        Dynamic pressure [Pa], speed [m/s], Reynolds number on the reference length [-], Mach number [-] (NaN in
        water), angle of attack [rad].
    cl, cd_p, cm_qc : (scans,)
        Plain-trapezoid section lift, pressure drag and quarter-chord moment coefficients [-] (NaN where the rig
        has no section integral).
    lift_n, cl_balance : (scans,) or None
        Balance lift [N] and L/(q c b) [-], when the rig has a lift balance.
    mass_flow_kg_s : (scans,) or None
        Venturi mass flow per ISO 5167-4 [kg/s].
    cp_ideal : (taps,) or None
        Venturi ideal station Cp, 1 − (A_ref/A)² [-].
    scan_flags : uint16 (scans,)
        :class:`ScanFlag` bits.
    channel_flags : uint8 (scans, channels)
        :class:`ChannelFlag` bits.
    """

    t_ns: np.ndarray
    scan_index: np.ndarray
    channels: tuple[int, ...]
    column_names: tuple[str, ...]
    tap_names: tuple[str, ...]
    p_pa: np.ndarray
    cp: np.ndarray
    q_pa: np.ndarray
    v_ms: np.ndarray
    re: np.ndarray
    mach: np.ndarray
    alpha_rad: np.ndarray
    cl: np.ndarray
    cd_p: np.ndarray
    cm_qc: np.ndarray
    scan_flags: np.ndarray
    channel_flags: np.ndarray
    lift_n: np.ndarray | None = None
    cl_balance: np.ndarray | None = None
    mass_flow_kg_s: np.ndarray | None = None
    cp_ideal: np.ndarray | None = None
    force_channels: tuple[int, ...] = ()
    #: What the numbers assume (the freestream static's source, the calibration's state …), for people.
    assumptions: tuple[str, ...] = ()
    #: A few words on the freestream static pressure in force, for a live line (``p∞ = room − 1.1q (suction)``).
    reference_note: str = ""
    #: "" when the calibration passed its own checks (or none is used); else the warning every output must show.
    calibration_warning: str = ""

    def __post_init__(self) -> None:
        for f in fields(self):
            value = getattr(self, f.name)
            if isinstance(value, np.ndarray):
                object.__setattr__(self, f.name, frozen_array(value))

    @property
    def n_scans(self) -> int:
        """Number of scans in the block."""
        return int(self.t_ns.shape[0])

    def flag_counts(self) -> dict[str, int]:
        """How many scans carry each :class:`ScanFlag` (only flags that occur)."""
        return count_flags(self.scan_flags, ScanFlag)

    def channel_flag_counts(self) -> dict[str, dict[str, int]]:
        """Per channel name, how many samples carry each :class:`ChannelFlag` (channels with none left out)."""
        out = {}
        flagged = np.bitwise_or.reduce(self.channel_flags, axis=0) if self.channel_flags.shape[0] else ()
        for col in np.flatnonzero(flagged):  # only the columns with a flag need counting
            out[self.column_names[col]] = count_flags(self.channel_flags[:, col], ChannelFlag)
        return out

    def to_columns(self) -> dict[str, np.ndarray]:
        """Named 1-D arrays, one row per scan, for export.

        Keys: ``t_ns``, ``scan_index``, ``q_pa``, ``v_ms``, ``re``, ``mach``, ``alpha_deg``, ``cl``, ``cd_p``,
        ``cm_qc``, ``flags``, then ``lift_n``/``cl_balance`` and ``mass_flow_kg_s`` when present, ``cp.<tap>`` per
        tap, and ``p_pa.<tap>`` for a tap's channel, ``p_pa.<channel>`` for other pressure channels,
        ``force_n.<channel>`` for force channels.
        """
        cols: dict[str, np.ndarray] = {
            "t_ns": self.t_ns, "scan_index": self.scan_index, "q_pa": self.q_pa, "v_ms": self.v_ms,
            "re": self.re, "mach": self.mach, "alpha_deg": np.degrees(self.alpha_rad), "cl": self.cl,
            "cd_p": self.cd_p, "cm_qc": self.cm_qc, "flags": self.scan_flags,
        }
        for name in ("lift_n", "cl_balance", "mass_flow_kg_s"):
            if getattr(self, name) is not None:
                cols[name] = getattr(self, name)
        for i, tap in enumerate(self.tap_names):
            cols[f"cp.{tap}"] = self.cp[:, i]
        for col, label in enumerate(self.column_labels()):
            cols[label] = self.p_pa[:, col]
        return cols

    def column_labels(self) -> tuple[str, ...]:
        """Export label of each column of ``p_pa`` (see :meth:`to_columns`)."""
        labels = []
        for index, name in zip(self.channels, self.column_names):
            prefix = "force_n" if index in self.force_channels else "p_pa"
            labels.append(f"{prefix}.{name}")
        return tuple(labels)
