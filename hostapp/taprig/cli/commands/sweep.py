"""``taprig sweep``: zero, run the fan up, step the angle of attack, average a point at each, find the stall.

On a real board the fan and the servo move, so the command first asks the operator to confirm the rig is safe
(guards on, hands clear) unless ``--yes`` is given; Ctrl-C at any moment sends every actuator to its safe value.
"""

from __future__ import annotations

import math
import sys
from pathlib import Path

from taprig.cli import UserError, program_name
from taprig.cli.dashboard import add_dashboard_options
from taprig.cli.runopts import add_rig_options

SAFETY = ("Safety on a real rig: fan guards on, eye protection with compressed air, never defeat an interlock; "
          "local codes and your supervisor's rules come first (README, Safety).")


def add_sweep_options(p) -> None:
    """The options a sweep shares with ``taprig demo``."""
    p.add_argument("--fan", type=float, default=0.8, help="fan setting during the sweep, in the fan's unit (default 0.8)")
    p.add_argument("--from-deg", type=float, default=-4.0, dest="start_deg", help="first angle [°] (default −4)")
    p.add_argument("--to-deg", type=float, default=None, dest="stop_deg", help="last angle [°] (default: the servo's upper limit)")
    p.add_argument("--step-deg", type=float, default=2.0, help="angle step [°] (default 2)")
    p.add_argument("--settle", type=float, default=1.0, metavar="S", help="wait after each step before averaging [s]")
    p.add_argument("--average", type=float, default=1.0, metavar="S", help="averaging window of each point [s]")
    p.add_argument("--spin-up", type=float, default=4.0, metavar="S", help="wait for the flow after starting the fan [s]")
    p.add_argument("--no-zero", action="store_true", help="skip the wind-off zero before the fan starts")
    p.add_argument("--rate", type=float, default=500.0, metavar="HZ", help="scan rate [Hz] (default 500)")
    p.add_argument("-o", "--output", metavar="FILE", help="session file (default: sessions/<rig>-<time>.taprig)")
    add_dashboard_options(p)


def register(sub) -> None:
    p = sub.add_parser("sweep", help="angle-of-attack sweep on a board: zero, fan, points, lift curve, stall",
                       description="Zero wind-off, start the fan, step the angle-of-attack servo, capture an "
                                   "averaged point with uncertainties at each angle, and report the lift slope, "
                                   "zero-lift angle, maximum lift and stall. The whole run is recorded.")
    add_rig_options(p)
    p.add_argument("--port", required=True, metavar="PORT_OR_URL", help="serial port or URL (sim://… simulates --rig)")
    add_sweep_options(p)
    p.add_argument("--yes", action="store_true", help="do not ask before moving the fan and the servo")
    p.set_defaults(func=run)


MAX_ANGLES = 1000


def _check_numbers(args) -> None:
    """Every number of a sweep finite and in range, before anything opens or moves."""
    for flag, value in (("--from-deg", args.start_deg), ("--to-deg", args.stop_deg), ("--step-deg", args.step_deg),
                        ("--fan", args.fan), ("--settle", args.settle), ("--average", args.average),
                        ("--spin-up", args.spin_up)):
        if value is not None and not math.isfinite(value):
            raise UserError(f"{flag} must be a finite number, got {value}")
    for flag, value in (("--settle", args.settle), ("--spin-up", args.spin_up)):
        if value < 0:
            raise UserError(f"{flag} must be 0 s or more, got {value:g}")
    if args.average <= 0:
        raise UserError(f"--average must be more than 0 s, got {args.average:g}")
    if args.step_deg <= 0:
        raise UserError(f"--step-deg must be positive, got {args.step_deg:g}")


def angles(args, rig) -> list[float]:
    """The sweep's angles [rad] within the servo's limits (at most ``MAX_ANGLES``)."""
    from taprig.protocol import ActuatorKind

    _check_numbers(args)
    servo = rig.actuator_of_kind(ActuatorKind.ANGLE)
    if servo is None:
        raise UserError(f"{args.rig}: a sweep steps the angle of attack, but this rig has no angle actuator")
    stop = math.degrees(servo.max) if args.stop_deg is None else args.stop_deg
    if (stop - args.start_deg) / args.step_deg > MAX_ANGLES:
        raise UserError(f"--from-deg {args.start_deg:g} to {stop:g} in steps of {args.step_deg:g}° is more than "
                        f"{MAX_ANGLES} angles; take a larger --step-deg")
    n = int(math.floor((stop - args.start_deg) / args.step_deg + 1e-9)) + 1
    chosen = [math.radians(args.start_deg + k * args.step_deg) for k in range(max(n, 0))]
    inside = [a for a in chosen if servo.min - 1e-12 <= a <= servo.max + 1e-12]
    if len(inside) < 3:
        raise UserError(f"the sweep needs at least 3 angles within the servo's limits "
                        f"{math.degrees(servo.min):g}…{math.degrees(servo.max):g}°; check --from-deg/--to-deg")
    return inside


def _fmt(c, name: str, width: int, digits: int) -> str:
    return f"{getattr(c, name):{width}.{digits}f}" if c is not None else f"{'–':>{width}}"


def point_line(point) -> str:
    """One row of the sweep table: commanded α, q, V, Re, Cl (shape fit, wall-corrected) ± u, Cl (trapezoid)."""
    m = point.mean
    if "BEYOND_RIG" in m.flag_names:  # a speed the rig cannot make: no plain numbers
        return (f"{math.degrees(point.alpha_rad):6.1f}  IMPLAUSIBLE: q {m.q_pa:.3g} Pa is beyond what the rig can "
                "make (check the calibration and the sensors)")
    best = m.corrected or m.default
    cl = f"{best.cl:6.3f} ± {best.u_cl:5.3f}" if best is not None else f"{'–':>14}"
    return (f"{math.degrees(point.alpha_rad):6.1f}  {m.q_pa:7.1f}  {m.v_ms:5.1f}  {m.re:8.2e}  {cl:>15}  "
            f"{_fmt(m.plain, 'cl', 7, 3)}  {_fmt(best, 'cd_p', 7, 4)}  {_fmt(best, 'cm_qc', 7, 4)}")


