"""``taprig check RIG...``: validate rig files and print what each rig is and can compute, or every error.

``--draw FILE.png|FILE.svg`` also draws the rig (:mod:`taprig.cli.rig_drawing`), even one whose tables disagree,
with the suspicious things marked; the rig is still refused (exit 1) when it has errors.
"""

from __future__ import annotations

import math

from pathlib import Path

from taprig.cli import UserError, bounded
from taprig.rig import Rig, RigError, load_rig
from taprig.rig.loader import load_rig_unchecked
from taprig.rig.picture import rig_picture


def register(sub) -> None:
    p = sub.add_parser("check", help="validate rig files; print a summary or every error (exit 1 if any is invalid)")
    p.add_argument("rigs", nargs="+", metavar="RIG", help="rig file(s) (TOML)")
    p.add_argument("--quiet", "-q", action="store_true", help="print only errors")
    p.add_argument("--draw", metavar="FILE", help="draw the rig to FILE (.png or .svg): the model to scale in its "
                                                  "walls, every tap with its channel, what looks wrong marked")
    p.add_argument("--alpha-deg", type=bounded(-90, 90, "deg"), metavar="DEG",
                   help="with --draw: the angle of attack to draw an airfoil at (default 0)")
    p.set_defaults(func=run)


def _fmt_range(lo: float, hi: float, unit: str) -> str:
    return f"{lo:g} .. {hi:g} {unit}"


def _sensor_lines(rig: Rig) -> list[str]:
    lines = []
    for name, s in rig.sensors.items():
        users = sum(1 for c in rig.channels if c.sensor == name)
        lines.append(
            f"  {name:<14} {s.kind:<15} {_fmt_range(*s.range, s.unit):<22} ±{s.accuracy_pct_fs:g} % FS "
            f"(u = {s.accuracy:.3g} {s.unit}), {users} channel(s)"
        )
    return lines


def _channel_lines(rig: Rig) -> list[str]:
    lines = []
    for c in sorted(rig.channels, key=lambda c: c.index):
        what = "" if c.measures is None else c.measures.value
        if c.relative_to:
            what += f" to {c.relative_to}"
        quantity = rig.sensors[c.sensor].quantity.value
        lines.append(f"  {c.index:>3}  {c.name:<14} {c.encoding.name.lower():<4} {c.sensor:<14} {quantity:<9} {what}")
    return lines


def _tap_lines(rig: Rig) -> list[str]:
    if not rig.taps:
        return []
    layout = rig.tap_layout()
    lines = [f"taps ({len(layout.names)}, in integration order):"]
    for i, name in enumerate(layout.names):
        if layout.x_c is not None:
            where = f"x/c {layout.x_c[i]:.4f}  y/c {layout.y_c[i]:+.4f}  {'upper' if layout.upper[i] else 'lower'}"
        elif layout.area is not None:
            where = f"x {layout.x[i] * 1e3:8.2f} mm  area {layout.area[i] * 1e6:9.2f} mm²"
        elif layout.theta is not None:
            where = f"θ {math.degrees(layout.theta[i]):7.2f}°"
        else:
            where = ""
        lines.append(f"  {name:<10} ch {layout.channels[i]:>2}  {where}")
    return lines


def _geometry_line(rig: Rig) -> str:
    g = rig.geometry
    parts = [f"{label} {getattr(g, key) * 1e3:g} mm" for key, label in
             (("chord", "chord"), ("span", "span"), ("diameter", "diameter"),
              ("tunnel_height", "tunnel height"), ("tunnel_width", "tunnel width")) if getattr(g, key) is not None]
    if g.area_table is not None:
        parts.append(f"area table of {len(g.area_table.x)} stations")
    if rig.section is not None:
        parts.append(f"section {rig.section.shape.name}")
    return "geometry: " + (", ".join(parts) or "none")


def _assumptions(rig: Rig) -> tuple[str, ...]:
    """What a reduction of this rig assumes (the freestream static's source first), or why it cannot reduce."""
    from taprig.reduce import ReduceError
    from taprig.reduce.layout import rig_layout

    try:
        return rig_layout(rig, 101325.0).assumptions
    except ReduceError as exc:
        return (f"cannot reduce: {exc}",)


