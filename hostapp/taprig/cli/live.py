"""One-line live summaries of a run for the terminal (record, demo): user units at this edge."""

from __future__ import annotations

import math
import sys
import time

import numpy as np

from taprig.reduce import ScanFlag, finite_mean
from taprig.runtime.acquisition import LiveState


def flow_parts(b) -> list[str]:
    """The flow part of a live line from reduced scans: ``q 245.1 Pa  V 20.2 m/s  Re 2.0e5  α 4.0°  Cl 0.44 …``.

    ``b`` is a :class:`~taprig.reduce.ReducedBlock` or anything with its per-scan arrays (``q_pa``, ``v_ms``,
    ``re``, ``alpha_rad``, ``cl``, ``cd_p``, ``cm_qc``, ``scan_flags``, ``mass_flow_kg_s``, ``cl_balance``) and
    its notes (``reference_note``, ``calibration_warning``). The reducer's scan flags decide: with most scans
    flagged no flow (or implausible, or reversed) the line says so in words and shows no V, Re or coefficient.
    """
    parts = [f"q {finite_mean(b.q_pa):7.1f} Pa"]
    flowing = (b.scan_flags & ScanFlag.NO_FLOW) == 0
    beyond = (b.scan_flags & ScanFlag.BEYOND_RIG) != 0
    if beyond.mean() > 0.5:  # a speed the rig cannot make: say so, show no speed, Re or coefficient
        parts.append("IMPLAUSIBLE: beyond what the rig can make (check the calibration and the sensors)")
        flowing = np.zeros_like(flowing)
    elif ((b.scan_flags & ScanFlag.REVERSED) != 0).mean() > 0.5:
        parts.append("no flow: q negative beyond its noise (pitot lines swapped?)")
        flowing = np.zeros_like(flowing)
    elif flowing.mean() > 0.5:  # speed and Re of wind-off noise (q ≈ 0, either sign) mean nothing
        parts.append(f"V {finite_mean(b.v_ms[flowing]):5.1f} m/s")
        parts.append(f"Re {finite_mean(b.re[flowing]):8.2e}")
    else:
        parts.append("no flow")
        flowing = np.zeros_like(flowing)
    alpha = finite_mean(b.alpha_rad)
    if math.isfinite(alpha):
        parts.append(f"α {math.degrees(alpha):5.1f}°")
    cl = finite_mean(b.cl[flowing]) if flowing.any() else math.nan
    if math.isfinite(cl):
        parts.append(f"Cl {cl:6.3f}  Cd_p {finite_mean(b.cd_p[flowing]):6.3f}  Cm¼ {finite_mean(b.cm_qc[flowing]):6.3f}")
    for values, fmt in ((b.mass_flow_kg_s, "ṁ {:7.3f} g/s"), (b.cl_balance, "Cl(balance) {:6.3f}")):
        value = finite_mean(values[flowing]) if values is not None and flowing.any() else math.nan
        if math.isfinite(value):
            parts.append(fmt.format(value * (1000 if fmt.startswith("ṁ") else 1)))
    if b.reference_note:
        parts.append(b.reference_note)
    if b.calibration_warning:
        parts.append("CALIBRATION FAILED ITS CHECKS")
    return parts


def live_line(state: LiveState) -> str:
    """``q 245.1 Pa  V 20.2 m/s  Re 2.0e5  α 4.0°  Cl 0.44  …  frames 1234 crc 0 gaps 0``."""
    b = state.block
    parts = flow_parts(b) if b is not None else []
    c = state.counters
    parts.append(f"frames {c.get('frames', 0)} crc {c.get('crc_errors', 0)} gaps {c.get('gaps', 0)} "
                 f"lost {c.get('scans_lost', 0)} scans")
    if state.link_state not in ("connected", "restored"):
        parts.append(f"link {state.link_state}")
    if state.recording.get("error"):
        parts.append("NOT RECORDING")
    return "  ".join(parts)


def lost_line(acquisition) -> str | None:
    """``link lost for 12 s: reconnecting …`` while the link is down, else None."""
    since = acquisition.link.lost_since_ns
    if since is None:
        return None
    return (f"link lost for {(time.time_ns() - since) / 1e9:.0f} s: reconnecting to {acquisition.link.port_name} "
            f"(the same board, by path or USB serial number; Ctrl-C ends the run)")


def follow(acquisition, duration: float | None = None, quiet: bool = False) -> None:
    """Print the live line about once a second (overwritten in place on a terminal) for ``duration`` seconds or
    until the run is asked to stop (a signal: ``Acquisition.stop_requested``) or Ctrl-C; says once when the board
    went safe on its own (recording goes on: it moves nothing). The acquisition is left open for the caller."""
    from taprig.cli.ending import emit

    sub = acquisition.hub.subscribe()
    deadline = None if duration is None else time.monotonic() + duration
    tty = sys.stderr.isatty()
    last_print = 0.0
    halt_told = False
    try:
        while (deadline is None or time.monotonic() < deadline) and not acquisition.stop_requested.is_set():
            state = sub.get(timeout=0.25)
            if acquisition.halted.is_set() and not halt_told:
                halt_told = True
                emit(("\n" if tty and not quiet else "") + f"taprig: {acquisition.halt_reason} (recording goes on)",
                     sys.stderr)
            if acquisition.failure:
                break  # recording or reduction stopped: the run ends now and its summary says why
            lost = lost_line(acquisition)
            if (state is None and lost is None) or quiet or time.monotonic() - last_print < 1.0:
                continue
            last_print = time.monotonic()
            text = lost if lost is not None else live_line(state)
            emit(("\r" if tty else "") + text, sys.stderr, end="" if tty else "\n", flush=True)
    except KeyboardInterrupt:
        pass
    finally:
        sub.close()
        if tty and not quiet:
            emit(stream=sys.stderr)