HEADER = (f"{'α [°]':>6}  {'q [Pa]':>7}  {'V m/s':>5}  {'Re':>8}  {'Cl (fit, walls)':>15}  {'Cl trap':>7}  "
          f"{'Cd_p':>7}  {'Cm¼':>7}")


def sweep(args, port: str, stem: str | None = None, linger: bool = False) -> int:
    """Open ``port``, zero, start the fan, sweep, print the table and the lift curve; record it all.

    The dashboard shows the run (unless ``--no-dashboard``); with ``linger`` it stays up after the sweep, the
    actuators at their safe values, until Ctrl-C.
    """
    from taprig.cli.commands.record import open_run, print_summary
    from taprig.cli.runopts import load_rig_arg
    from taprig.protocol import ActuatorKind

    rig = load_rig_arg(args.rig)
    targets = angles(args, rig)  # bad ranges are refused before anything opens or moves
    fan = rig.actuator_of_kind(ActuatorKind.FAN)
    if fan is None:
        raise UserError(f"{args.rig}: this rig has no fan actuator for the sweep to start")
    if not fan.min <= args.fan <= fan.max:
        raise UserError(f"--fan {args.fan:g} is outside the fan's range {fan.min:g} … {fan.max:g} ({fan.unit})")
    acq, out = open_run(args, port, "sessions", stem=stem, rig=rig)
    station = dashboard = None
    try:
        if not args.no_dashboard:
            from taprig.cli.dashboard import start_dashboard
            from taprig.runtime.station import Station

            station = Station(acq, real_board=not port.lower().startswith("sim://"))
            station.needs_confirmation = False  # the operator confirmed at the terminal (or with --yes)
            dashboard = start_dashboard(args, station, sessions_dir=Path(out).parent)
        print(f"{acq.rig.name!r} on {acq.link.port_name} ({acq.description.firmware}, {len(acq.rig.taps)} taps), "
              f"recording to {out}")
        return _sweep_run(args, acq, fan, targets, station, linger)
    finally:
        if dashboard is not None:
            dashboard.close()
        if station is not None:
            station.close()
        acq.close()  # every actuator to its safe value, also on Ctrl-C
        print_summary(acq, out)
        me = program_name()
        print(f"next: {me} info {out}   {me} review {out}   {me} export {out} --format csv -o run.csv")


def _sweep_run(args, acq, fan, targets, station, linger: bool) -> int:
    """Zero, fan, the sweep with its table and lift curve; then, with ``linger``, keep the dashboard up."""
    from taprig.cli.live import follow
    from taprig.runtime.acquisition import AcquisitionError
    from taprig.runtime.sweep import run_sweep, sweep_lift_curve, wait_device_time

    def on_point(point) -> None:
        print(point_line(point), flush=True)
        if station is not None:
            station.add_sweep_point(point)

    try:
        wait_device_time(acq, 1.0, 20)
        if not args.no_zero:
            acq.zero(min(1.0, args.average))
            print("wind-off zero taken")
        acq.set_actuator(fan.name, args.fan)
        wait_device_time(acq, args.spin_up, 30 + args.spin_up)
        acq.check_flow(min(1.0, args.average))
        print(f"\n{HEADER}")
        points = run_sweep(acq, targets, settle_s=args.settle, average_s=args.average, on_point=on_point)
        curve = sweep_lift_curve(points)
        per_deg = math.pi / 180
        print(f"\nlift slope {curve.slope * per_deg:.4f} ± {curve.u_slope * per_deg:.4f} (scatter about the line) "
              f"per degree over "
              f"{math.degrees(curve.linear_range[0]):.1f}…{math.degrees(curve.linear_range[1]):.1f}° "
              f"(thin-airfoil theory: 0.1097), zero lift at {math.degrees(curve.alpha_zero_lift):.2f}° "
              "(angles corrected for the walls)")
        if curve.stalled:
            print(f"stall at {math.degrees(curve.alpha_stall):.1f}°, Cl max {curve.cl_max:.3f}")
        else:
            print(f"no stall within the sweep (Cl max {curve.cl_max:.3f} at {math.degrees(curve.alpha_cl_max):.1f}°)")
    except AcquisitionError as exc:
        raise UserError(str(exc)) from None
    except ValueError as exc:  # too few usable points for a lift curve
        raise UserError(f"no lift curve: {exc}") from None
    if linger and station is not None:
        for actuator in acq.rig.actuators:
            acq.set_actuator(actuator.name, actuator.safe)
        print("\nsweep done, fan and angle back at their safe values; the dashboard stays up to run the rig from "
              "the page. Ctrl-C ends.", file=sys.stderr)
        follow(acq, None, quiet=True)
    return 0


def run(args) -> int:
    print(SAFETY, file=sys.stderr)
    if not args.port.lower().startswith("sim://") and not args.yes:
        if not sys.stdin.isatty():
            raise UserError("a sweep on a real board moves the fan and the servo: confirm with --yes "
                            "(no terminal to ask at)")
        answer = input("The fan and the angle servo will move. Guards on, hands and loose items clear? [y/N] ")
        if not answer.strip().lower().startswith("y"):
            print("nothing moved", file=sys.stderr)
            return 1
    return sweep(args, args.port)