def _prediction_lines(rig: Rig) -> list[str]:
    """u(q), u(Cp) and what the rig's kind computes (u(Cl), u(Cd) or the mass flow's u) at the rig's design speed
    (taprig.sim.predict, which asks the reduction), with a warning for each shortfall."""
    from taprig.reduce import ReduceError
    from taprig.sim.predict import predict

    try:
        p = predict(rig)
    except ReduceError as exc:
        return [f"predicts: {exc}"]
    def pair(nominal: float, zeroed: float, fmt: str) -> str:
        def one(x: float) -> str:  # NaN: the 95 % interval reaches "no flow" (q itself uncertain past zero)
            return f"{x:{fmt}}" if math.isfinite(x) else "unbounded (q may be zero)"
        return f"{one(nominal)} nominal, {one(zeroed)} after a wind-off zero"
    at = f"α {math.degrees(p.alpha_rad):g}°, " if p.has_angle else ""
    lines = [f"predicts at the design speed {p.speed:g} m/s ({at}datasheet bands, standard uncertainties): "
             f"q {p.q:.4g} Pa, u(q) {pair(p.u_q, p.u_q_zeroed, '.3g')} Pa"]
    shown = []
    if math.isfinite(p.u_cp_zeroed):
        lines.append(f"  largest u(Cp) {pair(p.u_cp, p.u_cp_zeroed, '.3f')}")
        shown.append("u(Cp)")
    if math.isfinite(p.u_cl_zeroed):
        lines.append(f"  u(Cl) {pair(p.u_cl, p.u_cl_zeroed, '.3f')}")
        shown.append("u(Cl)")
    if math.isfinite(p.u_cd_zeroed):
        lines.append(f"  u(Cd) {pair(p.u_cd, p.u_cd_zeroed, '.4f')}")
        shown.append("u(Cd)")
    if math.isfinite(p.mass_flow) and math.isfinite(p.u_mass_flow_zeroed):
        u_flow = pair(p.u_mass_flow * 1e3, p.u_mass_flow_zeroed * 1e3, ".3g")
        lines.append(f"  mass flow {p.mass_flow * 1e3:.4g} g/s (ISO 5167-4), u {u_flow} g/s")
    if p.held_exact:
        cp = f", largest u(Cp) {p.u_cp_sensors:.3f}" if math.isfinite(p.u_cp_sensors) else ""
        lines.append(f"  the sensors' own share after a zero ({'; '.join(p.held_exact)} held exact): "
                     f"u(q) {p.u_q_sensors:.3g} Pa{cp}")
    if shown:
        what = ", ".join(shown)
        methods = {"nominal": p.method, "after a zero": p.method_zeroed}
        if len(set(methods.values())) == 1:
            lines.append(f"  {what} propagated by {p.method}")
        else:
            lines += [f"  {what} {when} propagated by {m}" for when, m in methods.items()]
    lines += [f"WARNING: {w}" for w in p.warnings]
    return lines


def summary(rig: Rig) -> str:
    """The text ``taprig check`` prints for a valid rig."""
    ref = rig.reference
    refs = [f"{k} = {getattr(ref, k)}" for k in ("static", "total", "pitot", "atmosphere", "inlet") if getattr(ref, k)]
    if ref.pitot:
        refs.append(f"pitot coefficient {ref.pitot_coefficient:g}")
    fluid = rig.fluid.medium.value
    if rig.fluid.temperature is not None:
        fluid += f" at {rig.fluid.temperature - 273.15:g} °C"
    lines = [f"rig {rig.id!r}: {rig.name} ({rig.kind.value}, {fluid})"]
    if rig.description:
        lines.append(f"  {rig.description}")
    lines += [f"sensors ({len(rig.sensors)}):"] + _sensor_lines(rig)
    lines += [f"channels ({len(rig.channels)}):"] + _channel_lines(rig)
    lines += _tap_lines(rig)
    lines.append("references: " + (", ".join(refs) or "none"))
    lines += [f"assumes: {sentence}" for sentence in _assumptions(rig)]
    lines += _prediction_lines(rig)
    lines.append(_geometry_line(rig))
    if rig.balance is not None:
        lines.append("balance: " + ", ".join(f"{k} = {getattr(rig.balance, k)}" for k in ("lift", "drag") if getattr(rig.balance, k)))
    for a in rig.actuators:
        lo, hi, safe = (a.to_device(v) for v in (a.min, a.max, a.safe))
        unit = "deg" if a.unit == "rad" else a.unit
        lines.append(f"actuator {a.id} {a.name!r} ({a.kind.name.lower()}): {lo:g} .. {hi:g} {unit}, safe {safe:g}")
    lines.append("can compute: " + (", ".join(rig.capabilities()) or "raw pressures only"))
    lines += [f"look at: {p.text}" for p in rig_picture(rig).problems]
    return "\n".join(lines)


def _draw(args) -> int:
    from taprig.cli.rig_drawing import SUFFIXES, draw_rig

    if len(args.rigs) != 1:
        raise UserError("--draw draws one rig; give one RIG", 2)
    out = Path(args.draw)
    if out.suffix.lower() not in SUFFIXES:
        raise UserError(f"--draw {out}: can draw to .png or .svg", 2)
    if out.is_dir():
        raise UserError(f"--draw {out} is a directory; give a file name such as {out / 'rig.png'}")
    rig, problems = load_rig_unchecked(args.rigs[0])  # a RigError here (a table itself invalid) is not drawable
    picture = rig_picture(rig, math.radians(args.alpha_deg or 0.0))
    try:
        draw_rig(picture, out)
    except OSError as exc:
        raise UserError(f"--draw {out}: cannot write: {exc.strerror or exc}") from None
    if problems is None and not args.quiet:
        print(summary(rig))
        print()
    marked = sum(bool(t.problems) for t in picture.taps)
    print(f"drew {out}: {len(picture.taps)} taps, {marked} marked, {len(picture.problems)} thing(s) to look at")
    if problems is not None:
        raise UserError(str(problems))
    return 0


def run(args) -> int:
    if args.alpha_deg is not None and not args.draw:
        raise UserError("--alpha-deg needs --draw", 2)
    if args.draw:
        try:
            return _draw(args)
        except RigError as exc:
            raise UserError(str(exc)) from None
    failures = []
    for path in args.rigs:
        try:
            rig = load_rig(path)
        except RigError as exc:
            failures.append(str(exc))
            continue
        if not args.quiet:
            print(summary(rig))
            print()
    if failures:
        raise UserError("\n".join(failures))
    return 0
